"""Tests of estimator.calibration against closed forms, SciPy and hand-worked examples.

Sources: OIML R 111-1:2004 (conventional mass, reference air 1.2 kg/m³ and density
8000 kg/m³); ISO 376:2011 (definitions of b, b′, fc, f0, v and the class table, from
memory); ASTM E74 (2.4 × s, 400 × LLF, 2000 × LLF, from memory); least squares and the
regression through the origin as in N. R. Draper & H. Smith, "Applied Regression
Analysis" (from memory: 3rd ed., Wiley, 1998, ch. 1-3 and 5); SciPy (`linregress`,
`curve_fit`) and NumPy (`polyfit`) as reference implementations; GUM (JCGM 100:2008)
first-order propagation checked against a JCGM 101:2008-style Monte Carlo.
"""

from __future__ import annotations

import hashlib
import itertools
import math
from fractions import Fraction

import numpy as np
import pytest
import scipy.optimize
import scipy.stats

from estimator.calibration import (
    ISO376_CLASS_LIMITS,
    CalibrationPoint,
    CalibrationSet,
    StaticCalibration,
    calibrate_static,
    deadweight_force_n,
    e74_limits,
    evaluate_iso376,
    fit_static,
    forces_from_sheet,
)
from estimator.errors import ParameterError

SHA = hashlib.sha256(b"invented calibration data for tests").hexdigest()

# ---------------------------------------------------------------------- deadweights


@pytest.mark.parametrize("density", [2700.0, 7950.0, 8000.0, 16000.0])
def test_buoyancy_in_reference_air_does_not_depend_on_density(density: float) -> None:
    # OIML R 111-1:2004 definition of conventional mass: in air of exactly 1.2 kg/m³ the
    # force is m_c·g·(1 − 1.2/8000) = m_c·g·(1 − 1.5e-4) whatever the weight's density.
    # An algebraic identity, so only rounding of a few operations: 1e-14 relative.
    m_c, g = 20.0, 9.80665
    force = deadweight_force_n(m_c, g, air_density_kg_m3=1.2, weight_density_kg_m3=density)
    assert force == pytest.approx(m_c * g * (1.0 - 1.5e-4), rel=1e-14)


def test_buoyancy_hand_worked_aluminium_in_thin_air() -> None:
    # Hand-worked in exact fractions: m_c = 10 kg, g = 9.81 m/s², ρa = 1.0 kg/m³,
    # ρ = 2700 kg/m³. True mass (OIML R 111 definition, solved for m):
    #   m = m_c·(1 − 1.2/8000)/(1 − 1.2/2700) = 10·0.99985/0.99955556 = 10.00294575 kg;
    # Archimedes: F = m·g·(1 − 1.0/2700) = 98.1288978·0.99962963 = 98.0925538 N.
    m_c, g, rho_a, rho = Fraction(10), Fraction("9.81"), Fraction(1), Fraction(2700)
    true_mass = m_c * (1 - Fraction("1.2") / 8000) / (1 - Fraction("1.2") / rho)
    expected = float(true_mass * g * (1 - rho_a / rho))
    got = deadweight_force_n(10.0, 9.81, air_density_kg_m3=1.0, weight_density_kg_m3=2700.0)
    assert got == pytest.approx(expected, rel=1e-14)  # rounding of a few operations
    assert expected == pytest.approx(98.0925538, abs=1e-6)  # the hand value above


def test_forces_from_sheet_masses_and_forces() -> None:
    masses = np.array([0.0, 1.0, 2.0, 5.0])
    g = 9.81
    got = forces_from_sheet(masses, "mass_kg", g, air_density_kg_m3=1.2)
    # ρa = 1.2 and steel: each force is m_c·g·(1 − 1.5e-4) (OIML R 111 definition).
    assert got == pytest.approx(masses * g * (1.0 - 1.5e-4), rel=1e-14)
    assert got[0] == 0.0
    # A per-row density gives per-row forces, equal to the scalar function row by row.
    rho = np.array([8000.0, 2700.0, 7950.0, 16000.0])
    rows = forces_from_sheet(masses, "mass_kg", g, air_density_kg_m3=1.1, weight_density_kg_m3=rho)
    for m, r, f in zip(masses, rho, rows, strict=True):
        one = deadweight_force_n(m, g, air_density_kg_m3=1.1, weight_density_kg_m3=r)
        assert f == pytest.approx(one, rel=1e-15)
    # Forces pass through unchanged; g is not needed.
    forces = np.array([0.0, 10.0, 20.0])
    assert np.array_equal(forces_from_sheet(forces, "force_n"), forces)


