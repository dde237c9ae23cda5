"""ωn and ζ from a free decay: the logarithmic decrement regressed over the usable
cycles, or the two-exponential free-decay model fitted by nonlinear least squares
(docs/method-identify.md, section 1)."""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import scipy.optimize
import scipy.signal
from numpy.typing import ArrayLike

from estimator.errors import EstimatorError, ParameterError
from estimator.identify.common import (
    _TAIL_FRACTION,
    _TWO_PI,
    MIN_DECAY_SNR,
    MIN_SAMPLES,
    Estimate,
    _check_resolved,
    _covariance,
    _impulse_shape,
    _noise_estimate,
    _non_negative,
    _record,
    _release_shape,
    _zeta_step,
)
from estimator.validation import finite_float as _finite

__all__ = ["RingdownResult", "damping_ratio_from_decrement", "identify_ringdown", "log_decrement"]

# An extremum is usable when its distance from the rest level is at least this many
# noise standard deviations (or 1e-6 of the largest excursion on noiseless records).
_USABLE_SNR = 8.0


_RELATIVE_FLOOR = 1e-6


# Extrema are used while their fitted envelope is at least this times the usable floor.
_KEEP_FACTOR = 1.5


# Local minima of the free-decay grid polished by least squares.
_FREE_DECAY_STARTS = 3


@dataclass(frozen=True)
class RingdownResult:
    """Result of `identify_ringdown`; times in s, displacements in m.

    Attributes:
        method: ``"logarithmic decrement"`` or ``"two-exponential fit"``.
        natural_freq_rad_s: ωn, rad/s.
        damping_ratio: ζ, dimensionless.
        damped_freq_rad_s: ωd, rad/s (value NaN when the fit found ζ >= 1).
        log_decrement: δ per cycle (NaN for the two-exponential fit).
        decay_rates_per_s: ``(s1, s2)`` of ``A1·e^(−s1·t) + A2·e^(−s2·t) + c``, slow first,
            for a two-exponential fit with ζ >= 1; ``None`` otherwise.
        rest_level_m: final rest level ``c``, m.
        noise_m: noise standard deviation used for the usable-peak floor, m.
        start_s: time of the first sample analysed, s.
        n_samples: samples analysed.
        n_peaks: extrema (maxima and minima) used by the decrement; 0 for the fit.
        cycles_used: cycles spanned by those extrema, ``(n_peaks − 1)/2``.
        amplitude_residual_rms_m: RMS residual of the amplitude regression (decrement)
            or of the whole free-decay fit, m.
        time_residual_rms_s: RMS residual of the peak-time regression, s (NaN for the fit).
        note: how the method was chosen, in words.
        covariance_wn_zeta: covariance of ωn and ζ, rad/s; 0 for the decrement, whose
            two regressions are taken as independent (docs/method-identify.md).
    """

    method: str
    natural_freq_rad_s: Estimate
    damping_ratio: Estimate
    damped_freq_rad_s: Estimate
    log_decrement: Estimate
    decay_rates_per_s: tuple[float, float] | None
    rest_level_m: float
    noise_m: float
    start_s: float
    n_samples: int
    n_peaks: int
    cycles_used: float
    amplitude_residual_rms_m: float
    time_residual_rms_s: float
    note: str
    covariance_wn_zeta: float = 0.0


def log_decrement(peak_amplitudes_m: ArrayLike) -> float:
    """Logarithmic decrement δ from successive peak amplitudes one cycle apart.

    The least-squares slope of ``ln(amplitude)`` against the peak number, negated;
    for two peaks it is the textbook ``ln(x₁/x₂)``.

    Args:
        peak_amplitudes_m: amplitudes measured from the rest level, m, shape (n,),
            n >= 2, all finite and > 0.
    """
    a = np.asarray(peak_amplitudes_m, dtype=np.float64)
    if a.ndim != 1 or a.size < 2:
        raise EstimatorError(
            f"peak_amplitudes_m has shape {a.shape}; give at least 2 successive peaks"
        )
    if not np.all(np.isfinite(a)) or not np.all(a > 0.0):
        raise EstimatorError(
            f"peak_amplitudes_m = {a.tolist()!r} must be finite and > 0; measure the peaks "
            "from the rest level"
        )
    n = np.arange(a.size, dtype=np.float64)
    slope = np.polyfit(n, np.log(a), 1)[0]
    return float(-slope)


