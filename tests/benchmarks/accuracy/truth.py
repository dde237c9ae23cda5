"""Exact response of a cell to a load: ``m·x'' + b·x' + k·x = F(t)`` integrated by SciPy.

``scipy.integrate.solve_ivp`` with the 8th-order Dormand–Prince method (DOP853),
``rtol = 1e-10`` and an absolute tolerance of 1e-13 of the full-range deflection
(and of its velocity scale), restarted at every breakpoint of the load so that no step
straddles a discontinuity of F or its derivatives. Within a piece the force is read
from the left at the piece's end, so a step at the end belongs to the next piece.
The cell starts at rest at the static deflection of F(0): ``x(0) = F(0)/k``, ``v(0) = 0``.
"""

from __future__ import annotations

import itertools
import math

import numpy as np
import scipy.integrate

from accuracy.cells import Cell
from accuracy.loads import Load

RTOL = 1e-10
ATOL_FRACTION = 1e-13


def simulate(cell: Cell, load: Load, t_s: np.ndarray) -> np.ndarray:
    """Displacement (m) of ``cell`` under ``load`` at the increasing times ``t_s`` (s, ≥ 0)."""
    t_s = np.asarray(t_s, dtype=float)
    if t_s.size and (t_s[0] < 0.0 or np.any(np.diff(t_s) <= 0.0)):
        raise ValueError("t_s must be increasing and start at or after 0 s")
    m, b, k = cell.mass_kg, cell.damping_n_s_per_m, cell.stiffness_n_per_m
    scale_x = cell.force_range_n / k
    atol = ATOL_FRACTION * np.array([scale_x, scale_x * cell.omega_n_rad_s])
    end = max(load.duration_s, float(t_s[-1]) if t_s.size else 0.0)
    edges = [0.0, *[bp for bp in load.breakpoints if 0.0 < bp < end], end]
    state = np.array([float(load.force(0.0)) / k, 0.0])
    x = np.empty(t_s.size)
    for a, e in itertools.pairwise(edges):
        last_piece = e == end
        inside = (t_s >= a) & ((t_s <= e) if last_piece else (t_s < e))
        t_eval = t_s[inside]
        if e > a:
            left_of_end = math.nextafter(e, -math.inf)

            def rhs(t: float, s: np.ndarray, stop: float = left_of_end) -> list[float]:
                f = float(load.force(min(t, stop)))
                return [s[1], (f - b * s[1] - k * s[0]) / m]

            grid = np.append(t_eval, e) if (t_eval.size == 0 or t_eval[-1] < e) else t_eval
            sol = scipy.integrate.solve_ivp(
                rhs, (a, e), state, method="DOP853", rtol=RTOL, atol=atol, t_eval=grid
            )
            if not sol.success:
                raise RuntimeError(f"solve_ivp failed on [{a}, {e}] s: {sol.message}")
            x[inside] = sol.y[0, : t_eval.size]
            state = sol.y[:, -1]
        else:
            x[inside] = state[0]
    return x
