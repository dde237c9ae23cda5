"""Maximising a function of positive parameters by coordinate ascent on log grids.

Each parameter is moved by a factor (the grid step) up or down while that raises the
function; a move that would take it further than ``widen`` steps from its start, or out
of its ``limits``, is not made, and the result then says which parameter stopped at the
edge of what was searched. A second pass with the square root of each step refines the
point. Used to fit intensities and noise by the innovation likelihood (tuning and
smoothing), where the likelihood is smooth and has one maximum per parameter in practice.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass

__all__ = ["GridAscent", "ascend"]


@dataclass(frozen=True)
class GridAscent:
    """Where the ascent stopped.

    Attributes:
        point: the parameters, in the order given.
        value: the function there.
        at_edge: per parameter, True when it stopped ``widen`` steps from its start or
            where the next better step was out of its limits.
        evaluations: how many times the function was called.
    """

    point: tuple[float, ...]
    value: float
    at_edge: tuple[bool, ...]
    evaluations: int


def ascend(
    f: Callable[[tuple[float, ...]], float],
    start: Sequence[float],
    steps: Sequence[float],
    *,
    widen: int = 12,
    limits: Sequence[tuple[float, float] | None] | None = None,
) -> GridAscent:
    """Coordinate ascent of ``f`` from ``start`` (all > 0) with factors ``steps`` (> 1),
    each parameter within its ``limits`` ``(low, high)`` (None: unlimited)."""
    if len(start) != len(steps) or any(s <= 0 for s in start) or any(g <= 1 for g in steps):
        raise ValueError("ascend: give one start > 0 and one step > 1 per parameter")
    bounds = list(limits) if limits is not None else [None] * len(start)
    if len(bounds) != len(start):
        raise ValueError("ascend: give one limit (or None) per parameter")
    cache: dict[tuple[float, ...], float] = {}

    def value(p: list[float]) -> float:
        key = tuple(round(math.log(v), 9) for v in p)
        if key not in cache:
            cache[key] = f(tuple(p))
        return cache[key]

    point = list(start)
    edge = [False] * len(point)
    for factor in (1.0, 0.5):
        for axis, step in enumerate(steps):
            g = step**factor
            for _ in range(widen):
                here = value(point)
                up, down = point.copy(), point.copy()
                up[axis] *= g
                down[axis] /= g
                l_up, l_down = value(up), value(down)
                if l_up > here and l_up >= l_down:
                    better = up
                elif l_down > here:
                    better = down
                else:
                    break
                low, high = bounds[axis] or (0.0, math.inf)
                if not low <= better[axis] <= high:
                    edge[axis] = True  # still climbing, towards its limit
                    break
                point = better
            else:  # still climbing after `widen` moves
                edge[axis] = True
    return GridAscent(tuple(point), value(point), tuple(edge), len(cache))
