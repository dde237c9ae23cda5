"""Tests of estimator.plant against SciPy, python-control and handbook closed forms.

Handbook formulas are those of Ogata, "Modern Control Engineering", transient response
of second-order systems (edition and section from memory: 5th ed., ch. 5), and Franklin,
Powell & Workman, "Digital Control of Dynamic Systems" for the zero-order hold (from
memory: 3rd ed., ch. 4).
"""

from __future__ import annotations

import math

import control  # python-control: reference library for step metrics
import numpy as np
import pytest
import scipy.signal

from estimator.errors import ParameterError
from estimator.plant import (
    CellDesign,
    DiscretePlant,
    Plant,
    damping_ratio_for_overshoot,
    design_cell,
    normalised_settling_time,
)

# ------------------------------------------------------------------------------ helpers

ZETAS_STEP = (0.0, 0.1, 0.5, 0.999999, 1.0, 1.000001, 2.0, 5.0)


def _plant_with_zeta(zeta: float, wn: float = 30.0, k: float = 1000.0) -> Plant:
    return Plant.from_modal(wn, zeta, k)


def _scipy_lti(plant: Plant) -> scipy.signal.lti:
    # X(s)/F(s) = 1/(m s² + b s + k), built from the physical coefficients, not from
    # our state_space(), so the reference is independent of it.
    return scipy.signal.lti(
        [1.0], [plant.mass_kg, plant.damping_n_s_per_m, plant.stiffness_n_per_m]
    )


def _control_tf(plant: Plant) -> object:
    return control.tf([1.0], [plant.mass_kg, plant.damping_n_s_per_m, plant.stiffness_n_per_m])


def _time_grid(plant: Plant, n: int = 10001) -> np.ndarray:
    """Uniform grid from 0 past the settling time and past the first peak."""
    t_end = 1.3 * plant.settling_time_s()
    if math.isfinite(plant.peak_time_s()):
        t_end = max(t_end, 1.5 * plant.peak_time_s())
    return np.linspace(0.0, t_end, n)


# ----------------------------------------------------------------------- step response


@pytest.mark.parametrize("zeta", ZETAS_STEP)
def test_step_response_matches_scipy_lti_step_and_lsim(zeta: float) -> None:
    plant = _plant_with_zeta(zeta)
    final = 2.5 / plant.stiffness_n_per_m
    t_end = 40.0 / plant.natural_freq_rad_s * max(1.0, zeta)
    T = np.linspace(0.0, t_end, 2001)
    ours = plant.step_response(T, force_n=2.5)
    system = _scipy_lti(plant)
    # Source: SciPy scipy.signal.lti.step and scipy.signal.lsim (ZOH-exact simulation).
    # Tolerance 1e-9 of the final value: lsim propagates its discretised state through
    # 2000 steps, so its own rounding grows to ~1e-13 of final value here (measured);
    # any formula or branch error in ours is of order ζ-differences (>= 1e-6) or larger.
    _, y_step = system.step(T=T)
    np.testing.assert_allclose(ours, 2.5 * y_step, rtol=0.0, atol=1e-9 * final)
    _, y_lsim, _ = scipy.signal.lsim(system, np.full_like(T, 2.5), T)
    np.testing.assert_allclose(ours, y_lsim, rtol=0.0, atol=1e-9 * final)


