"""ωn and ζ from a load step: nonlinear least squares of the closed-form step response
(all three regimes) with Jacobian confidence intervals and a residual check
(docs/method-identify.md, section 2)."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import scipy.optimize
import scipy.signal
from numpy.typing import ArrayLike

from estimator.errors import EstimatorError, ParameterError
from estimator.identify.common import (
    _TAIL_FRACTION,
    _TWO_PI,
    Estimate,
    _check_resolved,
    _covariance,
    _impulse_shape,
    _noise_estimate,
    _record,
    _release_shape,
    _zeta_step,
)
from estimator.plant import Plant
from estimator.validation import finite_float as _finite

__all__ = ["STEP_PARAMETERS", "StepFitResult", "identify_step"]

#: Order of the parameters in `StepFitResult.covariance`.
STEP_PARAMETERS = ("gain_m", "natural_freq_rad_s", "damping_ratio", "start_time_s", "offset_m")


@dataclass(frozen=True, eq=False)
class StepFitResult:
    """Result of `identify_step`; times in s, displacements in m.

    Attributes:
        gain_m: static deflection of the step, m (final level − offset).
        natural_freq_rad_s: ωn, rad/s.
        damping_ratio: ζ, dimensionless.
        start_time_s: instant the step was applied, s.
        offset_m: displacement before the step, m.
        covariance: (5, 5) covariance ``s²·(JᵀJ)⁻¹`` in the order of `STEP_PARAMETERS`,
            read-only.
        dof: degrees of freedom, ``n − 5``.
        residual_rms_m: RMS of the fit residuals, m.
        noise_m: noise standard deviation estimated apart from the fit (before the step,
            or from the tail), m; NaN when there are too few quiet samples.
        lag1_autocorrelation: lag-1 autocorrelation of the residuals.
        runs_z: z-score of the Wald–Wolfowitz runs test on the residual signs.
        residual_ok: True when the residuals look white (|r1| and |z| below their limits,
            RMS no more than 1.5 times the noise where that is known).
        residual_note: what the residual check found, in words.
        force_n: the known step force, N, or None.
        stiffness_n_per_m: ``force_n/gain`` with its uncertainty, or None.
        n_samples: samples fitted.
    """

    gain_m: Estimate
    natural_freq_rad_s: Estimate
    damping_ratio: Estimate
    start_time_s: Estimate
    offset_m: Estimate
    covariance: np.ndarray
    dof: int
    residual_rms_m: float
    noise_m: float
    lag1_autocorrelation: float
    runs_z: float
    residual_ok: bool
    residual_note: str
    force_n: float | None
    stiffness_n_per_m: Estimate | None
    n_samples: int

    def __post_init__(self) -> None:
        cov = np.array(self.covariance, dtype=np.float64, copy=True)
        cov.setflags(write=False)
        object.__setattr__(self, "covariance", cov)


# Damping ratios tried for the starting values of the step fit.
_START_ZETAS = (0.01, 0.03, 0.07, 0.15, 0.3, 0.5, 0.7, 0.85, 1.0, 1.3, 1.8, 2.5, 4.0, 7.0)


def _step_model(p: np.ndarray, t: np.ndarray) -> np.ndarray:
    """``offset + gain·y(ζ, ωn·(t − t0))`` with ``y`` the unit step response (0 before t0)."""
    gain, wn, zeta, t0, offset = (float(v) for v in p)
    plant = Plant.from_modal(wn, zeta, 1.0)
    return offset + plant.step_response(t - t0, force_n=gain)


def _step_jacobian(p: np.ndarray, t: np.ndarray) -> np.ndarray:
    """Derivatives of `_step_model` by (gain, ωn, ζ, t0, offset), shape (n, 5).

    ``dy/dτ`` is the impulse shape ``h``; ζ by a central difference.
    """
    gain, wn, zeta, t0, _ = (float(v) for v in p)
    u = t - t0
    after = u > 0.0
    tau = wn * np.maximum(u, 0.0)
    y = Plant.from_modal(wn, zeta, 1.0).step_response(u)
    h = np.where(after, _impulse_shape(zeta, tau), 0.0)
    lo, hi = _zeta_step(zeta)
    d_zeta = gain * (_release_shape(lo, tau) - _release_shape(hi, tau)) * after / (hi - lo)
    return np.column_stack(
        [y, gain * np.maximum(u, 0.0) * h, d_zeta, -gain * wn * h, np.ones_like(y)]
    )


def _first_crossing(z: np.ndarray, level: float) -> int | None:
    hit = np.flatnonzero(z >= level)
    return int(hit[0]) if hit.size else None


def _normalised_crossings(zeta: float) -> tuple[float, float]:
    """``ωn·t`` at which the unit step response first reaches 0.1 and 0.5."""
    tau = np.linspace(0.0, 20.0 * max(1.0, 2.0 * zeta), 20001)
    y = Plant.from_modal(1.0, zeta, 1.0).step_response(tau)
    return (
        float(np.interp(0.1, y[: np.argmax(y >= 0.1) + 1], tau[: np.argmax(y >= 0.1) + 1])),
        float(np.interp(0.5, y[: np.argmax(y >= 0.5) + 1], tau[: np.argmax(y >= 0.5) + 1])),
    )


def _step_starts(
    t: np.ndarray, x: np.ndarray, head: float, step: float, noise: float
) -> list[np.ndarray]:
    """Starting parameter vectors ``(gain, ωn, ζ, t0, offset)``, best first."""
    z = (x - head) / step
    zs = scipy.signal.medfilt(z, 5) if z.size >= 5 else z
    i10 = _first_crossing(zs, 0.1)
    i50 = _first_crossing(zs, 0.5)
    if i10 is None or i50 is None or t[i50] <= t[i10]:
        i10 = _first_crossing(z, 0.1)
        i50 = _first_crossing(z, 0.5)
    if i10 is None or i50 is None:
        raise EstimatorError(
            "no step found: the record never reaches half of its final change; record "
            "the whole step, from before it is applied until it has settled"
        )
    t10, t50 = float(t[i10]), float(t[max(i50, i10)])
    if t50 <= t10:
        t50 = t10 + float(np.median(np.diff(t)))
    candidates: list[tuple[float, np.ndarray]] = []

    def score(wn: float, zeta: float, t0: float) -> None:
        shape = Plant.from_modal(wn, zeta, 1.0).step_response(t - t0)
        basis = np.column_stack([shape, np.ones_like(shape)])
        (gain, offset), *_ = np.linalg.lstsq(basis, x, rcond=None)
        rss = float(np.sum((x - basis @ np.array([gain, offset])) ** 2))
        candidates.append((rss, np.array([gain, wn, zeta, t0, offset])))

    for zeta in _START_ZETAS:
        tau10, tau50 = _normalised_crossings(zeta)
        wn = (tau50 - tau10) / (t50 - t10)
        score(wn, zeta, t10 - tau10 / wn)
    # Oscillating response: damped period from the spacing of the extrema, ζ from the
    # first overshoot (Mp = exp(−ζπ/√(1 − ζ²)), Ogata), t0 from the first peak time π/ωd.
    after = slice(i50, None)
    swing = (x[after] - (head + step)) * math.copysign(1.0, step)
    prominence = max(4.0 * noise, 1e-6 * abs(step))
    hi, _ = scipy.signal.find_peaks(swing, prominence=prominence)
    lo, _ = scipy.signal.find_peaks(-swing, prominence=prominence)
    ext = np.sort(np.concatenate([hi, lo]))
    if hi.size and ext.size >= 3:
        tp = float(t[i50 + hi[0]])
        overshoot = float(swing[hi[0]] / abs(step))
        td = 2.0 * float(np.median(np.diff(t[i50 + ext])))
        if 0.0 < overshoot < 1.0:
            ln_mp = math.log(overshoot)
            zeta = -ln_mp / math.sqrt(math.pi**2 + ln_mp**2)
            wd = _TWO_PI / td
            wn = wd / math.sqrt((1.0 - zeta) * (1.0 + zeta))
            score(wn, zeta, tp - math.pi / wd)
    candidates.sort(key=lambda c: c[0])
    return [c[1] for c in candidates[:2]]


def _runs_z(r: np.ndarray) -> float:
    """Wald–Wolfowitz runs test on the signs of ``r``: (runs − mean)/std under randomness."""
    s = np.sign(r[r != 0.0])
    n1 = int(np.count_nonzero(s > 0))
    n2 = int(np.count_nonzero(s < 0))
    n = n1 + n2
    if n1 == 0 or n2 == 0 or n < 3:
        return math.inf
    runs = 1 + int(np.count_nonzero(s[1:] != s[:-1]))
    mean = 2.0 * n1 * n2 / n + 1.0
    var = 2.0 * n1 * n2 * (2.0 * n1 * n2 - n) / (n * n * (n - 1.0))
    return (runs - mean) / math.sqrt(var) if var > 0.0 else math.inf


def identify_step(
    time_s: ArrayLike, displacement_m: ArrayLike, *, force_n: float | None = None
) -> StepFitResult:
    """Fit the closed-form second-order step response to a step record.

    Model: ``x(t) = offset + gain·y(ζ, ωn·(t − t0))``, ``y`` the unit step response of
    `estimator.plant.Plant` (0 before t0; under-, critically and over-damped, continuous
    through ζ = 1). Nonlinear least squares (``scipy.optimize.least_squares``) from
    starting values read off the record; covariance ``s²·(JᵀJ)⁻¹``; 95 % intervals with
    the Student t quantile for ``n − 5`` degrees of freedom.

    Args:
        time_s: sample times, s, shape (n,), finite, strictly increasing; the record
            starts before the step and ends once it has settled.
        displacement_m: displacement, m, shape (n,), finite.
        force_n: the known step force, N (finite, non-zero, same sign as the step), or
            None; gives ``stiffness_n_per_m = force_n/gain``.

    Raises:
        EstimatorError: bad record, no step found, no settled final level.
        ParameterError: bad ``force_n``.
    """
    t, x = _record(time_s, displacement_m)
    force = None
    if force_n is not None:
        force = _finite("force_n", force_n, "give the step force in N, non-zero")
        if force == 0.0:
            raise ParameterError("force_n = 0.0 gives no scale; give the non-zero step force in N")
    n = t.size
    n_tail = max(5, int(_TAIL_FRACTION * n))
    tail = float(np.median(x[-n_tail:]))
    # Baseline: the samples before the record first moves 10 % of the way to the end.
    head = float(np.median(x[:5]))
    smooth = scipy.signal.medfilt(x, 5)
    moved = np.flatnonzero(np.abs(smooth - head) > 0.1 * abs(tail - head))
    n_head = max(5, int(moved[0]) if moved.size else 5)
    head = float(np.median(x[:n_head]))
    noise = min(
        _noise_estimate(x, x[:n_head]), _noise_estimate(x[-n_tail:], x[-n_tail:]) or math.inf
    )
    step = tail - head
    if step == 0.0 or abs(step) < 10.0 * noise:
        raise EstimatorError(
            f"no step found: the final level differs from the initial one by {step:.3g} m, "
            f"less than 10 times the noise ({noise:.3g} m); check the record holds a step"
        )
    t_tail = t[-n_tail:]
    slope = float(np.polyfit(t_tail - t_tail[0], x[-n_tail:], 1)[0])
    drift = abs(slope) * float(t_tail[-1] - t_tail[0])
    if drift > 0.25 * abs(step):
        raise EstimatorError(
            f"no settled final level: the last {_TAIL_FRACTION:.0%} of the record still "
            f"moves by {drift:.3g} m, {drift / abs(step):.0%} of the step ({step:.3g} m); "
            "record longer after the step"
        )
    scale = abs(step)

    def residual(p: np.ndarray) -> np.ndarray:
        return (_step_model(p, t) - x) / scale

    def jacobian(p: np.ndarray) -> np.ndarray:
        return _step_jacobian(p, t) / scale

    best = None
    span = float(t[-1] - t[0])
    for p0 in _step_starts(t, x, head, step, noise):
        p0 = p0.copy()
        p0[3] = min(max(p0[3], t[0] - span), t[-1] - 1e-9 * span)
        wn0 = float(p0[1])
        fit = scipy.optimize.least_squares(
            residual,
            p0,
            bounds=(
                [-np.inf, 1e-9 * wn0, 0.0, t[0] - span, -np.inf],
                [np.inf, np.inf, np.inf, t[-1], np.inf],
            ),
            x_scale=np.array([scale, wn0, max(float(p0[2]), 0.1), 1.0 / wn0, scale]),
            jac=jacobian,
            xtol=1e-12,
            ftol=1e-12,
            gtol=1e-12,
            max_nfev=2000,
        )
        if best is None or fit.cost < best.cost:
            best = fit
    assert best is not None
    res = best.fun * scale
    dof = n - 5
    s2 = float(res @ res) / dof
    cov = _covariance(best.jac * scale, s2)
    u = np.sqrt(np.maximum(np.diag(cov), 0.0))
    est = [Estimate(float(v), float(s), float(dof)) for v, s in zip(best.x, u, strict=True)]
    gain = est[0]
    t0, offset = est[3].value, est[4].value
    # Residual check: whiteness and size against noise measured apart from the fit.
    centred = res - res.mean()
    denom = float(centred @ centred)
    r1 = float(centred[1:] @ centred[:-1]) / denom if denom > 0.0 else math.inf
    runs = _runs_z(res)
    rms = float(np.sqrt(np.mean(res**2)))
    before = x[t < t0]
    quiet_noise = float(np.std(before - offset, ddof=1)) if before.size >= 30 else math.nan
    problems = []
    limit_r1 = 3.0 / math.sqrt(n)
    if not abs(r1) < limit_r1:
        problems.append(f"lag-1 autocorrelation {r1:.3f} (limit ±{limit_r1:.3f})")
    if not abs(runs) < 3.0:
        problems.append(f"runs test z = {runs:.2f} (limit ±3)")
    if math.isfinite(quiet_noise) and not rms <= 1.5 * quiet_noise:
        problems.append(
            f"RMS residual {rms:.3g} m > 1.5 × noise before the step {quiet_noise:.3g} m"
        )
    ok = not problems
    note = (
        "residuals look white"
        if ok
        else "residuals not white, the model may not fit: " + "; ".join(problems)
    )
    stiffness = None
    if force is not None:
        k = force / gain.value
        if not k > 0.0:
            raise ParameterError(
                f"force_n = {force!r} N and the fitted step {gain.value:.3g} m have opposite "
                "signs; give the force with the sign that produced the step"
            )
        stiffness = Estimate(k, abs(k) * gain.u / abs(gain.value), float(dof))
    _check_resolved(float(est[1].value), t, "step fit")
    return StepFitResult(
        gain_m=gain,
        natural_freq_rad_s=est[1],
        damping_ratio=est[2],
        start_time_s=est[3],
        offset_m=est[4],
        covariance=cov,
        dof=dof,
        residual_rms_m=rms,
        noise_m=quiet_noise,
        lag1_autocorrelation=r1,
        runs_z=runs,
        residual_ok=ok,
        residual_note=note,
        force_n=force,
        stiffness_n_per_m=stiffness,
        n_samples=n,
    )
