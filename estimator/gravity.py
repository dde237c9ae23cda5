"""Normal gravity of the GRS80 ellipsoid, for deadweight forces when ``g`` was not measured.

On the ellipsoid, Somigliana's closed formula (geodetic latitude ``φ``)::

    γ0(φ) = (a·γe·cos²φ + b·γp·sin²φ) / sqrt(a²·cos²φ + b²·sin²φ)
          = γe·(1 + k·sin²φ) / sqrt(1 − e²·sin²φ),   k = (b·γp − a·γe)/(a·γe)

Above it, the free-air height correction to second order in the ellipsoidal height
``h``::

    γ(φ, h) = γ0(φ)·[1 − (2/a)·(1 + f + m − 2f·sin²φ)·h + (3/a²)·h²],   m = ω²a²b/GM

Constants of the Geodetic Reference System 1980 (H. Moritz, "Geodetic Reference
System 1980", Bulletin Géodésique 54, 1980; values from memory, the 45° value and the
free-air gradient recomputed from them in docs/method-calibration.md): defining
``a``, ``GM``, ``ω`` (with ``J2``), derived ``f``, ``γe``, ``γp``. The height formula is
that of Heiskanen & Moritz, "Physical Geodesy" (from memory: 1967, eq. 2-124).

Units: latitude in degrees, height in m, gravity in m/s².
"""

from __future__ import annotations

import math

from estimator.errors import ParameterError
from estimator.validation import finite_float as _finite

__all__ = [
    "GRS80_A_M",
    "GRS80_B_M",
    "GRS80_F",
    "GRS80_GAMMA_E_M_S2",
    "GRS80_GAMMA_P_M_S2",
    "GRS80_GM_M3_S2",
    "GRS80_OMEGA_RAD_S",
    "HEIGHT_RANGE_M",
    "normal_gravity_m_s2",
]

#: Semi-major axis a in m (GRS80, defining constant).
GRS80_A_M = 6378137.0
#: Geocentric gravitational constant GM in m³/s² (GRS80, defining constant).
GRS80_GM_M3_S2 = 3986005e8
#: Angular velocity ω in rad/s (GRS80, defining constant).
GRS80_OMEGA_RAD_S = 7292115e-11
#: Flattening f (GRS80, derived constant 1/298.257222101).
GRS80_F = 1.0 / 298.257222101
#: Semi-minor axis b = a·(1 − f) in m (6356752.3141 m).
GRS80_B_M = GRS80_A_M * (1.0 - GRS80_F)
#: Normal gravity at the equator γe in m/s² (GRS80, derived constant).
GRS80_GAMMA_E_M_S2 = 9.7803267715
#: Normal gravity at the poles γp in m/s² (GRS80, derived constant).
GRS80_GAMMA_P_M_S2 = 9.8321863685

#: Heights accepted by `normal_gravity_m_s2`, in m: from below the lowest dry land to
#: high mountains. The second-order free-air formula holds in free air only; for a
#: laboratory underground or far outside this range, measure g and give it instead.
HEIGHT_RANGE_M = (-1000.0, 10000.0)

_A, _B, _F = GRS80_A_M, GRS80_B_M, GRS80_F
_E2 = 1.0 - (_B / _A) ** 2  # first eccentricity squared, 0.00669438002290
_K = (_B * GRS80_GAMMA_P_M_S2 - _A * GRS80_GAMMA_E_M_S2) / (_A * GRS80_GAMMA_E_M_S2)
_M = GRS80_OMEGA_RAD_S**2 * _A**2 * _B / GRS80_GM_M3_S2  # 0.00344978600308


def normal_gravity_m_s2(latitude_deg: float, height_m: float = 0.0) -> float:
    """GRS80 normal gravity in m/s² at geodetic latitude and height above the ellipsoid.

    Args:
        latitude_deg: geodetic latitude in degrees, finite, -90 to 90 (south negative).
        height_m: ellipsoidal height in m, finite, within `HEIGHT_RANGE_M`.

    Returns:
        γ in m/s²: Somigliana's closed formula on the ellipsoid, then the free-air
        correction to second order in ``height_m`` (module docstring).

    Raises:
        ParameterError: a value that is not a finite number, or out of range; the
            message names the argument.
    """
    lat = _finite("latitude_deg", latitude_deg, "give the geodetic latitude in degrees, -90 to 90")
    if not -90.0 <= lat <= 90.0:
        raise ParameterError(
            f"latitude_deg = {lat!r} is outside -90..90; give the geodetic latitude in "
            "degrees (south negative)"
        )
    lo, hi = HEIGHT_RANGE_M
    fix = (
        f"give the height above the ellipsoid in m, {lo:g} to {hi:g}, or measure the local "
        "g and give it instead"
    )
    h = _finite("height_m", height_m, fix)
    if not lo <= h <= hi:
        raise ParameterError(f"height_m = {h!r} is outside {lo:g}..{hi:g} m; {fix}")
    sin2 = math.sin(math.radians(lat)) ** 2
    gamma0 = GRS80_GAMMA_E_M_S2 * (1.0 + _K * sin2) / math.sqrt(1.0 - _E2 * sin2)
    linear = (2.0 / _A) * (1.0 + _F + _M - 2.0 * _F * sin2)
    return gamma0 * (1.0 - linear * h + 3.0 * h * h / (_A * _A))