def damping_ratio_from_decrement(log_decrement: float) -> float:
    """``ζ = δ/√(4π² + δ²)`` for a logarithmic decrement δ >= 0 per cycle."""
    delta = _non_negative(
        "log_decrement", log_decrement, "give the logarithmic decrement per cycle, >= 0"
    )
    return delta / math.sqrt(_TWO_PI**2 + delta**2)


def _auto_start(x: np.ndarray, rest: float, noise: float) -> int:
    """Index where the free decay starts: just past the largest excursion (a peak, or
    the end of a held plateau before a release)."""
    dev = np.abs(x - rest)
    i0 = int(np.argmax(dev))
    level = dev[i0]
    tol = max(6.0 * noise, 0.02 * level)
    below = np.flatnonzero(dev[i0:] < level - tol)
    return i0 + int(below[0]) if below.size else i0


def _alternating(y: np.ndarray, prominence: float, distance: int) -> tuple[np.ndarray, np.ndarray]:
    """Maxima (+1) and minima (−1) of ``y`` in time order, two of a kind in a row merged
    into the larger."""
    hi, _ = scipy.signal.find_peaks(y, prominence=prominence, distance=distance)
    lo, _ = scipy.signal.find_peaks(-y, prominence=prominence, distance=distance)
    idx = np.concatenate([hi, lo])
    sgn = np.concatenate([np.ones(hi.size), -np.ones(lo.size)])
    order = np.argsort(idx)
    keep_i: list[int] = []
    keep_s: list[float] = []
    for i, s in zip(idx[order].tolist(), sgn[order].tolist(), strict=True):
        if keep_s and keep_s[-1] == s:
            if s * y[i] > s * y[keep_i[-1]]:
                keep_i[-1] = i
            continue
        keep_i.append(i)
        keep_s.append(s)
    return np.array(keep_i, dtype=np.int64), np.array(keep_s)


def _extrema(y: np.ndarray, noise: float, floor: float) -> tuple[np.ndarray, np.ndarray]:
    """Indices and signs (+1 maximum, −1 minimum) of the usable extrema of ``y``
    (displacement about the rest level): alternating, about half a period apart, each
    at least ``floor`` from the rest level; the leading run of such extrema."""
    prominence = max(4.0 * noise, floor)
    idx, sgn = _alternating(y, prominence, 1)
    big = np.flatnonzero(sgn * y[idx] >= floor)
    if big.size >= 3:
        # Half a period from the strongest extrema; then search again with a minimum
        # spacing, so that noise near a flat crest cannot count as an extremum.
        lead = idx[big[: min(big.size, 11)]]
        half = float(np.median(np.diff(lead)))
        idx, sgn = _alternating(y, prominence, max(1, int(0.6 * half)))
    else:
        half = math.nan
    keep = 0
    for j in range(idx.size):
        if sgn[j] * y[idx[j]] < floor:
            break
        if j and not 0.75 * half <= idx[j] - idx[j - 1] <= 1.25 * half:
            break
        keep = j + 1
    return idx[:keep], sgn[:keep]


def _trim_to_envelope(
    y: np.ndarray, idx: np.ndarray, sgn: np.ndarray, keep: float
) -> tuple[np.ndarray, np.ndarray]:
    """Keep the leading extrema whose *fitted* envelope is at least ``keep`` (m).

    Cutting on each extremum's own noisy size would keep the last ones only when noise
    pushed them up, biasing δ low; the envelope (log-linear fit weighted by amplitude²)
    does not depend on the noise of any one extremum.
    """
    if idx.size < 3:
        return idx, sgn
    amp = sgn * y[idx]
    m = np.arange(idx.size, dtype=np.float64)
    slope, intercept = np.polyfit(m, np.log(amp), 1, w=amp / amp.max())
    envelope = np.exp(intercept + slope * m)
    below = np.flatnonzero(envelope < keep)
    n = int(below[0]) if below.size else idx.size
    return idx[:n], sgn[:n]


