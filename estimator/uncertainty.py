"""Combined standard uncertainty of the force reading (GUM law of propagation).

The reading is F = k·x_F, where x_F is the displacement the observer attributes to the
force and k the calibrated stiffness. With uncorrelated inputs the law of propagation of
uncertainty (JCGM 100:2008, eq. 10) gives

    u_c²(F) = u_obs² + (F·u(k)/k)² + (k·r)²/12 + (w·F)²

* ``u_obs``: the observer's standard uncertainty (``force_u_n``: its covariance, the bias of
  coarse quantisation, and on a moving load the force the plant's uncertain mass and
  damping carry; docs/method-observer.md, section 7), N;
* ``F·u(k)/k``: the calibration, with sensitivity coefficient ∂F/∂k = F/k;
* ``k·r/√12``: the resolution r of the displacement reading, a rectangular distribution
  of width one count (JCGM 100:2008, 4.3.7 and F.2.2.1);
* ``w·F``: a relative model term (non-linearity, hysteresis) from the calibration's
  residuals or an estimate of the user; 0 by default.

The expanded uncertainty is U = k_p·u_c with the coverage factor k_p = 2 (about 95 % for
a normal distribution), and is always stated with its coverage factor.

Note: the observer's measurement variance already holds the quantisation variance
LSB²/12 as white noise, which a static reading averages away, and its σ holds the bias
averaging cannot remove when the noise is narrower than a step (`estimator.quantisation`,
0 when the noise dithers the readings); the resolution is counted here once more as a
fixed rectangular term (the conservative choice).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike

from estimator.errors import ParameterError

__all__ = ["COVERAGE_FACTOR", "ForceUncertainty", "UncertaintyBudget"]

#: Coverage factor of every expanded uncertainty forcelens shows.
COVERAGE_FACTOR = 2.0


@dataclass(frozen=True)
class UncertaintyBudget:
    """The contributions to u_c(F) of one reading, each a standard uncertainty in N."""

    force_n: float
    observer_n: float
    calibration_n: float
    resolution_n: float
    model_n: float

    @property
    def combined_n(self) -> float:
        """u_c(F), N (root sum of squares)."""
        return math.sqrt(
            self.observer_n**2 + self.calibration_n**2 + self.resolution_n**2 + self.model_n**2
        )

    @property
    def expanded_n(self) -> float:
        """U = 2·u_c, N (coverage factor 2)."""
        return COVERAGE_FACTOR * self.combined_n

    def text(self) -> str:
        """The budget as a small table with units (standard uncertainties, k = 1)."""
        rows = [
            ("observer (noise, force model, m and b)", self.observer_n),
            ("calibration (stiffness)", self.calibration_n),
            ("resolution (one count, rectangular)", self.resolution_n),
            ("model (relative term)", self.model_n),
        ]
        lines = [f"uncertainty budget at F = {self.force_n:.6g} N (standard uncertainties, k = 1)"]
        lines += [f"  {name:38s} {value:.3g} N" for name, value in rows]
        lines.append(f"  {'combined u_c':38s} {self.combined_n:.3g} N")
        lines.append(f"  {'expanded U (k = 2, about 95 %)':38s} {self.expanded_n:.3g} N")
        return "\n".join(lines)


@dataclass(frozen=True)
class ForceUncertainty:
    """The non-statistical inputs of the budget, from the cell profile.

    Attributes:
        stiffness_n_per_m: calibrated stiffness k, N/m (> 0).
        stiffness_u_n_per_m: its standard uncertainty, N/m (≥ 0).
        resolution_m: one count of the displacement reading, m (≥ 0).
        model_rel: relative model term w (≥ 0), dimensionless.
    """

    stiffness_n_per_m: float
    stiffness_u_n_per_m: float = 0.0
    resolution_m: float = 0.0
    model_rel: float = 0.0

    def __post_init__(self) -> None:
        for name in ("stiffness_u_n_per_m", "resolution_m", "model_rel"):
            value = getattr(self, name)
            if not (math.isfinite(value) and value >= 0.0):
                raise ParameterError(f"{name} = {value!r}: must be a finite number >= 0")
        k = self.stiffness_n_per_m
        if not (math.isfinite(k) and k > 0.0):
            raise ParameterError(f"stiffness_n_per_m = {k!r}: must be a finite number > 0")

    @classmethod
    def from_profile(cls, profile: object, model_rel: float = 0.0) -> ForceUncertainty:
        """The budget inputs of a cell profile (its plant and transducer tables)."""
        plant = profile.plant  # type: ignore[attr-defined]
        return cls(
            plant.stiffness_n_per_m,
            plant.stiffness_u_n_per_m,
            profile.transducer.resolution_m,  # type: ignore[attr-defined]
            model_rel,
        )

    def combined_n(self, force_n: ArrayLike, observer_u_n: ArrayLike) -> np.ndarray:
        """u_c(F), N, element by element for arrays of the same shape."""
        f = np.asarray(force_n, dtype=float)
        u = np.asarray(observer_u_n, dtype=float)
        k = self.stiffness_n_per_m
        return np.sqrt(
            u**2
            + (f * self.stiffness_u_n_per_m / k) ** 2
            + (k * self.resolution_m) ** 2 / 12.0
            + (self.model_rel * f) ** 2
        )

    def expanded_n(self, force_n: ArrayLike, observer_u_n: ArrayLike) -> np.ndarray:
        """U = 2·u_c(F), N."""
        return COVERAGE_FACTOR * self.combined_n(force_n, observer_u_n)

    def budget(self, force_n: float, observer_u_n: float) -> UncertaintyBudget:
        """The contributions for one reading."""
        k = self.stiffness_n_per_m
        return UncertaintyBudget(
            force_n=float(force_n),
            observer_n=float(observer_u_n),
            calibration_n=abs(float(force_n)) * self.stiffness_u_n_per_m / k,
            resolution_n=k * self.resolution_m / math.sqrt(12.0),
            model_n=self.model_rel * abs(float(force_n)),
        )