@pytest.mark.parametrize("zeta", (0.0, 0.3, 1.0, 3.0))
def test_step_response_handbook_special_cases(zeta: float) -> None:
    wn, k = 12.0, 800.0
    plant = Plant.from_modal(wn, zeta, k)
    t = np.linspace(0.0, 3.0, 301)
    tau = wn * t
    xs = 1.0 / k
    # Source: Ogata, Modern Control Engineering, unit-step response of the standard
    # second-order system (from memory: 5th ed., sec. 5-3), each regime written out.
    if zeta < 1.0:
        beta = math.sqrt(1.0 - zeta**2)
        expected = xs * (
            1.0 - np.exp(-zeta * tau) * (np.cos(beta * tau) + zeta / beta * np.sin(beta * tau))
        )
    elif zeta == 1.0:
        expected = xs * (1.0 - np.exp(-tau) * (1.0 + tau))
    else:
        g = math.sqrt(zeta**2 - 1.0)
        s1, s2 = -zeta + g, -zeta - g
        expected = xs * (1.0 + (s2 * np.exp(s1 * tau) - s1 * np.exp(s2 * tau)) / (s1 - s2))
    # Tolerance: a few ulp of the final value (the textbook forms are well conditioned
    # away from ζ = 1, and ζ = 1 here is exact).
    np.testing.assert_allclose(plant.step_response(t), expected, rtol=0.0, atol=1e-13 * xs)


@pytest.mark.parametrize("delta", (1e-6, -1e-6, 1e-9, -1e-9, 1e-12, -1e-12))
def test_step_response_is_stable_near_critical_damping(delta: float) -> None:
    plant = Plant(mass_kg=1.0, damping_n_s_per_m=4.0 * (1.0 + delta), stiffness_n_per_m=4.0)
    wn = plant.natural_freq_rad_s
    assert wn == 2.0
    tau = np.linspace(0.0, 60.0, 6001)
    y = plant.step_response(tau / wn) * plant.stiffness_n_per_m
    zeta = plant.damping_ratio
    d = zeta - 1.0
    # Source: Ogata's critical form 1 − e^(−τ)(1 + τ) (from memory, as above) plus its
    # first-order change in ζ, −(ζ − 1)·τ³e^(−τ)/3, derived here from the series of
    # cos/sin (or cosh/sinh) in (1 − ζ²)τ². The left-over term is O((ζ−1)²) with a
    # coefficient near 0.27 (finite differences), bounded here by 0.5·(ζ−1)²; 4e-15
    # allows rounding of values of order 1. A difference of exponentials divided by
    # (s1 − s2) would be off by ~1e-10 at |ζ−1| = 1e-12 and fail this.
    expected = 1.0 - np.exp(-tau) * (1.0 + tau) - d * tau**3 * np.exp(-tau) / 3.0
    assert np.max(np.abs(y - expected)) <= 0.5 * d * d + 4e-15


def test_step_response_shapes_dtype_and_causality() -> None:
    plant = _plant_with_zeta(0.4)
    scalar = plant.step_response(0.05)
    assert isinstance(scalar, np.ndarray)
    assert scalar.shape == ()
    assert scalar.dtype == np.float64
    grid = np.linspace(-0.1, 0.1, 12).reshape(3, 4)
    out = plant.step_response(grid, force_n=-3.0)
    assert out.shape == (3, 4)
    assert out.dtype == np.float64
    assert np.all(out[grid < 0.0] == 0.0)
    assert plant.step_response(0.0) == 0.0
    # linear in the force: same times, force −3 N versus 1 N
    np.testing.assert_allclose(out, -3.0 * plant.step_response(grid), rtol=1e-15, atol=0.0)
    assert plant.step_response([1, 2]).dtype == np.float64


def test_step_response_refuses_bad_inputs() -> None:
    plant = _plant_with_zeta(0.4)
    with pytest.raises(ParameterError, match="t_s"):
        plant.step_response([0.0, math.nan])
    with pytest.raises(ParameterError, match="force_n"):
        plant.step_response(0.1, force_n=math.inf)


# ----------------------------------------------------- overshoot, peak and settling time


