"""What the report's plots draw, read from a replay's columns a slice at a time.

`lines` gives the traces of a stretch of rows: every sample when the stretch is short
(at most ``2·bins`` rows), else the minimum and maximum of each of ``bins`` equal bins of
rows (a line through each bin's minimum then maximum, and a band from the lowest F − U
to the highest F + U), so that no spike is lost and memory does not grow with the
record. The bins are those the whole-array plots used (``numpy.linspace`` edges).
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from ui.figures import COLUMNS

__all__ = ["Lines", "expanded_u_floor", "lines", "rows_between"]


@dataclass(frozen=True)
class Lines:
    """Traces to draw, SI units: the lines share ``time_s``, the band ``band_time_s``."""

    time_s: np.ndarray
    displacement_m: np.ndarray
    force_n: np.ndarray
    static_force_n: np.ndarray  # k·x
    band_time_s: np.ndarray
    band_low_n: np.ndarray  # F − U (k = 2)
    band_high_n: np.ndarray  # F + U


def _read(replayed: Any, budget: Any, a: int, b: int) -> tuple[np.ndarray, ...]:
    t, f, u, x = (replayed.column(name).read(a, b) for name in COLUMNS)
    expanded = budget.expanded_n(f, u)
    return t, x, f, replayed.profile.plant.stiffness_n_per_m * x, f - expanded, f + expanded


def lines(replayed: Any, budget: Any, start: int, stop: int, bins: int) -> Lines:
    """The traces of rows ``[start, stop)`` (see the module docstring)."""
    n = stop - start
    if n <= 2 * bins:
        t, x, f, s, low, high = _read(replayed, budget, start, stop)
        return Lines(t, x, f, s, t, low, high)
    edges = start + np.linspace(0, n, min(n, bins) + 1).astype(np.int64)
    parts = []
    for a, b in itertools.pairwise(edges):
        t, *values = _read(replayed, budget, int(a), int(b))
        x, f, s, low, high = (np.fmin.reduce(v) for v in values)
        x_hi, f_hi, s_hi, _, high = (np.fmax.reduce(v) for v in values)
        parts.append((t[0], x, x_hi, f, f_hi, s, s_hi, low, high))
    t0, x_lo, x_hi, f_lo, f_hi, s_lo, s_hi, low, high = (
        np.array(c) for c in zip(*parts, strict=True)
    )

    def line(lo: np.ndarray, hi: np.ndarray) -> np.ndarray:
        return np.column_stack([lo, hi]).ravel()

    tt = np.repeat(t0, 2)
    return Lines(tt, line(x_lo, x_hi), line(f_lo, f_hi), line(s_lo, s_hi), t0, low, high)


def rows_between(replayed: Any, t_from: float, t_to: float) -> tuple[int, int]:
    """Rows ``[lo, hi)`` whose time is in ``[t_from, t_to)`` (``numpy.searchsorted``)."""
    from ui.column_files import searchsorted

    t = replayed.column("time_s")
    return searchsorted(t, t_from), searchsorted(t, t_to)


def expanded_u_floor(replayed: Any, budget: Any) -> float:
    """Twice the median of the finite U (k = 2) over the whole record, exact (NaN when
    none is finite)."""
    from estimator import exact_quantiles
    from estimator.columns import blocks

    f, u = replayed.column("force_n"), replayed.column("force_u_n")

    def finite() -> Any:
        for a, force in blocks(f):
            expanded = budget.expanded_n(force, u.read(a, a + force.size))
            yield expanded[np.isfinite(expanded)]

    if not any(v.size for v in finite()):
        return math.nan
    return 2.0 * float(exact_quantiles.median(finite))
