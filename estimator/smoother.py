"""Fixed-interval smoothing of a whole record, for offline use.

The live observer can only use samples up to the present; offline, the smoother also
uses every later sample, which removes the filter's lag.

1. **Outliers** are decided exactly as live (the observer's own forward pass); the
   samples it judged outliers are then treated as missing.
2. **Prior and intensity by maximum likelihood.** For each of the two continuous force
   priors of the bank — the random walk (hold model) and the integrated random walk
   (rate model) — the intensity that maximises the record's innovation log-likelihood
   ``ℓ = Σ ln p(z_k | z_1..k−1)`` is found on a log grid widened while the best value
   sits on its edge (the prediction-error decomposition; Harvey, "Forecasting,
   structural time series models and the Kalman filter", 1989, from memory), and the
   measurement noise is refined the same way; then the intensity is refined between the
   grid's neighbours by Brent's bounded search (the grid alone leaves it within a factor
   of 2, which cost up to 1.17× the RMSE of the smoother fitted continuously on a
   band-limited random load). The prior with the larger likelihood is kept.
3. **Smoothing**: the Kalman filter of that model keeps every posterior and the
   Rauch–Tung–Striebel backward pass combines them with the later samples
   (:mod:`estimator.mm_smooth_kernel` with one model is exactly that recursion).
4. **Its σ** is not the RTS covariance (right only if the load followed the fitted
   prior) but the smoother's noise part plus its plug-in bias
   (:mod:`estimator.smoother_sigma`).
5. **Where the live bank is better.** One prior fitted to a staircase must be rough
   enough for its steps, so on the holds between them it follows the noise: there the
   live multiple-model estimate states a smaller σ (on the stiff benchmark cell 0.005 N
   against the smoother's 0.09 N, both honest). Each row is taken from the live pass where
   its σ is the smaller, except within ``_GUARD`` samples, before or after, of a row
   where the live bank was not mostly in its hold model, or of a load change seen live (a
   suspect sample then used, or a jump row). The live pass sees a change a few samples
   late, and until then it shows the old level with the old σ: on the lightly damped
   benchmark cell, the first 20 samples after each corner of a ramp taken from it made
   the record 1.4–2.1 times worse than the fitted smoother, while the live rows far from
   the corners were 10 times better than the smoother's.

Innovation, NIS and flags are those of the live pass; force, its uncertainty,
displacement, velocity and the model probabilities (1 for the prior kept) are smoothed,
or the live row's where the live row is taken. A smoother that switches priors along the
record (an IMM smoother over the bank) is future work.
"""

from __future__ import annotations

import dataclasses
import itertools
import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
import scipy.optimize

from estimator.force_models import FAMILY_HOLD, FAMILY_RATE, model_tables, scaling
from estimator.loggrid import ascend
from estimator.mm_kernel import imm_block
from estimator.mm_smooth_kernel import kim_backward
from estimator.observer import (
    FLAG_GAP,
    FLAG_JUMP,
    FLAG_REJECTED,
    ForceObserver,
    judged_outliers,
)
from estimator.smoother_sigma import smoother_variance

__all__ = ["SmootherFit", "fit_prior", "smooth_record"]

_STEP = 4.0  # ratio between grid points of an intensity
_WIDEN = 12  # times a grid may move past its edge
_GUARD = 8  # samples either side of a live change or a row not mostly hold, never from live
_HOLD = 0.5  # probability of the live hold model below which a row is not taken from live


@dataclass(frozen=True)
class SmootherFit:
    """The prior the likelihood chose, its intensity, noise scale and likelihood."""

    family: int  # FAMILY_HOLD or FAMILY_RATE
    intensity: float  # N²/s (hold) or N²/s³ (rate)
    noise_scale: float  # ratio to the observer's measurement standard deviation
    log_likelihood: float


def _single(obs: ForceObserver, family: int, q: float, dts: np.ndarray) -> tuple:
    """Tables (Φ, Q, π) of one model of ``family`` with intensity ``q``, per step."""
    models = dataclasses.replace(obs.models, q_hold_n2_per_s=q, q_rate_n2_per_s3=(q,))
    PHI, Q, _ = model_tables(obs.plant, models, dts)
    j = 0 if family == FAMILY_HOLD else 1
    return PHI[:, j : j + 1].copy(), Q[:, j : j + 1].copy(), np.ones((dts.size, 1, 1))