@pytest.mark.parametrize("zeta", (0.05, 0.1, 0.3, 0.5, 0.7, 0.9))
def test_overshoot_and_peak_time_against_python_control_and_formulas(zeta: float) -> None:
    plant = Plant.from_modal(20.0, zeta, 500.0)
    wn = plant.natural_freq_rad_s
    T = _time_grid(plant)
    dt = T[1] - T[0]
    final = 1.0 / plant.stiffness_n_per_m
    y = plant.step_response(T)
    dense_overshoot = y.max() / final - 1.0
    dense_peak_time = T[np.argmax(y)]
    # Sampling tolerance: near the peak y ≈ y_max − ½|y''|·δ² with |y''| <= ωn²·final
    # (closed form at τ = π/β) and δ <= dt/2, so the sampled maximum is low by at most
    # ωn²dt²/8 of final; 1e-11 covers python-control's simulation rounding.
    os_tol = wn**2 * dt**2 / 8.0 + 1e-11
    # Peak time: nearest sample, either neighbour when the peak falls mid-way: one sample.
    tp_tol = dt * (1.0 + 1e-9)

    # Source: handbook formulas, Ogata (from memory, sec. 5-3): Mp = exp(−ζπ/√(1−ζ²)),
    # tp = π/ωd.
    assert plant.peak_overshoot() == pytest.approx(
        math.exp(-zeta * math.pi / math.sqrt(1.0 - zeta**2)), rel=1e-12
    )
    assert plant.peak_time_s() == pytest.approx(math.pi / plant.damped_freq_rad_s, rel=1e-15)
    assert plant.damped_freq_rad_s == pytest.approx(wn * math.sqrt(1.0 - zeta**2), rel=1e-12)
    assert abs(dense_overshoot - plant.peak_overshoot()) <= os_tol
    assert abs(dense_peak_time - plant.peak_time_s()) <= tp_tol

    # Source: python-control control.step_info on the transfer function 1/(ms²+bs+k),
    # simulated by python-control on the same grid (Overshoot in %, PeakTime in s).
    info = control.step_info(_control_tf(plant), T=T)
    assert abs(info["Overshoot"] / 100.0 - plant.peak_overshoot()) <= os_tol
    assert abs(info["PeakTime"] - plant.peak_time_s()) <= tp_tol
    assert abs(info["Peak"] - y.max()) <= os_tol * final
    # Source: python-control control.step_info applied to our own sampled response.
    info_ours = control.step_info(y, T=T, yfinal=final)
    assert abs(info_ours["Overshoot"] / 100.0 - plant.peak_overshoot()) <= os_tol


@pytest.mark.parametrize("zeta", (0.05, 0.1, 0.3, 0.5, 0.7, 0.8, 0.9, 1.0, 2.0, 5.0))
def test_settling_time_against_python_control(zeta: float) -> None:
    if zeta == 1.0:
        # exact critical damping: b = 2·sqrt(k·m) with m = 1, k = 400, b = 40
        plant = Plant(mass_kg=1.0, damping_n_s_per_m=40.0, stiffness_n_per_m=400.0)
        assert plant.damping_ratio == 1.0
    else:
        plant = Plant.from_modal(20.0, zeta, 400.0)
    ts = plant.settling_time_s(0.02)
    T = np.linspace(0.0, 1.25 * ts, 8001)  # grid not aligned with ts on purpose
    dt = T[1] - T[0]
    # Source: python-control control.step_info, SettlingTime = first grid time after the
    # last sample with |y/yfinal − 1| >= 2 % (its SettlingTimeThreshold default). The
    # exact time lies between that sample and the next, so control's value is at most
    # one sample later and never earlier (1e-9·dt allows rounding).
    info = control.step_info(_control_tf(plant), T=T)
    assert ts - 1e-9 * dt <= info["SettlingTime"] <= ts + dt * (1.0 + 1e-9)
    if zeta >= 1.0:
        # Source: handbook, no overshoot and no finite peak time for ζ >= 1 (Ogata).
        assert plant.peak_overshoot() == 0.0
        assert plant.peak_time_s() == math.inf
        assert plant.damped_freq_rad_s == 0.0
        assert info["Overshoot"] == pytest.approx(0.0, abs=1e-9)


