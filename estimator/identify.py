"""Dynamic identification of the cell: ωn and ζ from a ring-down or a step, then the scale.

Numbers in, numbers out: every function takes sampled records as arrays (time in s,
displacement in m, shape (n,)) and returns frozen dataclasses. Method, formulas and
sources are in docs/method-identify.md.

* `identify_ringdown`: free decay after a release or a tap. With enough usable cycles,
  the logarithmic decrement regressed over all of them and the damped frequency from
  the spacing of the extrema; otherwise the two-exponential free-decay model fitted by
  nonlinear least squares.
* `identify_step`: nonlinear least squares of the closed-form step response
  (`estimator.plant.Plant.step_response`, all three regimes) for gain, ωn, ζ, start
  time and offset, with Jacobian confidence intervals and a residual check.
* `scale_from`: stiffness and mass from a known moving mass, a known stiffness or a
  known step force, uncertainties propagated to first order (GUM, JCGM 100:2008).

Uncertainties are standard uncertainties (coverage factor 1) unless the name says
``ci95``; 95 % intervals use the Student t quantile of the stated degrees of freedom.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import scipy.optimize
import scipy.signal
import scipy.stats
from numpy.typing import ArrayLike

from estimator.errors import EstimatorError, ParameterError
from estimator.plant import Plant
from estimator.validation import finite_float as _finite

__all__ = [
    "MIN_SAMPLES",
    "STEP_PARAMETERS",
    "Estimate",
    "IdentifiedPlant",
    "RingdownResult",
    "StepFitResult",
    "damping_ratio_from_decrement",
    "identify_ringdown",
    "identify_step",
    "log_decrement",
    "scale_from",
]

#: Order of the parameters in `StepFitResult.covariance`.
STEP_PARAMETERS = ("gain_m", "natural_freq_rad_s", "damping_ratio", "start_time_s", "offset_m")

#: The fewest samples a fit takes (a ring-down's window or a step's).
MIN_SAMPLES = 20
# An extremum is usable when its distance from the rest level is at least this many
# noise standard deviations (or 1e-6 of the largest excursion on noiseless records).
_USABLE_SNR = 8.0
_RELATIVE_FLOOR = 1e-6
# The largest excursion must reach this many noise standard deviations to call it a decay.
_MIN_DECAY_SNR = 20.0
# Extrema are used while their fitted envelope is at least this times the usable floor.
_KEEP_FACTOR = 1.5
_TAIL_FRACTION = 0.2
_TWO_PI = 2.0 * math.pi
# Local minima of the free-decay grid polished by least squares.
_FREE_DECAY_STARTS = 3


# ------------------------------------------------------------------------- values


@dataclass(frozen=True)
class Estimate:
    """One identified quantity with its standard uncertainty.

    Attributes:
        value: the estimate, in the unit of the field that holds it.
        u: standard uncertainty (coverage factor 1), same unit, >= 0.
        dof: degrees of freedom of ``u`` (``math.inf`` when known exactly).
    """

    value: float
    u: float
    dof: float

    @property
    def coverage_factor(self) -> float:
        """Student t quantile 0.975 for ``dof`` (1.95996… for infinite dof)."""
        if math.isinf(self.dof):
            return float(scipy.stats.norm.ppf(0.975))
        return float(scipy.stats.t.ppf(0.975, max(self.dof, 1.0)))

    @property
    def ci95(self) -> tuple[float, float]:
        """95 % interval ``value ± t₀.₉₇₅(dof)·u``, same unit as ``value``."""
        half = self.coverage_factor * self.u
        return (self.value - half, self.value + half)


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


@dataclass(frozen=True)
class IdentifiedPlant:
    """Mechanics of the cell with standard uncertainties, from `scale_from`.

    Attributes:
        mass_kg, mass_u_kg: moving mass and its standard uncertainty, kg.
        stiffness_n_per_m, stiffness_u_n_per_m: stiffness and its standard uncertainty, N/m.
        damping_ratio, damping_ratio_u: ζ and its standard uncertainty.
        natural_freq_rad_s, natural_freq_u_rad_s: ωn and its standard uncertainty, rad/s.
        scale_source: ``"known mass"``, ``"known stiffness"`` or ``"known step force"``.
    """

    mass_kg: float
    mass_u_kg: float
    stiffness_n_per_m: float
    stiffness_u_n_per_m: float
    damping_ratio: float
    damping_ratio_u: float
    natural_freq_rad_s: float
    natural_freq_u_rad_s: float
    scale_source: str

    def plant_table(self) -> dict[str, float]:
        """The keys and values of a cell profile's ``[plant]`` table (docs/cell-profile.md)."""
        return {
            "mass_kg": self.mass_kg,
            "mass_u_kg": self.mass_u_kg,
            "stiffness_n_per_m": self.stiffness_n_per_m,
            "stiffness_u_n_per_m": self.stiffness_u_n_per_m,
            "damping_ratio": self.damping_ratio,
            "damping_ratio_u": self.damping_ratio_u,
        }