def _refine_extremum(
    t: np.ndarray, y: np.ndarray, i: int, sigma: float, wd: float
) -> tuple[float, float]:
    """Time (s) and value (m, about the rest level) of the extremum near sample ``i``.

    Least squares of ``e^(−σu)·(p·cos ωd·u + q·sin ωd·u)``, ``u = t − t[i]``, over the
    samples with ``|u| < 0.24·Td`` (windows of neighbouring extrema do not overlap),
    then the extremum of that local model in closed form.
    """
    half = 0.24 * _TWO_PI / wd
    lo = int(np.searchsorted(t, t[i] - half, side="right"))
    hi = int(np.searchsorted(t, t[i] + half, side="left"))
    u = t[lo:hi] - t[i]
    if u.size < 3:
        return float(t[i]), float(y[i])
    env = np.exp(-sigma * u)
    basis = np.column_stack([env * np.cos(wd * u), env * np.sin(wd * u)])
    (p, q), *_ = np.linalg.lstsq(basis, y[lo:hi], rcond=None)
    r = math.hypot(p, q)
    phi = math.atan2(q, p)
    lag = math.atan2(sigma, wd)
    j = round((lag - phi) / math.pi)
    u_star = (phi - lag + j * math.pi) / wd
    if abs(u_star) > half:
        return float(t[i]), float(y[i])
    value = (-1.0) ** j * r * math.exp(-sigma * u_star) * wd / math.hypot(wd, sigma)
    return float(t[i] + u_star), float(value)


def _decrement(
    t: np.ndarray, x: np.ndarray, idx: np.ndarray, sgn: np.ndarray, rest0: float
) -> dict[str, object]:
    """Logarithmic decrement and damped period from the extrema ``idx`` of ``x``."""
    te = t[idx]
    half_period = float(te[-1] - te[0]) / (idx.size - 1)
    m = np.arange(idx.size, dtype=np.float64)  # half-cycle numbers (_extrema keeps them)
    cycles = m / 2.0
    amp = sgn * (x[idx] - rest0)
    slope, intercept = np.polyfit(cycles, np.log(amp), 1)
    delta, ln_a = float(-slope), float(intercept)
    rest = rest0
    td = 2.0 * half_period
    for _ in range(4):
        wd = _TWO_PI / td
        sigma = delta / td
        refined = [_refine_extremum(t, x - rest, int(i), sigma, wd) for i in idx]
        t_e = np.array([r[0] for r in refined])
        y_e = rest + np.array([r[1] for r in refined])

        def residual(p: np.ndarray, y_e: np.ndarray = y_e) -> np.ndarray:
            return y_e - p[0] - sgn * np.exp(p[1] - p[2] * cycles)

        def jacobian(p: np.ndarray) -> np.ndarray:
            e = sgn * np.exp(p[1] - p[2] * cycles)
            return np.column_stack([-np.ones_like(e), -e, cycles * e])

        fit = scipy.optimize.least_squares(
            residual, np.array([rest, ln_a, delta]), jac=jacobian, method="lm", xtol=1e-14
        )
        rest, ln_a, delta = (float(v) for v in fit.x)
        # Peak times on half-cycle numbers, weighted by amplitude² (timing noise of an
        # extremum scales as noise/amplitude).
        weight = np.exp(2.0 * (ln_a - delta * cycles))
        weight = weight / weight.max()
        design = np.column_stack([np.ones_like(m), m])
        wdesign = design * weight[:, None]
        normal = design.T @ wdesign
        coef = np.linalg.solve(normal, wdesign.T @ t_e)
        td = 2.0 * float(coef[1])
    n = idx.size
    amp_res = fit.fun
    dof_amp = n - 3
    s2_amp = float(amp_res @ amp_res) / dof_amp
    cov_amp = _covariance(fit.jac, s2_amp)
    time_res = t_e - design @ coef
    dof_time = n - 2
    s2_time = float(weight @ time_res**2) / dof_time
    cov_time = s2_time * np.linalg.inv(normal)
    return {
        "delta": delta,
        "u_delta": math.sqrt(max(cov_amp[2, 2], 0.0)),
        "dof_delta": float(dof_amp),
        "td": td,
        "u_td": 2.0 * math.sqrt(max(cov_time[1, 1], 0.0)),
        "dof_td": float(dof_time),
        "rest": rest,
        "amp_rms": float(np.sqrt(np.mean(amp_res**2))),
        "time_rms": float(np.sqrt(np.mean(time_res**2))),
    }