@pytest.mark.parametrize("zeta", (0.05, 0.1, 0.2, 0.3))
def test_settling_time_loosely_matches_four_over_zeta_wn(zeta: float) -> None:
    plant = Plant.from_modal(50.0, zeta, 2000.0)
    # Common practice: ts(2 %) ≈ 4/(ζωn) for light damping. It is an envelope estimate
    # (it ignores the phase of the oscillation), hence the loose 25 % tolerance.
    rule = 4.0 / (zeta * plant.natural_freq_rad_s)
    assert plant.settling_time_s() == pytest.approx(rule, rel=0.25)


@pytest.mark.parametrize("band", (0.01, 0.02, 0.05))
@pytest.mark.parametrize("zeta", (0.02, 0.2, 0.45, 0.69, 0.78, 0.95, 0.999999, 1.000001, 3.0))
def test_settling_time_is_the_last_exit_from_the_band(zeta: float, band: float) -> None:
    plant = Plant.from_modal(7.0, zeta, 150.0)
    final = 1.0 / plant.stiffness_n_per_m
    ts = plant.settling_time_s(band)

    def err(t: np.ndarray | float) -> np.ndarray:
        return np.abs(plant.step_response(t) / final - 1.0)

    # Definition of settling time: on the boundary at ts, inside ever after, outside
    # just before. Evaluated with the same closed form, so tolerances are rounding only.
    assert float(err(ts)) == pytest.approx(band, abs=1e-12)
    after = np.linspace(ts, 4.0 * ts, 40001)[1:]
    assert np.max(err(after)) <= band + 1e-12
    assert float(err(ts * (1.0 - 1e-7))) > band
    assert normalised_settling_time(zeta, band) == pytest.approx(
        ts * plant.natural_freq_rad_s, rel=1e-12
    )


def test_settling_time_of_undamped_cell_is_infinite_and_band_is_checked() -> None:
    plant = Plant(mass_kg=0.1, damping_n_s_per_m=0.0, stiffness_n_per_m=10.0)
    assert plant.settling_time_s() == math.inf
    assert normalised_settling_time(0.0) == math.inf
    assert plant.peak_overshoot() == 1.0
    for bad in (0.0, 1.0, -0.02, math.nan):
        with pytest.raises(ParameterError, match="band"):
            plant.settling_time_s(bad)
        with pytest.raises(ParameterError, match="band"):
            normalised_settling_time(0.5, bad)
    with pytest.raises(ParameterError, match="damping_ratio"):
        normalised_settling_time(-0.1)


# -------------------------------------------------------------------------- discretise


@pytest.mark.parametrize("zeta", (0.0, 0.05, 0.7, 1.0, 4.0))
@pytest.mark.parametrize("dt", (1e-4, 2e-3, 0.05))
def test_discretize_matches_scipy_cont2discrete_zoh(zeta: float, dt: float) -> None:
    plant = Plant.from_modal(60.0, zeta, 3000.0)
    A, B, C, D = plant.state_space()
    discrete = plant.discretize(dt)
    # Source: SciPy scipy.signal.cont2discrete(method="zoh"). Both evaluate the same
    # matrix exponential, so agreement is to rounding: rtol 1e-12 plus an absolute floor
    # of 1e-14 of each matrix's largest entry for entries that are nearly zero.
    phi_ref, gamma_ref, *_ = scipy.signal.cont2discrete((A, B, C, D), dt, method="zoh")
    np.testing.assert_allclose(
        discrete.phi, phi_ref, rtol=1e-12, atol=1e-14 * np.max(np.abs(phi_ref))
    )
    np.testing.assert_allclose(
        discrete.gamma, gamma_ref, rtol=1e-12, atol=1e-14 * np.max(np.abs(gamma_ref))
    )
    assert discrete.phi.shape == (2, 2)
    assert discrete.gamma.shape == (2, 1)
    assert discrete.phi.dtype == discrete.gamma.dtype == np.float64
    assert discrete.sample_period_s == dt
    assert discrete.plant is plant
    with pytest.raises(ValueError):
        discrete.phi[0, 0] = 1.0  # read-only