# --------------------------------------------------------------------- validation


def _record(time_s: ArrayLike, displacement_m: ArrayLike) -> tuple[np.ndarray, np.ndarray]:
    """Validated float64 copies of a record, both shape (n,)."""
    t = np.array(time_s, dtype=np.float64, copy=True)
    x = np.array(displacement_m, dtype=np.float64, copy=True)
    for name, a in (("time_s", t), ("displacement_m", x)):
        if a.ndim != 1:
            raise EstimatorError(f"{name} has shape {a.shape}; give a 1-D array of samples")
        bad = np.flatnonzero(~np.isfinite(a))
        if bad.size:
            raise EstimatorError(
                f"{name}[{int(bad[0])}] = {a[bad[0]]!r} is not finite ({bad.size} such "
                "sample(s)); remove or interpolate NaN/inf samples first"
            )
    if t.size != x.size:
        raise EstimatorError(
            f"time_s has {t.size} samples but displacement_m has {x.size}; give one "
            "displacement per time"
        )
    if t.size < MIN_SAMPLES:
        raise EstimatorError(
            f"the record has {t.size} samples; at least {MIN_SAMPLES} are needed, "
            "record longer or at a higher rate"
        )
    steps = np.diff(t)
    bad = np.flatnonzero(~(steps > 0.0))
    if bad.size:
        i = int(bad[0])
        raise EstimatorError(
            f"time_s is not strictly increasing: time_s[{i + 1}] = {t[i + 1]!r} follows "
            f"time_s[{i}] = {t[i]!r}; sort the samples and drop duplicates"
        )
    return t, x


def _positive(name: str, value: object, fix: str) -> float:
    number = _finite(name, value, fix)
    if not number > 0.0:
        raise ParameterError(f"{name} = {number!r} must be > 0; {fix}")
    return number


def _non_negative(name: str, value: object, fix: str) -> float:
    number = _finite(name, value, fix)
    if not number >= 0.0:
        raise ParameterError(f"{name} = {number!r} must be >= 0; {fix}")
    return number


# ---------------------------------------------------------------- small helpers


def _robust_std(a: np.ndarray) -> float:
    """Normal-consistent scale from the median absolute deviation (1.4826·MAD)."""
    if a.size == 0:
        return 0.0
    return float(1.4826 * np.median(np.abs(a - np.median(a))))


def _noise_estimate(x: np.ndarray, quiet: np.ndarray) -> float:
    """White-noise standard deviation, m: the smaller of the robust spread of a quiet
    stretch and of third differences (which cancel a smooth signal; variance 20·σ²)."""
    estimates = []
    if quiet.size >= 5:
        estimates.append(_robust_std(quiet))
    if x.size >= 10:
        estimates.append(_robust_std(np.diff(x, 3)) / math.sqrt(20.0))
    return min(estimates) if estimates else 0.0