def _welch_satterthwaite(terms: Sequence[tuple[float, float]]) -> float:
    """Effective dof of ``Σ uᵢ²`` from ``(uᵢ, νᵢ)`` pairs (GUM G.4.1)."""
    total = sum(u * u for u, _ in terms)
    denom = sum(u**4 / nu for u, nu in terms if u > 0.0 and math.isfinite(nu))
    if total == 0.0 or denom == 0.0:
        return math.inf
    return total**2 / denom


def _free_decay_model(p: np.ndarray, u: np.ndarray) -> np.ndarray:
    """``c + A·g(ζ, ωn·u) + B·h(ζ, ωn·u)``, m, for ``u`` s since the start, shape (n,)."""
    wn, zeta, a, b, c = (float(v) for v in p)
    tau = wn * u
    return c + a * _release_shape(zeta, tau) + b * _impulse_shape(zeta, tau)


def _free_decay_jacobian(p: np.ndarray, u: np.ndarray) -> np.ndarray:
    """Derivatives of `_free_decay_model` by (ωn, ζ, A, B, c), shape (n, 5).

    ``dg/dτ = −h`` and ``dh/dτ = g − 2ζ·h`` (both solve the free equation); ζ by a
    central difference.
    """
    wn, zeta, a, b, _ = (float(v) for v in p)
    tau = wn * u
    g = _release_shape(zeta, tau)
    h = _impulse_shape(zeta, tau)
    lo, hi = _zeta_step(zeta)
    d_zeta = (
        a * (_release_shape(hi, tau) - _release_shape(lo, tau))
        + b * (_impulse_shape(hi, tau) - _impulse_shape(lo, tau))
    ) / (hi - lo)
    d_wn = u * (-a * h + b * (g - 2.0 * zeta * h))
    return np.column_stack([d_wn, d_zeta, g, h, np.ones_like(g)])


