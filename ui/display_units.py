"""Units and digits of what the operator reads.

One unit per quantity, chosen once per cell from its range (`CellUnits.for_profile`),
and every number rounded to what its uncertainty supports: the expanded uncertainty U
is quoted to two significant digits and the value to the same decimal place, as
JCGM 100:2008 (GUM) 7.2.6 advises ("it usually suffices to quote u_c(y) and U to at
most two significant digits"; the estimate is rounded to be consistent with it).

* Force: the SI-prefixed newton in which the larger end of the calibrated range reads
  from 1 to below 1000 (a 120 N cell in N, a 5 kN cell in kN, a 0.5 N cell in mN).
* Displacement: the prefixed metre chosen the same way from the cell's travel (or, when
  the profile gives none, the largest calibrated force over the stiffness); its digits
  follow the expanded uncertainty of one transducer sample, 2·√(σ² + LSB²/12), from
  the profile's noise and resolution.
* Time: device time in s, with as many decimals as one sample period needs; durations
  (rise, settling) in ms, the same way.

Pure functions, no Qt: the dashboard and the terminal status line both use them.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

__all__ = ["CellUnits", "Unit", "decimals_for", "fixed", "unit_for"]

# SI prefixes in steps of 10³ (ISO 80000-1 / the SI brochure), smallest first.
_PREFIXES: tuple[tuple[float, str], ...] = (
    (1e-9, "n"),
    (1e-6, "µ"),
    (1e-3, "m"),
    (1.0, ""),
    (1e3, "k"),
    (1e6, "M"),
)
#: Decimals shown when a value's uncertainty is not known (not finite, or 0).
FALLBACK_DECIMALS = 3


@dataclass(frozen=True)
class Unit:
    """A display unit: its symbol and its size in the SI base unit (µm: 1e-6 m)."""

    symbol: str
    size: float

    def of(self, si_value: float) -> float:
        """`si_value` expressed in this unit."""
        return si_value / self.size


def unit_for(base: str, largest: float) -> Unit:
    """The prefixed `base` unit in which `largest` (SI, > 0) reads from 1 to below 1000.

    Beyond the prefixes known here the nearest one is used; a `largest` that is not a
    positive number gives the base unit.
    """
    if not (math.isfinite(largest) and largest > 0.0):
        return Unit(base, 1.0)
    chosen = _PREFIXES[0]
    for size, prefix in _PREFIXES:
        if largest >= size * (1.0 - 1e-12):
            chosen = (size, prefix)
    return Unit(chosen[1] + base, chosen[0])


def decimals_for(uncertainty: float, unit: Unit, significant: int = 2) -> int:
    """Decimal places that show `uncertainty` (SI) in `unit` with `significant` digits.

    Never negative (a U of 230 N in N shows as "230"); `FALLBACK_DECIMALS` when the
    uncertainty is not a positive number. A U that rounds up into the next decade keeps
    `significant` digits (0.0996 with two digits is 0.10, two decimals).
    """
    u = abs(unit.of(uncertainty)) if math.isfinite(uncertainty) else math.nan
    if not (math.isfinite(u) and u > 0.0):
        return FALLBACK_DECIMALS
    exponent = math.floor(math.log10(u))
    decimals = significant - 1 - exponent
    if round(u, decimals) >= 10.0 ** (exponent + 1):  # rounding carried into a new digit
        decimals -= 1
    return max(0, decimals)


def fixed(value: float, decimals: int) -> str:
    """`value` with `decimals` places; never "-0.00" (a value that rounds to zero has no
    sign); "—" for a value that is not a number."""
    if not math.isfinite(value):
        return "—"
    text = f"{value:.{decimals}f}"
    if text.startswith("-") and float(text) == 0.0:
        text = text[1:]
    return text


@dataclass(frozen=True)
class CellUnits:
    """The units and digits used on screen for one cell.

    Attributes:
        force: display unit of force.
        displacement: display unit of displacement.
        displacement_u_m: expanded uncertainty (k = 2) of one displacement sample, m,
            from the profile's noise and resolution; it sets the displacement's digits.
        sample_period_s: one sample period, s; it sets the digits of times.
    """

    force: Unit
    displacement: Unit
    displacement_u_m: float
    sample_period_s: float

    @classmethod
    def for_profile(cls, profile: Any) -> CellUnits:
        """The units of a cell profile (`estimator.profile.CellProfile`)."""
        lim, tr = profile.limits, profile.transducer
        largest_force = max(abs(lim.force_min_n), abs(lim.force_max_n))
        travel = lim.travel_m
        if travel is None:
            travel = largest_force / profile.plant.stiffness_n_per_m
        sigma = math.sqrt(tr.noise_m**2 + tr.resolution_m**2 / 12.0)
        return cls(
            force=unit_for("N", largest_force),
            displacement=unit_for("m", travel),
            displacement_u_m=2.0 * sigma,
            sample_period_s=1.0 / profile.acquisition.sample_rate_hz,
        )

    # ----------------------------------------------------------------- force
    @property
    def force_unit(self) -> tuple[str, float]:
        """The force unit as ``(symbol, newtons per unit)``, for texts made outside ``ui``."""
        return self.force.symbol, self.force.size

    def force_decimals(self, expanded_u_n: float) -> int:
        """Decimals of a force whose expanded uncertainty is `expanded_u_n` (N)."""
        return decimals_for(expanded_u_n, self.force)

    def force_number(self, force_n: float, expanded_u_n: float) -> str:
        """The force in the force unit, digits following U, without the unit."""
        return fixed(self.force.of(force_n), self.force_decimals(expanded_u_n))

    def force_text(self, force_n: float, expanded_u_n: float) -> str:
        """The force with its unit, digits following U: "50.00 N"."""
        return f"{self.force_number(force_n, expanded_u_n)} {self.force.symbol}"

    def u_text(self, expanded_u_n: float) -> str:
        """U itself to two significant digits, with the unit: "0.20 N"."""
        return self.force_text(expanded_u_n, expanded_u_n)

    # ----------------------------------------------------------- displacement
    def displacement_text(self, displacement_m: float) -> str:
        """The displacement with its unit, digits following one sample's U."""
        d = decimals_for(self.displacement_u_m, self.displacement)
        return f"{fixed(self.displacement.of(displacement_m), d)} {self.displacement.symbol}"

    # ------------------------------------------------------------------ time
    @property
    def time_decimals(self) -> int:
        """Decimals of a time in s that resolve one sample period."""
        return _decimals_resolving(self.sample_period_s)

    def time_text(self, time_s: float) -> str:
        """A device time: "t = 4.1225 s"."""
        return f"t = {fixed(time_s, self.time_decimals)} s"

    def duration_ms(self, duration_s: float) -> str:
        """A duration in ms (no unit) with decimals that resolve one sample period."""
        return fixed(duration_s * 1e3, _decimals_resolving(self.sample_period_s * 1e3))


def _decimals_resolving(step: float) -> int:
    """Decimals at which `step` (> 0) is at least one unit of the last place."""
    if not (math.isfinite(step) and step > 0.0):
        return FALLBACK_DECIMALS
    return max(0, math.ceil(-math.log10(step) - 1e-9))