@pytest.mark.parametrize(
    ("kwargs", "name"),
    [
        ({"conventional_mass_kg": -1.0}, "conventional_mass_kg"),
        ({"conventional_mass_kg": math.nan}, "conventional_mass_kg"),
        ({"g_m_s2": 980.665}, "g_m_s2"),  # Gal for m/s²
        ({"g_m_s2": 1.62}, "g_m_s2"),
        ({"air_density_kg_m3": 12.0}, "air_density_kg_m3"),
        ({"air_density_kg_m3": -0.1}, "air_density_kg_m3"),
        ({"weight_density_kg_m3": 8.0}, "weight_density_kg_m3"),  # g/cm³ for kg/m³
        ({"weight_density_kg_m3": math.inf}, "weight_density_kg_m3"),
    ],
)
def test_deadweight_refuses_bad_values_by_name(kwargs: dict, name: str) -> None:
    args = {"conventional_mass_kg": 1.0, "g_m_s2": 9.81} | kwargs
    with pytest.raises(ParameterError, match=name):
        deadweight_force_n(**args)


def test_forces_from_sheet_refusals() -> None:
    with pytest.raises(ParameterError, match="g_m_s2"):
        forces_from_sheet([0.0, 1.0], "mass_kg", None)
    with pytest.raises(ParameterError, match="load_column"):
        forces_from_sheet([0.0, 1.0], "mass_g", 9.81)
    with pytest.raises(ParameterError, match=r"load\[1\]"):
        forces_from_sheet([0.0, -1.0], "force_n")
    with pytest.raises(ParameterError, match=r"load\[2\]"):
        forces_from_sheet([0.0, 1.0, math.nan], "force_n")
    with pytest.raises(ParameterError, match="weight_density_kg_m3"):
        forces_from_sheet([0.0, 1.0], "mass_kg", 9.81, weight_density_kg_m3=[8000.0])


# ---------------------------------------------------------------------------- fit


