"""Reference estimators: Kalman filters and RTS smoothers with q fitted by likelihood, and k·x.

For each record and each prior (RW, IRW; see :mod:`accuracy.models`), the intensity
``q`` is the maximiser of the innovation log-likelihood of the readings (the truth is
never used): first on a log grid of ``q/q_ref`` spanning 18–19 decades in half-decade
steps (37–39 points), then refined by a bounded scalar search between the grid
neighbours of the best point. If the best grid point is the first or the last, the fit
is flagged as at the grid edge. The filter and smoother are then run once at that
``q``. The yardsticks take every sample as it is: no outlier rejection.

``k·x`` is the static conversion of each reading, force = stiffness × displacement.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import scipy.optimize

from accuracy.cells import Cell
from accuracy.kalman import kalman_filter, log_likelihood, rts_smoother
from accuracy.models import ForceModel, initial_state, step_table

#: log10(q/q_ref) searched, per prior.
GRID_DECADES: dict[str, tuple[float, float]] = {"RW": (-10.0, 8.0), "IRW": (-11.0, 8.0)}
#: Grid spacing, decades.
GRID_STEP_DECADES = 0.5


@dataclass(frozen=True)
class QFit:
    """Result of the likelihood fit of ``q``.

    Attributes:
        q: the fitted intensity (the model's ``q_unit``).
        log_likelihood: ℓ at ``q`` (dimensionless).
        at_edge: the best grid point was the first or the last of the grid.
        evaluations: number of filter passes spent.
    """

    q: float
    log_likelihood: float
    at_edge: bool
    evaluations: int


@dataclass(frozen=True)
class Estimate:
    """Force estimate (N) and its standard uncertainty σ (N), one per sample."""

    force_n: np.ndarray
    sigma_n: np.ndarray


@dataclass(frozen=True)
class YardstickRun:
    """A fitted reference: its model, its ``q``, live (filtered) and smoothed estimates."""

    model: ForceModel
    fit: QFit
    live: Estimate
    smoothed: Estimate


class _Prepared:
    """Everything about a record and a model that does not depend on ``q``."""

    def __init__(self, model: ForceModel, cell: Cell, t_s: np.ndarray, z_m: np.ndarray) -> None:
        self.model = model
        self.z = np.ascontiguousarray(z_m, dtype=float)
        self.kind, self.Phi, self.Q1 = step_table(model, t_s, cell.dt_s)
        self.x0, self.P0 = initial_state(model, cell, float(self.z[0]))
        self.R = cell.measurement_var_m2

    def log_likelihood(self, q: float) -> float:
        return float(
            log_likelihood(self.z, self.kind, self.Phi, self.Q1, q, self.R, self.x0, self.P0)
        )

    def filter(self, q: float) -> tuple[np.ndarray, ...]:
        return kalman_filter(self.z, self.kind, self.Phi, q * self.Q1, self.R, self.x0, self.P0)


def fit_q(prep: _Prepared, step_decades: float = GRID_STEP_DECADES) -> QFit:
    """Maximum-likelihood ``q`` for a prepared record (grid, then bounded refinement)."""
    model = prep.model
    lo, hi = GRID_DECADES[model.name]
    grid = np.arange(lo, hi + 0.5 * step_decades, step_decades)
    ll = np.array([prep.log_likelihood(model.q_ref * 10.0**u) for u in grid])
    best = int(np.argmax(ll))
    at_edge = best in (0, grid.size - 1)
    u_best, ll_best = float(grid[best]), float(ll[best])
    a = float(grid[max(best - 1, 0)])
    b = float(grid[min(best + 1, grid.size - 1)])
    res = scipy.optimize.minimize_scalar(
        lambda u: -prep.log_likelihood(model.q_ref * 10.0**u),
        bounds=(a, b),
        method="bounded",
        options={"xatol": 0.005},
    )
    if res.success and -res.fun > ll_best:
        u_best, ll_best = float(res.x), float(-res.fun)
    return QFit(model.q_ref * 10.0**u_best, ll_best, at_edge, grid.size + int(res.nfev))


def run_fitted(
    model: ForceModel,
    cell: Cell,
    t_s: np.ndarray,
    z_m: np.ndarray,
    step_decades: float = GRID_STEP_DECADES,
) -> YardstickRun:
    """Fit ``q`` on the readings ``z_m`` (m) at times ``t_s`` (s), then filter and smooth."""
    prep = _Prepared(model, cell, t_s, z_m)
    fit = fit_q(prep, step_decades)
    xf, Pf, xp, Pp, _ = prep.filter(fit.q)
    xs, Ps = rts_smoother(xf, Pf, xp, Pp, prep.kind, prep.Phi)
    live = Estimate(xf[:, 2].copy(), np.sqrt(np.maximum(Pf[:, 2, 2], 0.0)))
    smoothed = Estimate(xs[:, 2].copy(), np.sqrt(np.maximum(Ps[:, 2, 2], 0.0)))
    return YardstickRun(model, fit, live, smoothed)


def filter_at(
    model: ForceModel, cell: Cell, t_s: np.ndarray, z_m: np.ndarray, q: float
) -> Estimate:
    """Live estimate at a given ``q`` (model's unit): discretise and filter (for timing)."""
    prep = _Prepared(model, cell, t_s, z_m)
    xf, Pf, _, _, _ = prep.filter(q)
    return Estimate(xf[:, 2], np.sqrt(np.maximum(Pf[:, 2, 2], 0.0)))


def static_conversion(cell: Cell, z_m: np.ndarray) -> np.ndarray:
    """Force (N) as stiffness × reading: ``k·z``."""
    return cell.stiffness_n_per_m * np.asarray(z_m, dtype=float)


def describe_fit(run: YardstickRun) -> str:
    """``q`` with its unit, and the edge flag, for the report."""
    edge = " [AT GRID EDGE]" if run.fit.at_edge else ""
    decades = math.log10(run.fit.q / run.model.q_ref)
    return f"{run.model.name} q = {run.fit.q:.3g} {run.model.q_unit} ({decades:+.1f} dec){edge}"
