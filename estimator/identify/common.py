"""What the identification methods share: the estimate with its uncertainty, the checks
of a record and of the fitted result, the noise estimate, the covariance of a least-squares
fit, and the free responses of the normalised second-order system (docs/method-identify.md)."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import scipy.stats
from numpy.typing import ArrayLike

from estimator.errors import EstimatorError, ParameterError
from estimator.plant import Plant
from estimator.validation import finite_float as _finite

__all__ = ["MIN_DECAY_SNR", "MIN_SAMPLES", "Estimate"]

#: The fewest samples a fit takes (a ring-down's window or a step's).
MIN_SAMPLES = 20

#: The largest excursion of a free decay, in noise standard deviations, below which no
#: decay is fitted (the ring-down fit and the window finder both refuse it).
MIN_DECAY_SNR = 20.0


_TAIL_FRACTION = 0.2


_TWO_PI = 2.0 * math.pi


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


def _zeta_step(zeta: float) -> tuple[float, float]:
    """Central-difference points in ζ, kept >= 0 (forward difference at the bound)."""
    h = 1e-6 * max(zeta, 1e-3)
    return (zeta - h, zeta + h) if zeta - h >= 0.0 else (zeta, zeta + h)


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