def _noisy_line(seed: int, n: int = 25) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    force = np.repeat(np.linspace(100.0, 1000.0, 5), n // 5)
    defl = 2e-6 + 5e-6 * force + rng.normal(0.0, 2e-7, force.size)
    return force, defl


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_straight_line_matches_scipy_linregress(seed: int) -> None:
    force, defl = _noisy_line(seed)
    fit = fit_static(force, defl, degree=1)
    ref = scipy.stats.linregress(force, defl)
    # Both are double-precision least squares (QR here, centred sums in SciPy); they
    # agree to ~1e-12 relative; 1e-9 leaves margin without hiding a wrong formula.
    assert fit.coefficients[1] == pytest.approx(ref.slope, rel=1e-9)
    assert fit.coefficients[0] == pytest.approx(ref.intercept, rel=1e-7)  # small c0
    assert fit.standard_errors[1] == pytest.approx(ref.stderr, rel=1e-9)
    assert fit.standard_errors[0] == pytest.approx(ref.intercept_stderr, rel=1e-9)
    # Residual standard deviation on n − 2 degrees of freedom (Draper & Smith).
    rss = float(np.sum((defl - ref.intercept - ref.slope * force) ** 2))
    assert fit.dof == force.size - 2
    assert fit.residual_std_m == pytest.approx(math.sqrt(rss / (force.size - 2)), rel=1e-9)
    assert fit.residuals_m == pytest.approx(defl - ref.intercept - ref.slope * force, abs=1e-15)


@pytest.mark.parametrize(("degree", "intercept"), [(2, True), (3, True), (2, False), (3, False)])
def test_polynomial_matches_numpy_and_curve_fit(degree: int, intercept: bool) -> None:
    rng = np.random.default_rng(40 + degree)
    force = np.tile(np.linspace(50.0, 500.0, 10), 3)
    truth = 1e-6 * (1.0 if intercept else 0.0) + 4e-6 * force + 2e-10 * force**2 - 1e-13 * force**3
    defl = truth + rng.normal(0.0, 1e-7, force.size)
    fit = fit_static(force, defl, degree=degree, intercept=intercept)
    powers = list(range(0 if intercept else 1, degree + 1))

    def model(f: np.ndarray, *c: float) -> np.ndarray:
        return sum(ci * f**p for ci, p in zip(c, powers, strict=True))

    def jac(f: np.ndarray, *c: float) -> np.ndarray:
        return np.stack([f**p for p in powers], axis=1)

    # curve_fit (absolute_sigma=False) scales (JᵀJ)⁻¹ by RSS/(n − p): the same covariance
    # definition. Its LM iterations converge to ~1e-8 relative on the small coefficients;
    # 1e-6 relative on values and covariance is well inside what a wrong formula would miss
    # (a dof off by one changes the covariance by 1/(n − p) ≈ 4 %).
    ref_c, ref_cov = scipy.optimize.curve_fit(
        model,
        force,
        defl,
        p0=np.zeros(len(powers)),
        jac=jac,
        xtol=1e-15,
        ftol=1e-15,
        gtol=1e-15,
    )
    scales = np.array([500.0**p for p in powers])
    assert fit.coefficients[powers] * scales == pytest.approx(ref_c * scales, rel=1e-6, abs=1e-12)
    assert fit.covariance[np.ix_(powers, powers)] == pytest.approx(ref_cov, rel=1e-6)
    if intercept:
        # numpy.polynomial.polynomial.polyfit: ascending coefficients, same least squares;
        # both double precision, 1e-8 relative (scaled to the range).
        np_c = np.polynomial.polynomial.polyfit(force, defl, degree)
        assert fit.coefficients * 500.0 ** np.arange(degree + 1) == pytest.approx(
            np_c * 500.0 ** np.arange(degree + 1), rel=1e-8, abs=1e-14
        )
    else:
        assert fit.coefficients[0] == 0.0
        assert np.all(fit.covariance[0] == 0.0) and np.all(fit.covariance[:, 0] == 0.0)


def test_through_origin_closed_form() -> None:
    # Regression through the origin (Draper & Smith): c1 = Σxy/Σx²,
    # u(c1)² = s²/Σx², s² = Σ(y − c1·x)²/(n − 1).
    force, defl = _noisy_line(7)
    defl = defl - 2e-6
    fit = fit_static(force, defl, intercept=False)
    c1 = float(force @ defl / (force @ force))
    s2 = float(np.sum((defl - c1 * force) ** 2)) / (force.size - 1)
    assert fit.coefficients[1] == pytest.approx(c1, rel=1e-12)
    assert fit.standard_errors[1] == pytest.approx(math.sqrt(s2 / (force @ force)), rel=1e-9)
    assert fit.dof == force.size - 1


def test_slope_uncertainty_covers_the_truth_at_95_percent() -> None:
    # Seeded repetition: the true slope lies within ±t(0.975, ν)·u(c1) in 95 % of fits
    # (Student t, ν = 18). 600 trials: binomial sd ≈ 0.9 %, so 92..98 % is a 3-sd window;
    # a covariance off by a factor 2 would give ~83 % or ~99.9 %.
    rng = np.random.default_rng(2024)
    force = np.linspace(10.0, 200.0, 20)
    t = scipy.stats.t.ppf(0.975, 18)
    inside = 0
    trials = 600
    for _ in range(trials):
        defl = 1e-6 + 3e-6 * force + rng.normal(0.0, 5e-7, force.size)
        fit = fit_static(force, defl)
        inside += abs(fit.coefficients[1] - 3e-6) <= t * fit.standard_errors[1]
    assert 0.92 <= inside / trials <= 0.98


def test_stiffness_and_its_uncertainty_against_monte_carlo() -> None:
    force, defl = _noisy_line(11)
    fit = fit_static(force, defl)
    c1, u1 = fit.coefficients[1], fit.standard_errors[1]
    assert fit.stiffness_n_per_m == pytest.approx(1.0 / c1, rel=1e-15)
    # GUM first-order propagation u(k) = u(c1)/c1², against a seeded Monte Carlo of
    # k = 1/c1 with c1 ~ N(c1, u1) (JCGM 101:2008). u1/c1 ≈ 1e-3 so the non-linearity
    # is negligible; 200 000 draws estimate the sd to ~0.16 %; tolerance 1 %.
    draws = np.random.default_rng(5).normal(c1, u1, 200_000)
    assert fit.stiffness_u_n_per_m == pytest.approx(np.std(1.0 / draws), rel=1e-2)
    assert fit_static(force, defl, degree=2).stiffness_n_per_m is None
    assert fit_static(force, defl, degree=2).stiffness_u_n_per_m is None


@pytest.mark.parametrize("degree", [1, 2, 3])
def test_force_at_inverts_deflection_at(degree: int) -> None:
    force = np.linspace(10.0, 100.0, 10)
    defl = 1e-6 + 1e-5 * force + 3e-9 * force**2 + 1e-11 * force**3
    fit = fit_static(force, defl, degree=degree)
    probe = np.array([10.0, 33.3, 77.7, 100.0])
    # The inverse must give back the force to rounding (1e-9 N on 100 N after Newton).
    assert fit.force_at(fit.deflection_at(probe)) == pytest.approx(probe, abs=1e-9)
    assert fit.force_at(fit.deflection_at(50.0)).shape == ()
    with pytest.raises(ParameterError, match="calibrated range"):
        fit.force_at(fit.deflection_at(120.0))
    with pytest.raises(ParameterError, match="calibrated range"):
        fit.force_at(fit.deflection_at(5.0))
    assert fit.force_at(fit.deflection_at(120.0), allow_extrapolation=True) == pytest.approx(
        120.0, abs=1e-9
    )


def test_force_at_refuses_a_non_monotonic_fit() -> None:
    # x = F − 0.01·F² peaks at F = 50 N; x = 16 is reached at F = 20 and F = 80 N.
    force = np.linspace(0.0, 100.0, 11)
    fit = fit_static(force, force - 0.01 * force**2, degree=2)
    with pytest.raises(ParameterError, match="not monotonic"):
        fit.force_at(16.0)


def test_sensitivity_and_force_residuals() -> None:
    force = np.linspace(10.0, 100.0, 10)
    defl = 1e-5 * force + 3e-9 * force**2 + np.where(np.arange(10) % 2, 1e-8, -1e-8)
    fit = fit_static(force, defl, degree=2)
    # dX/dF of c0 + c1 F + c2 F² is c1 + 2 c2 F (calculus); residual in N = r/(dX/dF).
    c = fit.coefficients
    assert fit.sensitivity_m_per_n(force) == pytest.approx(c[1] + 2 * c[2] * force, rel=1e-12)
    assert fit.residuals_n == pytest.approx(fit.residuals_m / (c[1] + 2 * c[2] * force), rel=1e-12)


@pytest.mark.parametrize(
    ("force", "defl", "kwargs", "match"),
    [
        ([1.0, 2.0, 3.0], [1.0, 2.0, 3.0], {"degree": 0}, "degree"),
        ([1.0, 2.0, 3.0], [1.0, 2.0, 3.0], {"degree": 4}, "degree"),
        ([1.0, 2.0, 3.0], [1.0, 2.0, 3.0], {"degree": True}, "degree"),
        ([1.0, 2.0], [1.0, 2.0], {}, "degree of freedom"),
        ([2.0, 2.0, 2.0], [1.0, 1.1, 0.9], {}, "distinct"),
        ([1.0, 2.0, 2.0, 1.0], [1.0, 2.0, 2.1, 1.1], {"degree": 2}, "distinct"),
        ([1.0, math.nan, 3.0], [1.0, 2.0, 3.0], {}, "force_n"),
        ([1.0, 2.0, 3.0], [1.0, 2.0, math.inf], {}, "deflection_m"),
        ([1.0, 2.0, 3.0], [1.0, 2.0], {}, "one each"),
    ],
)
def test_fit_refusals(force: list, defl: list, kwargs: dict, match: str) -> None:
    with pytest.raises(ParameterError, match=match):
        fit_static(force, defl, **kwargs)


# ------------------------------------------------------------------- data model


def _rows(spec: list[tuple[str, str, str, float, float]]) -> tuple[list, ...]:
    return tuple(list(col) for col in zip(*spec, strict=True))


MM = 1e-3
# Invented hand-worked sheet (forces in N, readings in mm): series 1 and 2 at position
# 0, series 3 at 120 and 4 at 240 (both also decreasing at 10 N).
HAND = [
    ("1", "up", "0", 0.0, 0.0100 * MM),
    ("1", "up", "0", 10.0, 0.5100 * MM),  # deflection 0.5000 mm
    ("1", "up", "0", 20.0, 1.0100 * MM),  # deflection 1.0000 mm
    ("1", "down", "0", 0.0, 0.0102 * MM),  # zero after
    ("2", "up", "0", 0.0, 0.0),
    ("2", "up", "0", 10.0, 0.5001 * MM),
    ("2", "up", "0", 20.0, 1.0004 * MM),  # no zero after
    ("3", "up", "120", 0.0, 0.0),
    ("3", "up", "120", 10.0, 0.5004 * MM),
    ("3", "up", "120", 20.0, 1.0010 * MM),
    ("3", "down", "120", 10.0, 0.5010 * MM),
    ("3", "down", "120", 0.0, 0.0),
    ("4", "up", "240", 0.0, 0.0),
    ("4", "up", "240", 10.0, 0.4998 * MM),
    ("4", "up", "240", 20.0, 0.9995 * MM),
    ("4", "down", "240", 10.0, 0.5003 * MM),
    ("4", "down", "240", 0.0, 0.0),
]


def test_from_rows_splits_zeros_and_loads() -> None:
    cal = CalibrationSet.from_rows(*_rows(HAND))
    assert cal.series_labels == ("1", "2", "3", "4")
    assert cal.series_positions == ("0", "0", "120", "240")
    assert cal.force_n.tolist() == [10.0, 20.0, 10.0, 20.0, 10.0, 20.0, 10.0, 10.0, 20.0, 10.0]
    assert cal.zero_before_m == pytest.approx([0.0100 * MM, 0.0, 0.0, 0.0], abs=1e-18)
    assert cal.zero_after_m[0] == pytest.approx(0.0102 * MM, abs=1e-18)
    assert math.isnan(cal.zero_after_m[1])
    # Deflection = reading − zero before (ISO 376 definition): series 1 at 20 N, 1.0000 mm.
    assert cal.deflection_m[1] == pytest.approx(1.0000 * MM, abs=1e-15)
    assert cal.up.tolist() == [True] * 6 + [False, True, True, False]
    # Round trip through CalibrationPoint values.
    points = [CalibrationPoint(*row) for row in HAND]
    again = CalibrationSet.from_points(points)
    assert again.reading_m.tolist() == cal.reading_m.tolist()
    assert [p.force_n for p in cal.points()] == cal.force_n.tolist()
    with pytest.raises(ValueError):
        cal.force_n[0] = 1.0  # read-only


@pytest.mark.parametrize(
    ("edit", "match"),
    [
        (lambda r: r.__delitem__(0), r"row 0: series '1' has no zero reading before"),
        (lambda r: r.insert(2, ("1", "up", "0", 0.0, 0.0)), "zero reading between loads"),
        (lambda r: r.insert(5, ("1", "up", "0", 30.0, 0.0)), "continues after series"),
        (lambda r: r.__setitem__(2, ("1", "up", "0", 10.0, 0.0)), "must rise"),
        (lambda r: r.__setitem__(10, ("3", "down", "120", 25.0, 0.0)), "must fall"),
        (lambda r: r.insert(11, ("3", "up", "120", 15.0, 0.0)), "up again after going down"),
        (lambda r: r.__setitem__(9, ("3", "up", "0", 20.0, 0.0)), "one mounting position"),
        (lambda r: r.__setitem__(9, ("3", "sideways", "120", 20.0, 0.0)), "direction"),
        (lambda r: r.__setitem__(9, ("3", "up", "120", -20.0, 0.0)), "negative"),
        (lambda r: r.__setitem__(9, ("3", "up", "120", 20.0, math.nan)), r"reading_m\[9\]"),
        (lambda r: r.__setitem__(14, ("4", "up", "240", 0.0, 0.0)), "zero reading between"),
    ],
)
def test_from_rows_refusals(edit: object, match: str) -> None:
    rows = list(HAND)
    edit(rows)  # type: ignore[operator]
    with pytest.raises(ParameterError, match=match):
        CalibrationSet.from_rows(*_rows(rows))


def test_from_rows_names_rows_with_the_given_labels() -> None:
    rows = list(HAND)
    del rows[4]  # series 2 loses its zero before
    labels = [f"sheet.csv:{i + 2}" for i in range(len(rows))]
    with pytest.raises(ParameterError, match=r"sheet\.csv:6: series '2' has no zero"):
        CalibrationSet.from_rows(*_rows(rows), row_labels=labels)


# ------------------------------------------------------------------------ ISO 376


def test_iso376_hand_worked() -> None:
    cal = CalibrationSet.from_rows(*_rows(HAND))
    # Interpolation curve through the origin with slope 0.05 mm/N: Xa(10) = 0.5000 mm,
    # Xa(20) = 1.0000 mm (two exact points, no intercept).
    fit = fit_static([10.0, 20.0], [0.5 * MM, 1.0 * MM], intercept=False)
    res = evaluate_iso376(cal, fit)
    low, high = res.steps
    assert (low.force_n, high.force_n) == (10.0, 20.0)
    # Step 10 N, by hand (ISO 376:2011 definitions, from memory):
    #  positions' first series: X1 = 0.5000, X3 = 0.5004, X5 = 0.4998 mm
    #  X̄r = 1.5002/3 = 0.50006667 mm; b = (0.5004 − 0.4998)/0.50006667 = 0.0011998400
    #  b′ = |0.5001 − 0.5000|/0.50005 = 0.00019998000
    #  fc = (0.50006667 − 0.5)/0.5 = 0.00013333333
    #  v = mean(|0.5010 − 0.5004|/0.5004, |0.5003 − 0.4998|/0.4998)
    #    = mean(0.0011990408, 0.0010004002) = 0.0010997205
    # Tolerance 1e-7 relative: the hand values carry 8+ digits; the readings' rounding
    # to binary is ~1e-16.
    assert low.mean_deflection_m == pytest.approx(0.50006667 * MM, rel=1e-7)
    assert low.reproducibility == pytest.approx(0.0011998400, rel=1e-7)
    assert low.repeatability == pytest.approx(0.00019998000, rel=1e-7)
    assert low.interpolation == pytest.approx(0.00013333333, rel=1e-7)
    assert low.reversibility == pytest.approx(0.0010997205, rel=1e-7)
    # Step 20 N: X1 = 1.0000, X3 = 1.0010, X5 = 0.9995 mm; X̄r = 3.0005/3 = 1.00016667 mm
    #  b = 0.0015/1.00016667 = 0.0014997500; b′ = 0.0004/1.0002 = 0.00039992002
    #  fc = 0.00016667/1.0 = 0.00016666667; no decreasing reading at 20 N → v not evaluated.
    assert high.reproducibility == pytest.approx(0.0014997500, rel=1e-7)
    assert high.repeatability == pytest.approx(0.00039992002, rel=1e-7)
    assert high.interpolation == pytest.approx(0.00016666667, rel=1e-6)
    assert math.isnan(high.reversibility)
    # f0: series 1 (0.0102 − 0.0100)/1.0000 = 2e-4; series 2 has no zero after; 3 and 4: 0.
    assert res.zero_errors[0] == pytest.approx(2e-4, rel=1e-9)
    assert math.isnan(res.zero_errors[1])
    assert res.zero_errors[2:] == (0.0, 0.0)
    assert res.zero_error == pytest.approx(2e-4, rel=1e-9)
    # Classes (ISO 376:2011 Table 3 limits, from memory): b = 0.120 % and 0.150 % exceed
    # class 0.5 (0.10 %) and meet class 1 (0.20 %); b′, fc, v meet class 1 as well.
    # f0 = 0.020 % exceeds 00 (0.012 %) and meets 0.5 (0.025 %). Worst: class 1.
    assert low.class_name == "1" and high.class_name == "1"
    assert res.zero_class == "0.5"
    assert res.class_name == "1"


def _uniform_set(
    base_mm: float = 1.0,
    spread: float = 0.0,
    repeat: float = 0.0,
    back: float = 0.0,
    zero_drift_mm: float = 0.0,
) -> CalibrationSet:
    """Three positions, two series at the first, one step at 10 N and one at 20 N.

    ``spread`` (fraction) raises position 120's deflections (b = spread/mean),
    ``repeat`` series 2's (b′), ``back`` the decreasing readings of series 3 (v),
    ``zero_drift_mm`` series 1's zero after (f0).
    """
    spec = []
    factors = {"1": 1.0, "2": 1.0 + repeat, "3": 1.0 + spread, "4": 1.0}
    positions = {"1": "0", "2": "0", "3": "120", "4": "240"}
    for s, k in factors.items():
        pos = positions[s]
        spec.append((s, "up", pos, 0.0, 0.0))
        spec.append((s, "up", pos, 10.0, 0.5 * base_mm * k * MM))
        spec.append((s, "up", pos, 20.0, base_mm * k * MM))
        if s == "3":
            spec.append((s, "down", pos, 10.0, 0.5 * base_mm * k * (1.0 + back) * MM))
        spec.append((s, "down", pos, 0.0, zero_drift_mm * MM if s == "1" else 0.0))
    return CalibrationSet.from_rows(*_rows(spec))


@pytest.mark.parametrize(
    ("kwargs", "expected"),
    [
        # All errors 0: the best class.
        ({}, "00"),
        # v = 0.10 % alone: above 00 (0.07 %), within 0.5 (0.15 %). Limits from memory.
        ({"back": 0.0010}, "0.5"),
        # v = 0.40 %: above class 1 (0.30 %), within class 2 (0.50 %).
        ({"back": 0.0040}, "2"),
        # v = 0.60 %: above every class.
        ({"back": 0.0060}, None),
        # b′ = 0.06/1.0003 % ≈ 0.060 %: above 0.5 (0.05 %), within 1 (0.10 %).
        ({"repeat": 0.0006}, "1"),
    ],
)
def test_iso376_step_class_follows_the_limits(kwargs: dict, expected: str | None) -> None:
    res = evaluate_iso376(_uniform_set(**kwargs))
    assert res.steps[0].class_name == expected


def test_iso376_reproducibility_and_class_two() -> None:
    # spread 0.3 %: deflections 1, 1.003, 1 at 20 N; X̄r = 3.003/3 = 1.001;
    # b = 0.003/1.001 = 0.0029970030 → 0.30 %: class 2 (0.40 %), not class 1 (0.20 %).
    res = evaluate_iso376(_uniform_set(spread=0.003))
    assert res.steps[1].reproducibility == pytest.approx(0.0029970030, rel=1e-7)
    assert res.steps[1].class_name == "2"


def test_iso376_zero_error_class() -> None:
    # Zero after 0.0003 mm above the zero before, X_N = 1 mm: f0 = 3e-4 = 0.03 %:
    # above class 0.5 (0.025 %), within class 1 (0.050 %) (limits from memory).
    res = evaluate_iso376(_uniform_set(zero_drift_mm=0.0003))
    assert res.zero_error == pytest.approx(3e-4, rel=1e-9)
    assert res.zero_class == "1"
    assert res.class_name == "1"  # the steps themselves are class 00


def test_iso376_resolution_limits_the_lowest_step() -> None:
    # Resolution 0.0002 mm: the 10 N step (0.5 mm) is 2500 resolutions, at least 2000
    # (class 0.5) but under 4000 (class 00); the 20 N step is 5000 resolutions (00).
    res = evaluate_iso376(_uniform_set(), resolution_m=0.0002 * MM)
    assert [st.class_name for st in res.steps] == ["0.5", "00"]
    assert res.class_name == "0.5"


def test_iso376_missing_criteria_leave_the_step_unclassified() -> None:
    # Only one series per position: b′ cannot be evaluated (ISO 376 needs two series in
    # one position), so no class.
    spec = []
    for s, pos in (("1", "0"), ("2", "120"), ("3", "240")):
        spec += [(s, "up", pos, 0.0, 0.0), (s, "up", pos, 10.0, 0.5 * MM)]
        spec += [(s, "up", pos, 20.0, 1.0 * MM)]
    res = evaluate_iso376(CalibrationSet.from_rows(*_rows(spec)))
    assert all(math.isnan(st.repeatability) for st in res.steps)
    assert all(st.class_name is None for st in res.steps)
    assert all(math.isnan(f) for f in res.zero_errors)
    assert res.class_name is None


def test_iso376_step_grouping_tolerance() -> None:
    # Forces 20 and 20.00001 N differ by 5e-7 of the largest force: one step with the
    # default step_rtol = 1e-6, two steps with 1e-7.
    rows = [list(r) for r in HAND]
    rows[9][3] = 20.00001
    cal = CalibrationSet.from_rows(*_rows([tuple(r) for r in rows]))
    assert len(evaluate_iso376(cal).steps) == 2
    assert len(evaluate_iso376(cal, step_rtol=1e-7).steps) == 3


def test_iso376_class_table_is_ordered() -> None:
    # From memory of ISO 376:2011 Table 3: every limit grows from class 00 to class 2 and
    # the lowest-force factor shrinks (4000, 2000, 1000, 500 resolutions).
    names = [lim.class_name for lim in ISO376_CLASS_LIMITS]
    assert names == ["00", "0.5", "1", "2"]
    for better, worse in itertools.pairwise(ISO376_CLASS_LIMITS):
        for field in (
            "reproducibility",
            "repeatability",
            "interpolation",
            "zero",
            "reversibility",
        ):
            assert getattr(better, field) < getattr(worse, field)
        assert better.min_step_resolutions > worse.min_step_resolutions


# ------------------------------------------------------------------------ ASTM E74


def _e74_data() -> tuple[np.ndarray, np.ndarray]:
    # Forces 10, 20, 30, 40 N; deflection 1e-5 m/N·F plus ±1e-7 m in the pattern
    # (+, −, −, +), which is orthogonal to 1 and to F (10 − 20 − 30 + 40 = 0), so the
    # least-squares line is exactly c0 = 0, c1 = 1e-5 m/N and the residuals are ±1e-7 m.
    force = np.array([10.0, 20.0, 30.0, 40.0])
    return force, 1e-5 * force + 1e-7 * np.array([1.0, -1.0, -1.0, 1.0])


def test_e74_hand_worked() -> None:
    fit = fit_static(*_e74_data())
    lim = e74_limits(fit, resolution_n=0.001)
    # By hand: residuals in force ±1e-7/1e-5 = ±0.01 N; ν = 4 − 2 = 2;
    # s = sqrt(4·0.01²/2) = sqrt(2e-4) = 0.014142136 N;
    # LLF = 2.4·s = 0.033941125 N (ASTM E74, from memory) > resolution 0.001 N;
    # class A lower limit = 400·LLF = 13.576450 N; class AA = 2000·LLF = 67.882251 N.
    # Tolerance 1e-7 relative: the hand values carry 8 significant digits.
    assert lim.dof == 2
    assert lim.std_dev_n == pytest.approx(0.014142136, rel=1e-7)
    assert lim.llf_n == pytest.approx(0.033941125, rel=1e-7)
    assert lim.class_a_lower_n == pytest.approx(13.576450, rel=1e-7)
    assert lim.class_aa_lower_n == pytest.approx(67.882251, rel=1e-7)
    assert lim.max_force_n == 40.0
    # Straight line: c1 = 1e-5 m/N, k = 1e5 N/m. u(c1) = s_m/sqrt(Sxx) with
    # s_m = sqrt(4e-14/2) = 1.4142136e-7 m and Sxx = Σ(F − 25)² = 500 N²:
    # u(c1) = 6.3245553e-9 m/N; u(k) = u(c1)/c1² = 63.245553 N/m.
    assert fit.stiffness_n_per_m == pytest.approx(1e5, rel=1e-12)
    assert fit.stiffness_u_n_per_m == pytest.approx(63.245553, rel=1e-7)


def test_e74_resolution_floor() -> None:
    # Resolution 0.05 N exceeds 2.4·s = 0.0339 N, so LLF = 0.05 N (E74, from memory):
    # class A 400·0.05 = 20 N, class AA 2000·0.05 = 100 N.
    lim = e74_limits(fit_static(*_e74_data()), resolution_n=0.05)
    assert lim.llf_n == 0.05
    assert lim.class_a_lower_n == pytest.approx(20.0, rel=1e-15)
    assert lim.class_aa_lower_n == pytest.approx(100.0, rel=1e-15)


@pytest.mark.parametrize("res", [-0.1, math.nan, "fine"])
def test_e74_refuses_bad_resolution(res: object) -> None:
    with pytest.raises(ParameterError, match="resolution_n"):
        e74_limits(fit_static(*_e74_data()), resolution_n=res)  # type: ignore[arg-type]


# --------------------------------------------------------------------- the bundle


def _simulated_set(seed: int, k: float = 2.0e5) -> CalibrationSet:
    """Seeded sheet: four series (0, 0, 120, 240), 1..10 kg as forces, 50 nm noise."""
    rng = np.random.default_rng(seed)
    forces = forces_from_sheet(np.array([1.0, 2.0, 4.0, 6.0, 8.0, 10.0]), "mass_kg", 9.81)
    spec = []
    for s, pos in (("1", "0"), ("2", "0"), ("3", "120"), ("4", "240")):
        zero = rng.normal(0.0, 1e-6)
        spec.append((s, "up", pos, 0.0, zero))
        for f in forces:
            spec.append((s, "up", pos, f, zero + f / k + rng.normal(0.0, 5e-8)))
        if s in ("3", "4"):
            for f in forces[-2::-1]:
                spec.append((s, "down", pos, f, zero + f / k + rng.normal(0.0, 5e-8)))
        spec.append((s, "down", pos, 0.0, zero + rng.normal(0.0, 5e-8)))
    return CalibrationSet.from_rows(*_rows(spec))


def test_calibrate_static_end_to_end() -> None:
    k = 2.0e5
    cal = _simulated_set(3, k)
    result = calibrate_static(cal, resolution_m=1e-8, data_sha256=SHA)
    assert isinstance(result, StaticCalibration)
    # The straight line recovers the seeded stiffness within 4 standard uncertainties
    # (fails by chance with probability ~6e-5).
    assert abs(result.stiffness_n_per_m - k) <= 4.0 * result.stiffness_u_n_per_m
    # Fitted on the increasing loads only: 4 series × 6 loads.
    assert result.fit.force_n.size == 24
    # E74 resolution in force: 1e-8 m over the slope 1/k gives 1e-8·k = 2e-3 N.
    assert result.e74.resolution_n == pytest.approx(1e-8 / result.fit.coefficients[1], rel=1e-12)
    assert len(result.iso376.steps) == 6
    text = result.text()
    for needle in (
        SHA,
        "N/m",
        "µm",
        "force/N",
        "b′/%",
        "class A lower force limit",
        "from memory",
    ):
        assert needle in text
    assert f"{result.stiffness_n_per_m:.7g}" in text


def test_calibrate_static_degree_three_has_no_stiffness() -> None:
    result = calibrate_static(_simulated_set(4), resolution_m=1e-8, data_sha256=SHA, degree=3)
    assert result.stiffness_n_per_m is None and result.stiffness_u_n_per_m is None
    assert "stiffness" not in result.text()
    assert result.fit.degree == 3


@pytest.mark.parametrize("sha", ["", "abc", SHA.upper(), SHA + "0", 42])
def test_calibrate_static_refuses_a_bad_digest(sha: object) -> None:
    with pytest.raises(ParameterError, match="data_sha256"):
        calibrate_static(_simulated_set(5), resolution_m=1e-8, data_sha256=sha)  # type: ignore[arg-type]


@pytest.mark.parametrize("res", [0.0, -1e-8, math.inf])
def test_calibrate_static_refuses_a_bad_resolution(res: float) -> None:
    with pytest.raises(ParameterError, match="resolution_m"):
        calibrate_static(_simulated_set(5), resolution_m=res, data_sha256=SHA)