def test_discrete_steps_reproduce_the_closed_form_step_response() -> None:
    plant = Plant.from_modal(40.0, 0.25, 900.0)
    dt = 1e-3
    discrete = plant.discretize(dt)
    state = np.zeros((2, 1))
    positions = []
    for _ in range(400):
        state = discrete.phi @ state + discrete.gamma * 1.5
        positions.append(state[0, 0])
    times = dt * np.arange(1, 401)
    final = 1.5 / plant.stiffness_n_per_m
    # A zero-order hold is exact for a constant force, so the discrete model must land
    # on the closed form at every sample; 1e-12 of final allows 400 steps of rounding.
    np.testing.assert_allclose(
        positions, plant.step_response(times, force_n=1.5), rtol=0.0, atol=1e-12 * final
    )


def test_state_space_matches_the_transfer_function() -> None:
    plant = Plant(mass_kg=0.3, damping_n_s_per_m=2.0, stiffness_n_per_m=700.0)
    A, B, C, D = plant.state_space()
    assert (A.shape, B.shape, C.shape, D.shape) == ((2, 2), (2, 1), (1, 2), (1, 1))
    assert all(M.dtype == np.float64 for M in (A, B, C, D))
    # Source: SciPy scipy.signal.ss2tf; expected X/F = (1/m)/(s² + (b/m)s + k/m).
    num, den = scipy.signal.ss2tf(A, B, C, D)
    m, b, k = 0.3, 2.0, 700.0
    np.testing.assert_allclose(den, [1.0, b / m, k / m], rtol=1e-13)
    # ss2tf forms the numerator as a difference of characteristic polynomials whose
    # coefficients are of size k/m, so its rounding is a few ulp of k/m, not of 1/m.
    np.testing.assert_allclose(num.ravel(), [0.0, 0.0, 1.0 / m], rtol=0.0, atol=1e-14 * k / m)


@pytest.mark.parametrize("bad", (0.0, -1e-3, math.nan, math.inf))
def test_discretize_refuses_bad_period(bad: float) -> None:
    with pytest.raises(ParameterError, match="sample_period_s"):
        _plant_with_zeta(0.5).discretize(bad)


def test_discrete_plant_checks_shapes() -> None:
    plant = _plant_with_zeta(0.5)
    with pytest.raises(ParameterError, match="phi"):
        DiscretePlant(phi=np.eye(3), gamma=np.zeros((2, 1)), sample_period_s=0.1, plant=plant)
    with pytest.raises(ParameterError, match="gamma"):
        DiscretePlant(phi=np.eye(2), gamma=np.zeros(2), sample_period_s=0.1, plant=plant)


# ------------------------------------------------------------------------- validation


def test_parameter_error_is_a_value_error() -> None:
    assert issubclass(ParameterError, ValueError)
    with pytest.raises(ValueError):
        Plant(mass_kg=0.0, damping_n_s_per_m=1.0, stiffness_n_per_m=1.0)


@pytest.mark.parametrize(
    ("kwargs", "field"),
    [
        ({"mass_kg": 0.0}, "mass_kg"),
        ({"mass_kg": -1.0}, "mass_kg"),
        ({"mass_kg": math.nan}, "mass_kg"),
        ({"mass_kg": math.inf}, "mass_kg"),
        ({"mass_kg": "heavy"}, "mass_kg"),
        ({"stiffness_n_per_m": 0.0}, "stiffness_n_per_m"),
        ({"stiffness_n_per_m": -math.inf}, "stiffness_n_per_m"),
        ({"damping_n_s_per_m": -0.1}, "damping_n_s_per_m"),
        ({"damping_n_s_per_m": math.nan}, "damping_n_s_per_m"),
    ],
)
def test_plant_refuses_bad_fields(kwargs: dict, field: str) -> None:
    values = {"mass_kg": 0.2, "damping_n_s_per_m": 1.0, "stiffness_n_per_m": 100.0}
    values.update(kwargs)
    with pytest.raises(ParameterError) as info:
        Plant(**values)
    message = str(info.value)
    assert field in message
    assert repr(kwargs[field]) in message or str(kwargs[field]) in message


