"""Stiffness and mass from ωn, ζ and one known quantity (a moving mass, a stiffness or a
step force), uncertainties propagated to first order (GUM, JCGM 100:2008;
docs/method-identify.md, section 3)."""

from __future__ import annotations

import math
from dataclasses import dataclass

from estimator.errors import ParameterError
from estimator.identify.common import (
    _non_negative,
    _positive,
)
from estimator.identify.ringdown import RingdownResult
from estimator.identify.step import StepFitResult
from estimator.validation import finite_float as _finite

__all__ = ["IdentifiedPlant", "scale_from"]


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