def _free_decay_fit(t: np.ndarray, x: np.ndarray) -> dict[str, object]:
    """Two-exponential free decay ``A1·e^(−s1·t) + A2·e^(−s2·t) + c`` fitted as
    ``c + A·g(ζ, ωn·t) + B·h(ζ, ωn·t)`` (the same model in a basis that stays well
    conditioned through s1 = s2 and also covers a complex pair)."""
    u = t - t[0]
    span = float(u[-1])
    dt = float(np.median(np.diff(t)))
    sub = slice(None, None, max(1, u.size // 400))
    u_s, x_s = u[sub], x[sub]
    wns = np.geomspace(1.0 / span, math.pi / dt, 40)
    tau = np.outer(u_s, wns)  # (n_s, 40)
    zetas = np.geomspace(0.05, 30.0, 24)
    table = np.empty((zetas.size, wns.size))
    for i, zeta in enumerate(zetas):
        # Linear least squares of x on [1, g, h] for every ωn of the grid at once.
        g = _release_shape(float(zeta), tau)
        h = _impulse_shape(float(zeta), tau)
        basis = np.stack([np.ones_like(g), g, h], axis=-1).transpose(1, 0, 2)  # (40, n_s, 3)
        basis_t = basis.transpose(0, 2, 1)
        gram = basis_t @ basis
        ridge = 1e-12 * np.trace(gram, axis1=1, axis2=2)[:, None, None] * np.eye(3)
        coef = np.linalg.solve(gram + ridge, basis_t @ x_s[:, None])  # (40, 3, 1)
        table[i] = np.sum((x_s[None, :, None] - basis @ coef) ** 2, axis=(1, 2))
    # A small mode can hide in a narrow valley between grid points while a single
    # exponential plus a near-constant fits almost as well: polish the best few local
    # minima of the grid and keep the lowest cost.
    padded = np.pad(table, 1, constant_values=np.inf)
    neighbours = np.min(
        [
            padded[1 + di : padded.shape[0] - 1 + di, 1 + dj : padded.shape[1] - 1 + dj]
            for di in (-1, 0, 1)
            for dj in (-1, 0, 1)
            if di or dj
        ],
        axis=0,
    )
    minima = np.argwhere(table <= neighbours)
    order = np.argsort(table[minima[:, 0], minima[:, 1]])[:_FREE_DECAY_STARTS]
    fit = None
    scale = 1.0
    for i, j in minima[order]:
        zeta0, wn0 = float(zetas[i]), float(wns[j])
        tau0 = wn0 * u
        basis = np.column_stack(
            [_release_shape(zeta0, tau0), _impulse_shape(zeta0, tau0), np.ones_like(tau0)]
        )
        lin, *_ = np.linalg.lstsq(basis, x, rcond=None)
        p0 = np.array([wn0, zeta0, *lin])
        scale = max(float(np.max(np.abs(x - lin[2]))), 1e-300)

        def residual(p: np.ndarray, scale: float = scale) -> np.ndarray:
            return (_free_decay_model(p, u) - x) / scale

        def jacobian(p: np.ndarray, scale: float = scale) -> np.ndarray:
            return _free_decay_jacobian(p, u) / scale

        trial = scipy.optimize.least_squares(
            residual,
            p0,
            bounds=([1e-12 * wn0, 0.0, -np.inf, -np.inf, -np.inf], np.inf),
            x_scale=np.array([wn0, max(zeta0, 0.1), scale, scale, scale]),
            jac=jacobian,
            xtol=1e-12,
            ftol=1e-12,
            gtol=1e-12,
            max_nfev=500,
        )
        trial_cost = float(trial.fun @ trial.fun) * scale * scale
        if fit is None or trial_cost < fit[0]:
            fit = (trial_cost, trial, scale)
    assert fit is not None
    _, fit, scale = fit
    res = fit.fun * scale
    dof = u.size - 5
    s2 = float(res @ res) / dof
    cov = _covariance(fit.jac * scale, s2)
    return {"p": fit.x, "cov": cov, "dof": float(dof), "rms": float(np.sqrt(np.mean(res**2)))}


def identify_ringdown(
    time_s: ArrayLike,
    displacement_m: ArrayLike,
    *,
    start_s: float | None = None,
    min_cycles: int = 3,
    method: str = "auto",
) -> RingdownResult:
    """Identify ωn and ζ from a free decay (after a release or a tap).

    Args:
        time_s: sample times, s, shape (n,), finite, strictly increasing.
        displacement_m: displacement, m, shape (n,), finite.
        start_s: first instant of the free decay, s (the release or just after the tap).
            None: start just past the largest excursion from the rest level.
        min_cycles: usable cycles (above ``8·noise``) needed for the logarithmic
            decrement, >= 2; fewer gives the two-exponential fit in ``"auto"``.
        method: ``"auto"``, ``"decrement"`` (refuse when there are too few cycles) or
            ``"exponential"``.

    Returns:
        RingdownResult with ωn, ζ and their standard uncertainties.

    Raises:
        EstimatorError: bad record (too short, NaN, time not increasing), no decay found,
            growing oscillation, or too few cycles when ``method="decrement"``.
        ParameterError: bad ``start_s``, ``min_cycles`` or ``method``.
    """
    t, x = _record(time_s, displacement_m)
    if isinstance(min_cycles, bool) or not isinstance(min_cycles, (int, np.integer)):
        raise ParameterError(f"min_cycles = {min_cycles!r} is not an integer; give 2 or more")
    if min_cycles < 2:
        raise ParameterError(
            f"min_cycles = {min_cycles!r} is too small; the decrement regression needs "
            "at least 2 cycles (5 extrema)"
        )
    if method not in ("auto", "decrement", "exponential"):
        raise ParameterError(
            f"method = {method!r} is unknown; use 'auto', 'decrement' or 'exponential'"
        )
    n_tail = max(5, int(_TAIL_FRACTION * t.size))
    if start_s is not None:
        start = _finite("start_s", start_s, "give the release time in s, inside the record")
        if not t[0] <= start < t[-1]:
            raise ParameterError(
                f"start_s = {start!r} is outside the record [{t[0]!r}, {t[-1]!r}] s; give "
                "the release time inside it"
            )
        first = int(np.searchsorted(t, start, side="left"))
        t, x = t[first:], x[first:]
        if t.size < MIN_SAMPLES:
            raise EstimatorError(
                f"only {t.size} samples after start_s = {start!r} s; at least "
                f"{MIN_SAMPLES} are needed, record longer after the release"
            )
        n_tail = max(5, int(_TAIL_FRACTION * t.size))
    rest0 = float(np.median(x[-n_tail:]))
    noise = _noise_estimate(x, x[-n_tail:])
    if start_s is None:
        first = _auto_start(x, rest0, noise)
        t, x = t[first:], x[first:]
        if t.size < MIN_SAMPLES:
            raise EstimatorError(
                f"only {t.size} samples after the largest excursion; at least "
                f"{MIN_SAMPLES} are needed, record longer after the release"
            )
    dev = x - rest0
    biggest = float(np.max(np.abs(dev)))
    if biggest == 0.0 or biggest < MIN_DECAY_SNR * noise:
        raise EstimatorError(
            f"no decay found: the largest excursion from the rest level is {biggest:.3g} m, "
            f"{biggest / noise if noise > 0 else 0.0:.1f} times the noise ({noise:.3g} m); "
            f"at least {MIN_DECAY_SNR:g} are needed, release or tap harder"
        )
    floor = max(_USABLE_SNR * noise, _RELATIVE_FLOOR * biggest)
    idx, sgn = _extrema(dev, noise, floor)
    idx, sgn = _trim_to_envelope(dev, idx, sgn, _KEEP_FACTOR * floor)
    cycles = (idx.size - 1) / 2.0 if idx.size else 0.0
    enough = cycles >= min_cycles
    if method == "decrement" and not enough:
        raise EstimatorError(
            f"the ring-down has {max(cycles, 0.0):g} usable cycles above {floor:.3g} m "
            f"(8 × noise); the logarithmic decrement needs at least {min_cycles} "
            f"({2 * min_cycles + 1} extrema): record a longer ring-down, tap harder, or use "
            "method='exponential'"
        )
    nan_est = Estimate(math.nan, math.nan, math.nan)
    if method == "decrement" or (method == "auto" and enough):
        return _ringdown_by_decrement(t, x, idx, sgn, rest0, noise, cycles, min_cycles)
    fit = _free_decay_fit(t, x)
    wn, zeta, _, _, rest = (float(v) for v in fit["p"])  # type: ignore[union-attr]
    cov = fit["cov"]
    dof = fit["dof"]
    u_wn = math.sqrt(max(cov[0, 0], 0.0))  # type: ignore[index]
    u_zeta = math.sqrt(max(cov[1, 1], 0.0))  # type: ignore[index]
    rates = None
    damped = nan_est
    if zeta >= 1.0:
        gamma = math.sqrt((zeta - 1.0) * (zeta + 1.0))
        rates = (wn / (zeta + gamma), wn * (zeta + gamma))
    else:
        beta = math.sqrt((1.0 - zeta) * (1.0 + zeta))
        g = np.array([beta, -wn * zeta / beta])
        u_wd = math.sqrt(max(float(g @ cov[:2, :2] @ g), 0.0))  # type: ignore[index]
        damped = Estimate(wn * beta, u_wd, dof)  # type: ignore[arg-type]
    if method == "exponential":
        note = "two-exponential fit (asked for)"
    else:
        note = (
            f"only {max(cycles, 0.0):g} usable cycles ({min_cycles} needed for the "
            "logarithmic decrement): fitted the two-exponential free-decay model"
        )
    _check_resolved(wn, t, "two-exponential fit")
    return RingdownResult(
        method="two-exponential fit",
        natural_freq_rad_s=Estimate(wn, u_wn, dof),  # type: ignore[arg-type]
        damping_ratio=Estimate(zeta, u_zeta, dof),  # type: ignore[arg-type]
        damped_freq_rad_s=damped,
        log_decrement=nan_est,
        decay_rates_per_s=rates,
        rest_level_m=rest,
        noise_m=noise,
        start_s=float(t[0]),
        n_samples=int(t.size),
        n_peaks=0,
        cycles_used=0.0,
        amplitude_residual_rms_m=fit["rms"],  # type: ignore[arg-type]
        time_residual_rms_s=math.nan,
        note=note,
        covariance_wn_zeta=float(cov[0, 1]),  # type: ignore[index]
    )


def _ringdown_by_decrement(
    t: np.ndarray,
    x: np.ndarray,
    idx: np.ndarray,
    sgn: np.ndarray,
    rest0: float,
    noise: float,
    cycles: float,
    min_cycles: int,
) -> RingdownResult:
    d = _decrement(t, x, idx, sgn, rest0)
    delta, u_delta = float(d["delta"]), float(d["u_delta"])  # type: ignore[arg-type]
    td, u_td = float(d["td"]), float(d["u_td"])  # type: ignore[arg-type]
    if delta <= 0.0:
        raise EstimatorError(
            f"the oscillation does not decay (logarithmic decrement {delta:.3g} <= 0); "
            "check that the force was removed before start_s"
        )
    root = math.sqrt(_TWO_PI**2 + delta**2)
    zeta = delta / root
    u_zeta = _TWO_PI**2 / root**3 * u_delta
    wd = _TWO_PI / td
    u_wd = wd * u_td / td
    wn = root / td
    c_delta = delta / (td * root)
    c_td = wn / td
    dof_delta = float(d["dof_delta"])  # type: ignore[arg-type]
    dof_td = float(d["dof_td"])  # type: ignore[arg-type]
    u_wn = math.hypot(c_delta * u_delta, c_td * u_td)
    dof_wn = _welch_satterthwaite([(c_delta * u_delta, dof_delta), (c_td * u_td, dof_td)])
    return RingdownResult(
        method="logarithmic decrement",
        natural_freq_rad_s=Estimate(wn, u_wn, dof_wn),
        damping_ratio=Estimate(zeta, u_zeta, dof_delta),
        damped_freq_rad_s=Estimate(wd, u_wd, dof_td),
        log_decrement=Estimate(delta, u_delta, dof_delta),
        decay_rates_per_s=None,
        rest_level_m=float(d["rest"]),  # type: ignore[arg-type]
        noise_m=noise,
        start_s=float(t[0]),
        n_samples=int(t.size),
        n_peaks=int(idx.size),
        cycles_used=cycles,
        amplitude_residual_rms_m=float(d["amp_rms"]),  # type: ignore[arg-type]
        time_residual_rms_s=float(d["time_rms"]),  # type: ignore[arg-type]
        note=f"{cycles:g} usable cycles (at least {min_cycles} needed): logarithmic decrement",
    )