def test_zero_damping_is_allowed() -> None:
    plant = Plant(mass_kg=0.2, damping_n_s_per_m=0.0, stiffness_n_per_m=100.0)
    assert plant.damping_ratio == 0.0
    assert plant.regime == "underdamped"


@pytest.mark.parametrize(
    ("args", "field"),
    [
        ((10.0, -0.1, 100.0), "damping_ratio"),
        ((math.nan, 0.5, 100.0), "natural_freq_rad_s"),
        ((0.0, 0.5, 100.0), "natural_freq_rad_s"),
        ((10.0, math.inf, 100.0), "damping_ratio"),
        ((10.0, 0.5, 0.0), "stiffness_n_per_m"),
    ],
)
def test_from_modal_refuses_bad_values(args: tuple, field: str) -> None:
    with pytest.raises(ParameterError, match=field):
        Plant.from_modal(*args)


# ------------------------------------------------------------------------ conversions


def test_conversions_round_trip() -> None:
    rng = np.random.default_rng(20240611)
    for _ in range(200):
        mass = 10.0 ** rng.uniform(-4, 2)
        stiffness = 10.0 ** rng.uniform(0, 7)
        zeta = 10.0 ** rng.uniform(-4, 1)
        damping = 2.0 * zeta * math.sqrt(stiffness * mass)
        plant = Plant(mass, damping, stiffness)
        # Source: definitions ωn = √(k/m), ζ = b/(2√(km)) (Ogata, from memory).
        assert plant.natural_freq_rad_s == pytest.approx(math.sqrt(stiffness / mass), rel=1e-14)
        assert plant.natural_freq_hz == pytest.approx(
            plant.natural_freq_rad_s / (2 * math.pi), rel=1e-15
        )
        assert plant.damping_ratio == pytest.approx(zeta, rel=1e-12)
        back = Plant.from_modal(
            plant.natural_freq_rad_s, plant.damping_ratio, plant.stiffness_n_per_m
        )
        # a handful of roundings in each direction: 1e-12 relative
        assert back.mass_kg == pytest.approx(mass, rel=1e-12)
        assert back.damping_n_s_per_m == pytest.approx(damping, rel=1e-12)
        assert back.stiffness_n_per_m == stiffness


def test_regime_labels() -> None:
    k = 100.0
    assert Plant.from_modal(10.0, 0.5, k).regime == "underdamped"
    assert Plant.from_modal(10.0, 1.0, k).regime == "critically damped"
    assert Plant.from_modal(10.0, 1.0 + 5e-10, k).regime == "critically damped"
    assert Plant.from_modal(10.0, 1.0 - 5e-10, k).regime == "critically damped"
    assert Plant.from_modal(10.0, 1.0 + 1e-8, k).regime == "overdamped"
    assert Plant.from_modal(10.0, 1.0 - 1e-8, k).regime == "underdamped"
    assert Plant.from_modal(10.0, 3.0, k).regime == "overdamped"


# ----------------------------------------------------------------------------- design