def _covariance(jac: np.ndarray, s2: float) -> np.ndarray:
    """``s²·(JᵀJ)⁻¹`` computed on unit-norm columns (parameters of very different size
    make JᵀJ too ill-conditioned to invert as it stands), shape (p, p)."""
    norms = np.linalg.norm(jac, axis=0)
    norms = np.where(norms > 0.0, norms, 1.0)
    scaled = jac / norms
    inner = np.linalg.pinv(scaled.T @ scaled, rcond=1e-13, hermitian=True)
    return s2 * inner / np.outer(norms, norms)


def _impulse_shape(zeta: float, tau: np.ndarray) -> np.ndarray:
    """Free response from ``x = 0, dx/dτ = 1`` in ``τ = ωn·t`` units, τ >= 0.

    ``e^(−ζτ)·sin(βτ)/β`` (ζ < 1), ``τ·e^(−τ)`` (ζ = 1), ``e^(−ζτ)·sinh(γτ)/γ`` (ζ > 1),
    the last written with the slow root ``s1 = −1/(ζ + γ)`` and ``expm1`` so that it
    is continuous through ζ = 1 and never overflows.
    """
    if zeta < 1.0:
        beta = math.sqrt((1.0 - zeta) * (1.0 + zeta))
        return np.exp(-zeta * tau) * np.sin(beta * tau) / beta
    gamma = math.sqrt((zeta - 1.0) * (zeta + 1.0))
    e_slow = np.exp(-tau / (zeta + gamma))
    if gamma == 0.0:
        return tau * e_slow
    return e_slow * (-np.expm1(-2.0 * gamma * tau)) / (2.0 * gamma)


def _release_shape(zeta: float, tau: np.ndarray) -> np.ndarray:
    """Free response from ``x = 1, dx/dτ = 0``: one minus the unit step response."""
    plant = Plant.from_modal(1.0, zeta, 1.0)
    return 1.0 - plant.step_response(tau)


# ------------------------------------------------------------ logarithmic decrement


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


# ----------------------------------------------------------------------- ring-down


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


def _zeta_step(zeta: float) -> tuple[float, float]:
    """Central-difference points in ζ, kept >= 0 (forward difference at the bound)."""
    h = 1e-6 * max(zeta, 1e-3)
    return (zeta - h, zeta + h) if zeta - h >= 0.0 else (zeta, zeta + h)


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