def _filter(
    obs: ForceObserver,
    family: int,
    q: float,
    noise: float,
    z: np.ndarray,
    dts: np.ndarray,
    rows: np.ndarray,
    log: bool,
) -> tuple:
    """One-model Kalman filter of the scaled record; returns (ℓ, log arrays)."""
    PHI, Q, PI = _single(obs, family, q, dts)
    k = obs.plant.stiffness_n_per_m
    R = k * k * obs.R * noise * noise
    zs = k * z
    n = z.size
    x = np.zeros((2, 1, 4))
    z0 = float(zs[np.flatnonzero(np.isfinite(zs))[0]]) if np.isfinite(zs).any() else 0.0
    x[:, 0] = (z0, 0.0, z0, 0.0)
    s = obs.force_span_n
    P = np.zeros((2, 1, 4, 4))
    P[:, 0] = np.diag([R, s * s, s * s, s * s if family == FAMILY_RATE else 0.0])
    mu = np.ones((2, 1))
    ox, ov = np.empty((n, 4)), np.empty((n, 4))
    oy, os_, of, om, oll = (np.empty(n), np.empty(n), np.empty(n, np.int64),
                            np.empty((n, 1)), np.empty(n))  # fmt: skip
    lx = np.empty((n if log else 0, 1, 4))
    lP = np.empty((n if log else 0, 1, 4, 4))
    imm_block(zs, rows, PHI, Q, Q, PI, R, 1e12, 1e-3, 1.0, 0.0, np.zeros(1), 0.0, -1, -1,
              np.zeros(1, np.bool_), x, P, np.zeros_like(P), mu, np.zeros(4),
              ox, ov, oy, os_, of, om, oll, lx, lP)  # fmt: skip
    return float(oll.sum()), (PHI, Q, PI, lx, lP, om)


def fit_prior(obs: ForceObserver, time_s: np.ndarray, displacement_m: np.ndarray) -> SmootherFit:
    """The prior, intensity and noise scale that maximise the record's likelihood."""
    dts, rows = _steps(obs, time_s)
    z = np.asarray(displacement_m, dtype=float)
    best: SmootherFit | None = None
    starts = {FAMILY_HOLD: obs.models.q_hold_n2_per_s, FAMILY_RATE: obs.models.q_rate_n2_per_s3[0]}
    for family, q0 in starts.items():

        def ll(p: tuple[float, ...], family: int = family) -> float:
            # far out on the grid (a tiny noise after a long gap) the filter can break
            # down numerically; such a point has likelihood −∞ and the search turns back
            try:
                value = _filter(obs, family, p[0], p[1], z, dts, rows, False)[0]
            except ZeroDivisionError:
                return -math.inf
            return value if math.isfinite(value) else -math.inf

        # the intensity in coarse steps first (its optimum may be decades away)
        found = ascend(ll, (q0, 1.0), (_STEP**2, 1.1), widen=_WIDEN)
        q, noise = found.point
        q, value = _refine(lambda q, noise=noise: ll((q, noise)), q, found.value)
        fit = SmootherFit(family, q, noise, value)
        if best is None or fit.log_likelihood > best.log_likelihood:
            best = fit
    assert best is not None
    return best


def _refine(f: Callable[[float], float], q: float, value: float) -> tuple[float, float]:
    """The intensity that maximises ``f`` between ``q/_STEP`` and ``q·_STEP`` (Brent's
    bounded search on ``ln q``) and its value; ``(q, value)`` when nothing there is better."""
    worse = -value + 1e6 * (1.0 + abs(value))  # for a point whose likelihood is −∞

    def cost(u: float) -> float:
        v = f(math.exp(u))
        return -v if math.isfinite(v) else worse

    found = scipy.optimize.minimize_scalar(
        cost,
        bounds=(math.log(q / _STEP), math.log(q * _STEP)),
        method="bounded",
        options={"xatol": 0.01},
    )
    if found.success and -found.fun > value:
        return math.exp(found.x), -float(found.fun)
    return q, value