@pytest.mark.parametrize("band", (0.02, 0.05))
@pytest.mark.parametrize("zeta", (0.1, 0.5, 0.7, 0.9, 1.0, 1.5))
def test_design_cell_with_damping_ratio_hits_the_settling_time(zeta: float, band: float) -> None:
    design = design_cell(0.04, 0.25, damping_ratio=zeta, band=band)
    assert isinstance(design, CellDesign)
    plant = design.plant
    # the exact settling time of the designed cell equals the target; 1e-6 relative
    # leaves room for the rounding of k and b back into ζ and ωn
    assert plant.settling_time_s(band) == pytest.approx(0.04, rel=1e-6)
    assert plant.damping_ratio == pytest.approx(zeta, rel=1e-12)
    assert plant.mass_kg == 0.25
    assert design.stiffness_n_per_m == pytest.approx(
        0.25 * design.natural_freq_rad_s**2, rel=1e-15
    )
    assert design.settling_time_s == 0.04
    assert design.band == band
    assert design.overshoot == pytest.approx(plant.peak_overshoot(), rel=1e-9, abs=1e-300)


@pytest.mark.parametrize("overshoot", (0.01, 0.05, 0.2, 0.6))
def test_design_cell_with_overshoot_checked_by_python_control(overshoot: float) -> None:
    design = design_cell(0.1, 0.05, overshoot=overshoot)
    plant = design.plant
    assert plant.settling_time_s() == pytest.approx(0.1, rel=1e-6)
    assert plant.peak_overshoot() == pytest.approx(overshoot, rel=1e-9)
    T = _time_grid(plant)
    dt = T[1] - T[0]
    # Source: python-control control.step_info (Overshoot in %). Tolerance from sampling
    # the peak, ωn²dt²/8 of final (see the overshoot test above) plus simulation rounding.
    info = control.step_info(_control_tf(plant), T=T)
    tol = plant.natural_freq_rad_s**2 * dt**2 / 8.0 + 1e-11
    assert abs(info["Overshoot"] / 100.0 - overshoot) <= tol


def test_damping_ratio_for_overshoot_inverts_peak_overshoot() -> None:
    for overshoot in np.geomspace(1e-6, 0.999, 40):
        zeta = damping_ratio_for_overshoot(float(overshoot))
        assert 0.0 < zeta < 1.0
        # Source: Ogata (from memory): Mp = exp(−ζπ/√(1−ζ²)) and its inverse
        # ζ = −ln Mp/√(π² + ln² Mp); rounding only, 1e-12 relative.
        plant = Plant.from_modal(5.0, zeta, 10.0)
        assert plant.peak_overshoot() == pytest.approx(overshoot, rel=1e-12)
    # handbook anchor: 16.3 % overshoot for ζ = 0.5 (common practice)
    assert damping_ratio_for_overshoot(math.exp(-math.pi / math.sqrt(3.0))) == pytest.approx(
        0.5, rel=1e-14
    )
    for bad in (0.0, 1.0, -0.1, math.nan):
        with pytest.raises(ParameterError, match="overshoot"):
            damping_ratio_for_overshoot(bad)


def test_design_cell_requires_exactly_one_shape_target() -> None:
    with pytest.raises(ParameterError, match="exactly one"):
        design_cell(0.1, 0.05, overshoot=0.1, damping_ratio=0.6)
    with pytest.raises(ParameterError, match="exactly one"):
        design_cell(0.1, 0.05)


@pytest.mark.parametrize(
    ("args", "kwargs", "field"),
    [
        ((0.0, 0.05), {"damping_ratio": 0.7}, "settling_time_s"),
        ((math.nan, 0.05), {"damping_ratio": 0.7}, "settling_time_s"),
        ((0.1, -0.05), {"damping_ratio": 0.7}, "mass_kg"),
        ((0.1, 0.05), {"damping_ratio": 0.0}, "damping_ratio"),
        ((0.1, 0.05), {"damping_ratio": -0.5}, "damping_ratio"),
        ((0.1, 0.05), {"overshoot": 1.2}, "overshoot"),
        ((0.1, 0.05), {"overshoot": 0.1, "band": 0.0}, "band"),
    ],
)
def test_design_cell_validates_inputs(args: tuple, kwargs: dict, field: str) -> None:
    with pytest.raises(ParameterError, match=field):
        design_cell(*args, **kwargs)
