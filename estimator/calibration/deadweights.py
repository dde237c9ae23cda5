"""Force of deadweights from their conventional mass (OIML R 111-1:2004)."""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike

from estimator.calibration.checks import (
    _AIR_RANGE_KG_M3,
    _G_RANGE_M_S2,
    _WEIGHT_RANGE_KG_M3,
    _finite_array,
    _in_range,
)
from estimator.errors import ParameterError
from estimator.validation import finite_float as _finite

#: Reference air density ρ0 of the conventional mass, kg/m³ (OIML R 111-1:2004).
CONVENTIONAL_AIR_DENSITY_KG_M3 = 1.2
#: Reference density ρc of the conventional mass, kg/m³ (OIML R 111-1:2004).
CONVENTIONAL_WEIGHT_DENSITY_KG_M3 = 8000.0


# ------------------------------------------------------------------------ deadweights


def _buoyancy_factor(air: float, weight: np.ndarray | float) -> np.ndarray | float:
    rho0, rhoc = CONVENTIONAL_AIR_DENSITY_KG_M3, CONVENTIONAL_WEIGHT_DENSITY_KG_M3
    return (1.0 - rho0 / rhoc) * (1.0 - air / weight) / (1.0 - rho0 / weight)


def deadweight_force_n(
    conventional_mass_kg: float,
    g_m_s2: float,
    *,
    air_density_kg_m3: float = CONVENTIONAL_AIR_DENSITY_KG_M3,
    weight_density_kg_m3: float = CONVENTIONAL_WEIGHT_DENSITY_KG_M3,
) -> float:
    """Force in N of a weight of conventional mass ``m_c`` hanging in air of density ``ρa``.

    ``F = m_c·g·(1 − ρ0/ρc)·(1 − ρa/ρ)/(1 − ρ0/ρ)`` with ``ρ0 = 1.2 kg/m³`` and
    ``ρc = 8000 kg/m³`` (the conventional-mass definition of OIML R 111-1:2004, which
    gives the true mass ``m = m_c·(1 − ρ0/ρc)/(1 − ρ0/ρ)``; the air lifts ``m·g·ρa/ρ``).

    Args:
        conventional_mass_kg: ``m_c`` in kg, finite and >= 0.
        g_m_s2: local gravity in m/s², 9.7 to 9.9.
        air_density_kg_m3: ``ρa`` in kg/m³, 0 to 2 (default the reference 1.2).
        weight_density_kg_m3: ``ρ`` of the weight's material in kg/m³, 500 to 25000.

    Raises:
        ParameterError: a value that is not finite or out of range, named.
    """
    fix = "give the conventional mass in kg, finite and >= 0"
    mass = _finite("conventional_mass_kg", conventional_mass_kg, fix)
    if mass < 0.0:
        raise ParameterError(f"conventional_mass_kg = {mass!r} is negative; {fix}")
    g = _in_range("g_m_s2", g_m_s2, *_G_RANGE_M_S2, "m/s²", "the local gravity")
    air = _in_range(
        "air_density_kg_m3", air_density_kg_m3, *_AIR_RANGE_KG_M3, "kg/m³", "the air density"
    )
    rho = _in_range(
        "weight_density_kg_m3",
        weight_density_kg_m3,
        *_WEIGHT_RANGE_KG_M3,
        "kg/m³",
        "the density of the weights' material",
    )
    return float(mass * g * _buoyancy_factor(air, rho))


def forces_from_sheet(
    load: ArrayLike,
    load_column: str,
    g_m_s2: float | None = None,
    *,
    air_density_kg_m3: float = CONVENTIONAL_AIR_DENSITY_KG_M3,
    weight_density_kg_m3: float | ArrayLike = CONVENTIONAL_WEIGHT_DENSITY_KG_M3,
) -> np.ndarray:
    """Applied forces in N from the load column of a calibration sheet.

    Args:
        load: shape (n,), the sheet's load column: conventional masses in kg when
            ``load_column == "mass_kg"``, forces in N when ``"force_n"``; >= 0 (0 marks
            a zero reading).
        load_column: ``"mass_kg"`` or ``"force_n"``.
        g_m_s2: local gravity in m/s² (9.7 to 9.9); needed for masses, unused for forces.
        air_density_kg_m3: ``ρa`` in kg/m³ for masses.
        weight_density_kg_m3: ``ρ`` of the weights in kg/m³, one value or shape (n,).

    Returns:
        float64 array of shape (n,) in N; rows with load 0 give exactly 0.

    Raises:
        ParameterError: an unknown column, a negative or non-finite load, a bad site value.
    """
    values = _finite_array("load", load, "kg or N")
    neg = np.nonzero(values < 0.0)[0]
    if neg.size:
        raise ParameterError(
            f"load[{int(neg[0])}] = {float(values[neg[0]])!r} is negative; loads are >= 0 "
            "(0 for a zero reading); give tension and compression as separate sheets"
        )
    if load_column == "force_n":
        return values
    if load_column != "mass_kg":
        raise ParameterError(
            f"load_column = {load_column!r} is unknown; it must be 'mass_kg' or 'force_n'"
        )
    if g_m_s2 is None:
        raise ParameterError(
            "g_m_s2 = None with loads in kg; give the local gravity in m/s² (measured, or "
            "estimator.gravity.normal_gravity_m_s2 for the site)"
        )
    g = _in_range("g_m_s2", g_m_s2, *_G_RANGE_M_S2, "m/s²", "the local gravity")
    air = _in_range(
        "air_density_kg_m3", air_density_kg_m3, *_AIR_RANGE_KG_M3, "kg/m³", "the air density"
    )
    try:
        rho = np.array(weight_density_kg_m3, dtype=np.float64)
    except (TypeError, ValueError):
        raise ParameterError(
            f"weight_density_kg_m3 = {weight_density_kg_m3!r} is not a number or an array "
            "of numbers in kg/m³"
        ) from None
    if rho.ndim == 0:
        rho = np.full(values.shape, float(rho))
    if rho.shape != values.shape:
        raise ParameterError(
            f"weight_density_kg_m3 has shape {rho.shape}; give one value or one per row "
            f"{values.shape}"
        )
    lo, hi = _WEIGHT_RANGE_KG_M3
    bad = np.nonzero(~((rho >= lo) & (rho <= hi)))[0]  # NaN fails too
    if bad.size:
        raise ParameterError(
            f"weight_density_kg_m3 = {float(rho[bad[0]])!r} is outside {lo:g}..{hi:g} kg/m³; give "
            "the density of the weights' material (8000 for steel)"
        )
    return values * g * _buoyancy_factor(air, rho)
