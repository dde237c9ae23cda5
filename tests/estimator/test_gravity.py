"""Tests of estimator.gravity against the published GRS80 values and formulas.

Source: H. Moritz, "Geodetic Reference System 1980", Bulletin Géodésique 54 (1980)
(constants and series from memory); W. A. Heiskanen & H. Moritz, "Physical Geodesy"
(1967), free-air formula to second order (from memory: eq. 2-124).
"""

from __future__ import annotations

import math
from decimal import Decimal, localcontext

import pytest

from estimator.errors import ParameterError
from estimator.gravity import normal_gravity_m_s2

# ------------------------------------------------------------------ published values


def test_equator_is_gamma_e() -> None:
    # Moritz 1980: γe = 9.7803267715 m/s². Somigliana at φ = 0 is γe itself; 1e-12 m/s²
    # is a few ulps of 9.78 (rounding only).
    assert normal_gravity_m_s2(0.0) == pytest.approx(9.7803267715, abs=1e-12)


@pytest.mark.parametrize("lat", [90.0, -90.0])
def test_poles_are_gamma_p(lat: float) -> None:
    # Moritz 1980: γp = 9.8321863685 m/s²; the formula reduces to γp at the poles up to
    # rounding of a handful of operations (1e-12 m/s²).
    assert normal_gravity_m_s2(lat) == pytest.approx(9.8321863685, abs=1e-12)


def test_45_degrees_from_the_grs80_constants() -> None:
    # 9.8061992025 m/s² at 45°, computed from the GRS80 constants (issue 4's check).
    # Independent recomputation here: Somigliana in its a/b form, sin²φ = cos²φ = 1/2,
    # in 40-digit decimal arithmetic; b = a(1 − f) with f = 1/298.257222101 (Moritz 1980).
    with localcontext() as ctx:
        ctx.prec = 40
        a = Decimal(6378137)
        b = a * (1 - 1 / Decimal("298.257222101"))
        ge, gp = Decimal("9.7803267715"), Decimal("9.8321863685")
        exact = (a * ge + b * gp) / 2 / ((a * a + b * b) / 2).sqrt()
    got = normal_gravity_m_s2(45.0)
    # Tolerance 1e-9 m/s² as asked; the rounded literal is within 5e-11 of the exact value.
    assert got == pytest.approx(9.8061992025, abs=1e-9)
    # Double vs 40-digit arithmetic of the same quantity: a few ulps (1e-13 m/s²).
    assert got == pytest.approx(float(exact), abs=1e-13)


@pytest.mark.parametrize("lat", [0.0, 10.0, 23.5, 37.0, 45.0, 52.3, 66.6, 80.0, 89.9])
def test_moritz_series_expansion(lat: float) -> None:
    # Moritz 1980 (from memory): the series
    # γ = γe(1 + 0.0052790414 s² + 0.0000232718 s⁴ + 0.0000001262 s⁶ + 0.0000000007 s⁸),
    # s = sin φ, quoted with a relative accuracy of about 1e-10, i.e. 1e-9 m/s².
    s2 = math.sin(math.radians(lat)) ** 2
    series = 9.7803267715 * (
        1.0 + 0.0052790414 * s2 + 0.0000232718 * s2**2 + 0.0000001262 * s2**3 + 7e-10 * s2**4
    )
    assert normal_gravity_m_s2(lat) == pytest.approx(series, abs=1e-9)
    # International gravity formula 1980 (from memory):
    # γ = 9.780327(1 + 0.0053024 sin²φ − 0.0000058 sin²2φ), good to about 1e-6 m/s²
    # (0.1 mGal); 2e-6 m/s² leaves room for its rounded coefficients.
    short = 9.780327 * (1.0 + 0.0053024 * s2 - 0.0000058 * math.sin(math.radians(2 * lat)) ** 2)
    assert normal_gravity_m_s2(lat) == pytest.approx(short, abs=2e-6)


@pytest.mark.parametrize("lat", [12.0, 45.0, 71.0])
def test_symmetric_in_latitude(lat: float) -> None:
    # Normal gravity of an ellipsoid of revolution does not depend on the hemisphere.
    assert normal_gravity_m_s2(-lat, 300.0) == normal_gravity_m_s2(lat, 300.0)


# ------------------------------------------------------------------------- height