def _check_resolved(wn: float, t: np.ndarray, what: str) -> None:
    """Refuse a fitted ωn above the record's Nyquist frequency (half its sample rate): the
    samples cannot show such motion (sampling theorem), and a fit there returns numbers
    with tight intervals that mean nothing (a critically damped 1000 Hz cell read at
    2 kHz gave fn = 2166 Hz, u 1.5 %)."""
    dt = float(np.median(np.diff(t)))
    if wn * dt > math.pi:
        fs = 1.0 / dt
        raise EstimatorError(
            f"the {what} gives fn = {wn / (2.0 * math.pi):.4g} Hz, above the record's "
            f"Nyquist frequency ({fs / 2.0:.4g} Hz at {fs:.4g} samples/s): the record cannot "
            "resolve this cell's motion; record faster (ten samples a period or more is "
            "common practice)"
        )


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
    if biggest == 0.0 or biggest < _MIN_DECAY_SNR * noise:
        raise EstimatorError(
            f"no decay found: the largest excursion from the rest level is {biggest:.3g} m, "
            f"{biggest / noise if noise > 0 else 0.0:.1f} times the noise ({noise:.3g} m); "
            f"at least {_MIN_DECAY_SNR:g} are needed, release or tap harder"
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


# ---------------------------------------------------------------------------- step

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


# --------------------------------------------------------------------------- scale


def scale_from(
    result: RingdownResult | StepFitResult,
    *,
    mass_kg: float | None = None,
    mass_u_kg: float = 0.0,
    stiffness_n_per_m: float | None = None,
    stiffness_u_n_per_m: float = 0.0,
    step_force_n: float | None = None,
    step_force_u_n: float = 0.0,
) -> IdentifiedPlant:
    """Mass and stiffness from ωn and one known quantity, with first-order uncertainties.

    Give exactly one of:

    * ``mass_kg`` (moving mass, kg): ``k = m·ωn²``,
      ``u²(k) = (ωn²·u(m))² + (2m·ωn·u(ωn))²``;
    * ``stiffness_n_per_m`` (static calibration, N/m): ``m = k/ωn²``,
      ``u²(m) = (u(k)/ωn²)² + (2k·u(ωn)/ωn³)²``;
    * ``step_force_n`` (N, `StepFitResult` only): ``k = F/gain``, ``m = F/(gain·ωn²)``,
      with the covariance of gain and ωn from the fit.

    The ``*_u_*`` arguments are standard uncertainties (>= 0) in the same unit.
    Propagation by the GUM law (JCGM 100:2008, 5.1.2 and 5.2.2), first order.
    """
    if not isinstance(result, RingdownResult | StepFitResult):
        raise ParameterError(
            f"result is a {type(result).__name__}; pass the result of identify_ringdown "
            "or identify_step"
        )
    given = [
        name
        for name, v in (
            ("mass_kg", mass_kg),
            ("stiffness_n_per_m", stiffness_n_per_m),
            ("step_force_n", step_force_n),
        )
        if v is not None
    ]
    if len(given) != 1:
        raise ParameterError(
            f"give exactly one known quantity (mass_kg, stiffness_n_per_m or step_force_n), "
            f"got {given or 'none'}"
        )
    wn = result.natural_freq_rad_s.value
    u_wn = result.natural_freq_rad_s.u
    zeta = result.damping_ratio
    if mass_kg is not None:
        m = _positive("mass_kg", mass_kg, "give the moving mass in kg, > 0")
        u_m = _non_negative("mass_u_kg", mass_u_kg, "give its standard uncertainty in kg")
        k = m * wn * wn
        u_k = math.hypot(wn * wn * u_m, 2.0 * m * wn * u_wn)
        source = "known mass"
    elif stiffness_n_per_m is not None:
        k = _positive("stiffness_n_per_m", stiffness_n_per_m, "give the stiffness in N/m, > 0")
        u_k = _non_negative(
            "stiffness_u_n_per_m", stiffness_u_n_per_m, "give its standard uncertainty in N/m"
        )
        m = k / (wn * wn)
        u_m = math.hypot(u_k / (wn * wn), 2.0 * k * u_wn / wn**3)
        source = "known stiffness"
    else:
        if not isinstance(result, StepFitResult):
            raise ParameterError(
                "step_force_n needs the result of identify_step (a ring-down has no static "
                "gain); give mass_kg or stiffness_n_per_m instead"
            )
        force = _finite("step_force_n", step_force_n, "give the step force in N, non-zero")
        u_force = _non_negative(
            "step_force_u_n", step_force_u_n, "give its standard uncertainty in N"
        )
        gain = result.gain_m.value
        k = force / gain if gain != 0.0 else math.nan
        if not k > 0.0:
            raise ParameterError(
                f"step_force_n = {force!r} N and the fitted step {gain:.3g} m have opposite "
                "signs; give the force with the sign that produced the step"
            )
        cov = result.covariance
        var_g, var_w, cov_gw = float(cov[0, 0]), float(cov[1, 1]), float(cov[0, 1])
        rel_f = (u_force / force) ** 2
        u_k = k * math.sqrt(rel_f + var_g / gain**2)
        m = k / (wn * wn)
        # ln m = ln F − ln gain − 2 ln ωn: sensitivities 1, −1/gain, −2/ωn.
        rel_m = rel_f + var_g / gain**2 + 4.0 * var_w / wn**2 + 4.0 * cov_gw / (gain * wn)
        u_m = m * math.sqrt(max(rel_m, 0.0))
        source = "known step force"
    return IdentifiedPlant(
        mass_kg=m,
        mass_u_kg=u_m,
        stiffness_n_per_m=k,
        stiffness_u_n_per_m=u_k,
        damping_ratio=zeta.value,
        damping_ratio_u=zeta.u,
        natural_freq_rad_s=wn,
        natural_freq_u_rad_s=u_wn,
        scale_source=source,
    )