def _steps(obs: ForceObserver, time_s: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Distinct step lengths (nominal first) and each sample's row among them."""
    t = np.asarray(time_s, dtype=float)
    dt = np.empty_like(t)
    dt[0] = obs.dt_s
    dt[1:] = np.diff(t)
    nominal = np.abs(dt - obs.dt_s) <= obs.tuning.timing_tolerance * obs.dt_s
    dt[nominal] = obs.dt_s
    dts, rows = np.unique(dt, return_inverse=True)
    order = np.argsort(dts != obs.dt_s, kind="stable")  # nominal first
    rank = np.empty_like(order)
    rank[order] = np.arange(order.size)
    return dts[order], rank[rows].astype(np.int64)


def smooth_record(
    observer: ForceObserver, time_s: np.ndarray, displacement_m: np.ndarray
) -> np.ndarray:
    """Smoothed estimates of a whole record, one ``ESTIMATE_DTYPE`` row per sample.

    ``observer`` is reset and used for the live-style forward pass.
    """
    t = np.ascontiguousarray(time_s, dtype=float)
    z = np.ascontiguousarray(displacement_m, dtype=float)
    with np.errstate(invalid="ignore"):
        silences = np.flatnonzero(np.diff(t) > observer.restart_gap_s) + 1
    if silences.size:
        # the live pass starts afresh after each long silence: each stretch between them
        # is a record of its own, smoothed alone
        cuts = [0, *silences.tolist(), t.size]
        parts = [smooth_record(observer, t[a:b], z[a:b]) for a, b in itertools.pairwise(cuts)]
        for part in parts[1:]:
            part["flags"][0] |= FLAG_GAP
        return np.concatenate(parts)
    observer.reset()
    live = observer.process(t, z)
    out = live.copy()
    if t.size < 2:
        return out
    z_clean = z.copy()
    outlier = judged_outliers(live["flags"])
    z_clean[outlier] = np.nan
    fit = fit_prior(observer, t, z_clean)
    dts, rows = _steps(observer, t)
    D = scaling(observer.plant)

    def smooth(record: np.ndarray) -> np.ndarray:
        """The fitted prior's RTS smoother (its gains fixed): state (n, 4), variances."""
        _, (PHI, Q, PI, lx, lP, om) = _filter(
            observer, fit.family, fit.intensity, fit.noise_scale, record, dts, rows, True
        )
        n = t.size
        sx, sv, smu = np.empty((n, 4)), np.empty((n, 4)), np.empty((n, 1))
        kim_backward(rows, PHI, Q, PI, lx, lP, om, sx, sv, smu)
        return sx, sv

    sx, _ = smooth(z_clean)
    var = smoother_variance(
        lambda record: smooth(record)[0][:, 2],
        z_clean,
        sx[:, 0] / D[0],
        sx[:, 2],
        observer.measurement_sd_m,
    )
    out["force_n"] = sx[:, 2]
    out["force_u_n"] = np.sqrt(var)
    out["displacement_m"] = sx[:, 0] / D[0]
    out["velocity_m_s"] = sx[:, 1] / D[1]
    out["p_hold"] = float(fit.family == FAMILY_HOLD)
    out["p_rate"] = float(fit.family == FAMILY_RATE)
    out["p_jump"] = 0.0
    # where the live bank states the smaller σ, away from load changes, it is the better
    # estimate (a held load: one fitted prior must be rough enough for the steps too)
    flags = live["flags"]
    # a row is "used" unless it is a suspect then judged an outlier: an outlier is no change
    used = ~outlier
    busy = ((flags & (FLAG_REJECTED | FLAG_JUMP) != 0) | (live["p_hold"] < _HOLD)) & used
    busy = np.convolve(busy, np.ones(2 * _GUARD + 1), "same") > 0
    use_live = (live["force_u_n"] < out["force_u_n"]) & ~busy
    out[use_live] = live[use_live]
    return out