@pytest.mark.parametrize("lat", [0.0, 30.0, 45.0, 60.0, 90.0])
def test_free_air_gradient(lat: float) -> None:
    # Common practice: normal gravity falls by about 3.086e-6 m/s² per metre (0.3086 mGal/m).
    # That rounded value is a mid-latitude one: the exact first-order coefficient
    # 2γ/a·(1 + f + m − 2f sin²φ) goes from 3.0877e-6 (equator) to 3.0834e-6 (poles), so
    # 3e-9 m/s²/m covers every latitude and still catches a wrong factor (e.g. 2/a alone
    # gives 3.067e-6 at the equator, a missing m term 3.0770e-6).
    step = 10.0  # m; central difference, the h² term cancels
    grad = (normal_gravity_m_s2(lat, step) - normal_gravity_m_s2(lat, -step)) / (2.0 * step)
    assert grad == pytest.approx(-3.086e-6, abs=3e-9)


@pytest.mark.parametrize("lat", [0.0, 45.0, 90.0])
def test_first_order_coefficient_closed_form(lat: float) -> None:
    # Heiskanen & Moritz (from memory, eq. 2-124): ∂γ/∂h = −(2γ/a)(1 + f + m − 2f sin²φ),
    # m = ω²a²b/GM = 0.00344978600308 (Moritz 1980). The central difference over ±10 m
    # has rounding error ~ eps·γ/10 m ≈ 2e-16 m/s²/m; 1e-14 is far above that.
    a, f, m = 6378137.0, 1.0 / 298.257222101, 0.00344978600308
    s2 = math.sin(math.radians(lat)) ** 2
    g0 = normal_gravity_m_s2(lat)
    expected = -2.0 * g0 / a * (1.0 + f + m - 2.0 * f * s2)
    grad = (normal_gravity_m_s2(lat, 10.0) - normal_gravity_m_s2(lat, -10.0)) / 20.0
    assert grad == pytest.approx(expected, abs=1e-14)


def test_second_order_term() -> None:
    # Heiskanen & Moritz (from memory): the h² term is +3γ/a²·h², the same as the
    # second-order term of a point mass GM/(a + h)² (Taylor series). Second difference
    # over ±1000 m: exact for a quadratic up to rounding ~ 4·eps·γ/h² ≈ 1e-20 against
    # 6γ/a² ≈ 1.45e-12 (relative 1e-8); tolerance 1e-6 relative.
    lat, h, a = 45.0, 1000.0, 6378137.0
    g0 = normal_gravity_m_s2(lat)
    second = (normal_gravity_m_s2(lat, h) - 2.0 * g0 + normal_gravity_m_s2(lat, -h)) / h**2
    assert second == pytest.approx(6.0 * g0 / a**2, rel=1e-6)


def test_height_lowers_gravity_by_the_expected_amount_at_a_lab() -> None:
    # At 520 m the free-air change is about −3.086e-6 × 520 = −1.605e-3 m/s² (common
    # practice rate); the latitude spread of the rate (±2.2e-9 per m, see above) and the
    # h² term (3γh²/a² ≈ 2e-7 m/s²) stay within 2e-6 m/s².
    drop = normal_gravity_m_s2(48.0, 520.0) - normal_gravity_m_s2(48.0, 0.0)
    assert drop == pytest.approx(-3.086e-6 * 520.0, abs=2e-6)


# -------------------------------------------------------------------------- refusals


@pytest.mark.parametrize("lat", [90.0001, -91.0, 180.0, math.nan, math.inf, "north", None, True])
def test_bad_latitude_is_refused_by_name(lat: object) -> None:
    with pytest.raises(ParameterError, match="latitude_deg"):
        normal_gravity_m_s2(lat)  # type: ignore[arg-type]


@pytest.mark.parametrize("h", [-1000.1, 10000.5, 1e7, math.nan, -math.inf, "high"])
def test_bad_height_is_refused_by_name(h: object) -> None:
    with pytest.raises(ParameterError, match="height_m"):
        normal_gravity_m_s2(45.0, h)  # type: ignore[arg-type]


def test_range_ends_are_accepted() -> None:
    # -1000 m and 10000 m are the documented limits; both ends are inside.
    assert normal_gravity_m_s2(0.0, -1000.0) > normal_gravity_m_s2(0.0, 0.0)
    assert normal_gravity_m_s2(0.0, 10000.0) < normal_gravity_m_s2(0.0, 0.0)
