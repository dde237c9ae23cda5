"""Tests of the multiple-model force observer and its exact discretisation.

External references used below, named again beside each check:
* closed-form process noise of a double integrator (Van Loan 1978; Bar-Shalom, Li &
  Kirubarajan 2001, "continuous white noise acceleration" model);
* SciPy: ``linalg.expm``, ``integrate.quad_vec``, ``signal.lsim``, ``stats.chi2``;
* filterpy (a reference library): ``KalmanFilter`` (Kalman 1960) and ``IMMEstimator``
  (Blom & Bar-Shalom 1988; Bar-Shalom, Li & Kirubarajan 2001, section 11.6.6);
* the Gaussian share within ±2σ, 95.45 % (handbook value).
Random data are seeded. The cell (`tests/estimator/observer_cell.py`) is invented. Outliers,
bursts and steps are tested in `test_observer_outliers.py`.
"""

from __future__ import annotations

import dataclasses
import itertools
import math
import sys

import numpy as np
import pytest
import scipy.integrate
import scipy.linalg
import scipy.signal
import scipy.stats
from filterpy.kalman import IMMEstimator, KalmanFilter

from estimator.consistency import nis_band
from estimator.discretization import van_loan
from estimator.errors import EstimatorError, ParameterError
from estimator.force_models import ForceModels, late_kink_onsets, model_tables, scaling
from estimator.mm_kernel import imm_block
from estimator.observer import (
    FLAG_GAP,
    FLAG_MISSING,
    FLAG_OUTLIER_BEFORE,
    ForceObserver,
    ObserverTuning,
)
from estimator.plant import Plant
from tests.estimator.observer_cell import (
    CELL,
    DT,
    NOISE,
    SPAN,
    STIFF,
    make_observer,
    step_run,
)

Q_HOLD = 3e-3  # N²/s, invented; close to the 20 Hz default of this cell
R_SCALED = (STIFF * NOISE) ** 2  # measurement variance in the kernel's units (N²)


def cell_force_model(plant: Plant) -> tuple[np.ndarray, np.ndarray]:
    """``A`` and ``L`` of ``[x, v, F]`` with the force a random walk (physical units)."""
    m, b, k = plant.mass_kg, plant.damping_n_s_per_m, plant.stiffness_n_per_m
    A = np.array([[0.0, 1.0, 0.0], [-k / m, -b / m, 1.0 / m], [0.0, 0.0, 0.0]])
    return A, np.array([[0.0], [0.0], [1.0]])


def run_kernel(
    z: np.ndarray,
    PHI: np.ndarray,
    Q: np.ndarray,
    PI: np.ndarray,
    x0: np.ndarray,
    P0: np.ndarray,
    mu0: np.ndarray,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """`imm_block` on scaled data, nothing pruned, gate so wide that nothing is suspect.

    Returns the combined state (n, 4), its variances (n, 4) and the mode
    probabilities (n, r).
    """
    n, r = z.size, PHI.shape[1]
    x = np.empty((2, r, 4))
    x[:] = x0
    P = np.empty((2, r, 4, 4))
    P[:] = P0
    mu = np.empty((2, r))
    mu[:] = mu0
    ox, ov, om = np.empty((n, 4)), np.empty((n, 4)), np.empty((n, r))
    rejected = imm_block(
        z,
        np.zeros(n, np.int64),
        PHI,
        Q,
        Q,  # no floor models: the gains' noise is the priors'
        PI,
        R_SCALED,
        1e300,  # gate²: nothing is ever suspect
        1e-3,
        1.0,
        0.0,  # outliers' Cauchy share (nothing is suspect anyway)
        np.zeros(r),  # prune = 0: the textbook IMM
        0.0,  # the whole mixture shown
        -1,  # no jump model singled out: nothing is suspect
        -1,
        np.zeros(r, np.bool_),
        x,
        P,
        np.zeros_like(P),
        mu,
        np.zeros(8),
        ox,
        ov,
        np.empty(n),
        np.empty(n),
        np.empty(n, np.int64),
        om,
        np.empty(n),
        np.empty((0, r, 4)),
        np.empty((0, r, 4, 4)),
    )
    assert rejected == 0
    return ox, ov, om


def simulate_model(
    phi: np.ndarray, Q: np.ndarray, n: int, seed: int, rate_n_per_s: float = 0.0
) -> tuple[np.ndarray, ...]:
    """Truth drawn exactly from one model's discrete prior (scaled ``Φ``, ``Q``).

    Starts at rest under 10 N, the force changing at ``rate_n_per_s``. Returns times,
    measured displacement (m) and the true state in physical units ``[x, v, F, Ḟ]``,
    shape (n, 4).
    """
    rng = np.random.default_rng(seed)
    w = rng.multivariate_normal(np.zeros(4), Q, size=n, method="eigh")
    s = np.array([10.0, 0.0, 10.0, rate_n_per_s * scaling(CELL)[3]])  # scaled units
    states = np.empty((n, 4))
    for i in range(n):
        s = phi @ s + w[i]
        states[i] = s
    states /= scaling(CELL)
    z = states[:, 0] + rng.normal(0.0, NOISE, n)
    return np.arange(n) * DT, z, states


# --------------------------------------------------------------- discretisation


def test_van_loan_double_integrator_closed_form() -> None:
    # Closed form (Van Loan 1978; Bar-Shalom et al. 2001): Qd = q [[dt³/3, dt²/2], [dt²/2, dt]]
    A = np.array([[0.0, 1.0], [0.0, 0.0]])
    q, dt = 2.5, 0.01
    phi, Qd = van_loan(A, np.array([0.0, 1.0]), q, dt)
    np.testing.assert_allclose(phi, [[1.0, dt], [0.0, 1.0]], rtol=0, atol=1e-15)
    expected = q * np.array([[dt**3 / 3, dt**2 / 2], [dt**2 / 2, dt]])
    np.testing.assert_allclose(Qd, expected, rtol=1e-12)


def test_van_loan_cell_matches_quadrature() -> None:
    # Qd = ∫ e^{Aτ} L q Lᵀ e^{Aᵀτ} dτ by adaptive quadrature (scipy.integrate.quad_vec)
    A, L = cell_force_model(CELL)
    q = 3e-3
    phi, Qd = van_loan(A, L, q, DT)
    np.testing.assert_allclose(phi, scipy.linalg.expm(A * DT), rtol=1e-13, atol=1e-16)

    def integrand(tau: float) -> np.ndarray:
        v = scipy.linalg.expm(A * tau) @ L
        return q * (v @ v.T)

    Qi, _ = scipy.integrate.quad_vec(integrand, 0.0, DT, epsabs=0.0, epsrel=1e-12)
    scale = np.sqrt(np.outer(np.diag(Qi), np.diag(Qi)))
    assert np.max(np.abs(Qd - Qi) / scale) < 1e-10  # quadrature tolerance, well above eps


def test_van_loan_gives_the_same_bits_as_filterpy() -> None:
    # Reference library: filterpy.common.van_loan_discretization, the routine the block
    # exponential was taken from (it is not imported at run time, see the module).
    from filterpy.common import van_loan_discretization

    A, L = cell_force_model(CELL)
    q = 3e-3
    for dt in (DT, 3 * DT, 0.37 * DT):
        phi, Qd = van_loan(A, L, q, dt)
        phi_ref, Qd_ref = van_loan_discretization(A, np.reshape(L, (-1, 1)) * np.sqrt(q), dt)
        assert phi.tobytes() == np.ascontiguousarray(phi_ref).tobytes()
        assert Qd.tobytes() == (0.5 * (Qd_ref + Qd_ref.T)).tobytes()


def test_van_loan_long_gap_stays_finite_and_exact() -> None:
    # A 4 s gap on the cell (ζ·ωn·dt ≈ 480): the block matrix would overflow. Checks:
    # Φ against scipy.linalg.expm; the force state is a random walk, so its variance
    # after dt is q·dt exactly (closed form); and the whole Qd against adaptive
    # quadrature of its defining integral (scipy.integrate.quad_vec).
    A, L = cell_force_model(CELL)
    q, dt = 3e-3, 4.0
    with np.errstate(all="raise"):
        phi, Qd = van_loan(A, L, q, dt)
    assert np.all(np.isfinite(Qd))
    np.testing.assert_allclose(phi, scipy.linalg.expm(A * dt), rtol=1e-9, atol=1e-14)
    assert Qd[2, 2] == pytest.approx(q * dt, rel=1e-12)

    def integrand(tau: float) -> np.ndarray:
        v = scipy.linalg.expm(A * tau) @ L
        return q * (v @ v.T)

    # The cell states forget their start within ~0.05 s (1/(ζ·ωn) ≈ 8 ms), so the
    # quadrature over [0, dt] is split where the integrand changes character.
    Qi = sum(
        scipy.integrate.quad_vec(integrand, a, b, epsabs=0.0, epsrel=1e-10)[0]
        for a, b in ((0.0, 0.05), (0.05, 0.5), (0.5, dt))
    )
    scale = np.sqrt(np.outer(np.diag(Qi), np.diag(Qi)))
    assert np.max(np.abs(Qd - Qi) / scale) < 1e-8  # quadrature tolerance


def test_van_loan_refuses_bad_step() -> None:
    with pytest.raises(ParameterError, match="dt_s"):
        van_loan(np.zeros((2, 2)), np.ones(2), 1.0, 0.0)


# --------------------------------------------------------------- switching


@pytest.mark.parametrize("ratio", [1.0, 0.5])
def test_transition_matrix_rows_and_the_start_ratio(ratio: float) -> None:
    # Definition (force_models docstring): rows are probabilities; the regular models
    # leave at the total rate dt/dwell and jump at dt/jump_interval, the jump's instant
    # alike over the timed jump models; from hold the rate models are entered in the
    # ratio 1 : γ : γ² … and in total as often as with γ = 1; a jump stays or ends, and
    # its exits enter the rate models in the ratio 1 : ρ : ρ² …; the kink and the small
    # kink are each entered kink_share times as often as a force jump at one instant.
    bank = dataclasses.replace(
        ForceModels.for_cell(CELL, SPAN, Q_HOLD), start_ratio=ratio, exit_ratio=ratio
    )
    PI = bank.transitions(DT)
    assert np.all(PI >= 0.0)
    np.testing.assert_allclose(PI.sum(axis=1), 1.0, rtol=0, atol=1e-15)
    n_reg = bank.regular
    rates = PI[0, 1:n_reg]
    np.testing.assert_allclose(rates[1:] / rates[:-1], ratio, rtol=1e-12)
    np.testing.assert_allclose(rates.sum(), DT / bank.dwell_s, rtol=1e-12)
    jumps = PI[:n_reg, n_reg:]
    n_timed = len(bank.jump_timing)
    assert jumps.shape[1] == n_timed + 2  # the timed jumps, the kink and the small kink
    one = DT / bank.jump_interval_s / n_timed
    np.testing.assert_allclose(jumps[:, :n_timed], one, rtol=1e-12)
    np.testing.assert_allclose(jumps[:, n_timed:], bank.kink_share * one, rtol=1e-12)
    for i in range(n_reg, bank.count):  # a jump continues only as itself, or ends
        assert PI[i, i] == bank.jump_stay and np.all(np.delete(PI[i, n_reg:], i - n_reg) == 0)
        exits = PI[i, 1:n_reg]
        np.testing.assert_allclose(exits[1:] / exits[:-1], ratio, rtol=1e-12)
        want = (1.0 - bank.jump_stay) * (1.0 - bank.jump_to_hold)
        np.testing.assert_allclose(exits.sum(), want, rtol=1e-12)
    for name in ("start_ratio", "exit_ratio", "kink_small_ratio"):
        with pytest.raises(ParameterError, match=name):
            dataclasses.replace(bank, **{name: 0.0 if name != "kink_small_ratio" else 1.0})


def test_a_timed_jump_moves_the_state_by_the_cells_step_response() -> None:
    # Handbook closed form of an underdamped second-order system's unit step response
    # (x(s) = (1 − e^(−ζωn·s)(cos ωd·s + ζ/√(1−ζ²)·sin ωd·s))/k, v = dx/ds): a force jump J
    # at the fraction tau of the step moves [x, v, F] by J·[x, v, 1](s), s = (1 − tau)·dt,
    # so with no spread the timed model's covariance is σ_J² g gᵀ (scaled by D).
    base = ForceModels.for_cell(CELL, SPAN, Q_HOLD)
    bank = dataclasses.replace(base, jump_timing=(0.0, 0.3, 1.0), jump_spread=0.0)
    _, Q, _ = model_tables(CELL, bank, np.array([DT]))
    wn, z = CELL.natural_freq_rad_s, CELL.damping_ratio
    wd = wn * math.sqrt(1.0 - z * z)
    D = scaling(CELL)
    for j, tau in enumerate(bank.jump_timing, start=bank.regular):
        s = (1.0 - tau) * DT
        e = math.exp(-z * wn * s)
        x = (1.0 - e * (math.cos(wd * s) + z / math.sqrt(1.0 - z * z) * math.sin(wd * s))) / STIFF
        v = e * wn / math.sqrt(1.0 - z * z) * math.sin(wd * s) / STIFF
        g = np.array([x, v, 1.0, 0.0]) * D
        want = bank.jump_sd_n**2 * np.outer(g, g)
        np.testing.assert_allclose(Q[0, j], want, rtol=1e-9, atol=1e-12 * bank.jump_sd_n**2)


def test_the_kink_models_noise_is_a_random_walk_of_the_force_rate() -> None:
    # Closed form (Bar-Shalom, Li & Kirubarajan 2001, "continuous white noise
    # acceleration" model): a rate driven by white noise of intensity q over a step dt
    # gives the force and its rate the covariance q·[[dt³/3, dt²/2], [dt²/2, dt]]; the
    # kink's q is σ²/dt (a change of variance σ² at an unknown instant of the step).
    bank = ForceModels.for_cell(CELL, SPAN, Q_HOLD)
    assert bank.kink_rate_sd_n_per_s > 0.0 and bank.count == bank.regular + 5
    _, Q, _ = model_tables(CELL, bank, np.array([DT]))
    D = scaling(CELL)
    kink = bank.regular + len(bank.jump_timing)  # the kink, then the small kink
    for j, size in ((kink, 1.0), (kink + 1, bank.kink_small_ratio)):
        q = (size * bank.kink_rate_sd_n_per_s) ** 2 / DT
        want = q * np.array([[DT**3 / 3, DT**2 / 2], [DT**2 / 2, DT]]) * np.outer(D[2:], D[2:])
        np.testing.assert_allclose(Q[0, j, 2:, 2:], want, rtol=1e-9)
    PI = bank.transitions(DT)
    n_reg = bank.regular
    # a kink is entered kink_share times as often as a force jump at one instant
    np.testing.assert_allclose(PI[:n_reg, kink], bank.kink_share * PI[:n_reg, n_reg], rtol=1e-12)
    # a long gap: every row still a probability distribution
    PI = bank.transitions(5.0)
    assert np.all(PI >= 0.0)
    np.testing.assert_allclose(PI.sum(axis=1), 1.0, rtol=0, atol=1e-15)


def test_the_kink_model_helps_where_a_sine_starts_at_full_slope() -> None:
    # Truth: scipy.signal.lsim (reference library) of an invented overdamped cell (fn 60 Hz,
    # ζ 2.5, read at 1 kHz with 100 nm of noise, span 100 N) whose load holds 50 N, then
    # from 0.3 of a sample period after t = 0.1 s follows a 4 Hz sine starting at full
    # slope: the force is continuous, its rate jumps. Over 0.2 s from the start, in ten such
    # records (two amplitudes, five noise seeds), the force error with the kink model is
    # measured 0.70 times that of the same bank without it (a well damped 400 Hz cell at
    # 2 kHz: 0.92; a lightly damped 150 Hz cell at 10 kHz: 1.17, where the jumps, held
    # over three samples as a possible burst, now take the corner as well).
    cell = Plant.from_modal(2 * math.pi * 60.0, 2.5, 2.0e4)
    bank = ForceObserver(cell, 1e-3, 1e-7, force_range_n=100.0).models
    banks = {True: bank, False: dataclasses.replace(bank, kink_rate_sd_n_per_s=0.0)}
    sse = _sine_start_errors(
        cell, 1e-3, 1e-7, 100.0, 50.0, [0.1 + 0.3e-3], [(20.0, 4.0), (40.0, 4.0)], banks,
        (0.1, 0.3), 0.3,
    )  # fmt: skip
    assert math.sqrt(sse[True] / sse[False]) < 0.85


def test_late_kinks_are_added_only_where_a_kink_stays_unseen_for_samples() -> None:
    # Newton's second law integrated three times: a mass m pushed by a force rate δ from
    # rest moves x = δ·t³/(6m) while t ≪ 1/ωn (textbook). On an invented soft, lightly
    # damped cell (40 Hz, ζ 0.01, 5 kN/m, 2 kHz, 200 nm) a kink of 240 N/s reaches three
    # noise σ after t = (18·m·σ/δ)^(1/3): 2.6 samples, so the kinks of the two steps
    # before the last one are still unseen. On the test cell (159 Hz, ζ 0.12, 2 kHz) the
    # same rule gives one sample: no late kink.
    soft = Plant.from_modal(2 * math.pi * 40.0, 0.01, 5.0e3)
    dt, sigma, rate = 5e-4, 2e-7, 240.0
    seen = (18.0 * soft.mass_kg * sigma / rate) ** (1 / 3) / dt
    assert 2.0 < seen < 3.0
    assert late_kink_onsets(soft, rate, dt, sigma) == (1, 2)
    assert late_kink_onsets(CELL, 0.3 * SPAN * CELL.natural_freq_hz, DT, NOISE) == ()
    bank = ForceModels.for_cell(soft, 20.0, 1e-3, dt_s=dt, noise_sd_m=sigma)
    assert bank.kink_onsets == (1, 2) and bank.kinks == 4  # the kink, the small one, 2 late
    assert bank.count == bank.regular + len(bank.jump_timing) + 4


def test_a_late_kinks_noise_is_the_cells_ramp_response_from_that_step() -> None:
    # A kink δ in the step that ended m steps ago moves the state now by δ·g(τ), g the
    # response to a unit rate change τ after it: [x, v] from scipy.signal.lsim of the cell
    # driven by the ramp τ (reference library), F = τ, Ḟ = 1; the model's covariance is
    # σ²·(g(m·dt) g(m·dt)ᵀ + g((m+1)·dt) g((m+1)·dt)ᵀ)/2 (scaled by D).
    bank = dataclasses.replace(ForceModels.for_cell(CELL, SPAN, Q_HOLD), kink_onsets=(2,))
    _, Q, PI = model_tables(CELL, bank, np.array([DT]))
    D = scaling(CELL)
    want = np.zeros((4, 4))
    for m in (2, 3):
        tf = np.linspace(0.0, m * DT, 2001)
        _, _, xs = scipy.signal.lsim(CELL.state_space(), tf, tf)
        x, v = xs[-1]
        g = np.array([x, v, m * DT, 1.0]) * D
        want += np.outer(g, g) / 2.0
    want *= bank.kink_rate_sd_n_per_s**2
    np.testing.assert_allclose(Q[0, -1], want, rtol=2e-5, atol=1e-9 * np.abs(want).max())
    # entered as often as the kink within the step, times late_kink_share
    n_reg = bank.regular
    kink = n_reg + len(bank.jump_timing)
    np.testing.assert_allclose(
        PI[0, :n_reg, -1], bank.late_kink_share * PI[0, :n_reg, kink], rtol=1e-12
    )


def test_late_kinks_help_where_a_sine_starts_on_a_soft_lightly_damped_cell() -> None:
    # Truth: scipy.signal.lsim (reference library) of the invented soft cell above, read at
    # 2 kHz with 200 nm of noise (span 20 N): 10 N held, then from 0, 0.3 or 0.7 of a
    # sample period after t = 0.3 s a sine starting at full slope (±5 N at 7 Hz or 3 Hz,
    # ±2 N at 7 Hz). Over 0.1 s from the start, in five noise seeds each (45 records), the
    # error with the late kinks is measured 0.95 times that of the same bank without them
    # (0.89 with late_kink_share 1 instead of 0.3; the first 0.1 s of a sine on one accuracy
    # benchmark record, 0.65).
    dt = 5e-4
    cell = Plant.from_modal(2 * math.pi * 40.0, 0.01, 5.0e3)
    bank = ForceObserver(cell, dt, 2e-7, force_range_n=20.0).models
    assert bank.kink_onsets == (1, 2)
    banks = {True: bank, False: dataclasses.replace(bank, kink_onsets=())}
    starts = [0.3 + offset * dt for offset in (0.0, 0.3, 0.7)]
    sines = [(5.0, 7.0), (5.0, 3.0), (2.0, 7.0)]
    sse = _sine_start_errors(cell, dt, 2e-7, 20.0, 10.0, starts, sines, banks, (0.3, 0.4), 0.45)
    assert math.sqrt(sse[True] / sse[False]) < 0.97


def test_the_small_kink_helps_where_a_sine_starts_gently() -> None:
    # Truth: scipy.signal.lsim (reference library) of an invented stiff, moderately damped
    # cell (770 Hz, ζ 0.34, 2.4 kN/m) read at 5 kHz with 23 nm of noise (span 1.1 N):
    # 0.55 N held, then from 0.3 or 0.7 of a sample period after t = 0.1 s a slow sine
    # starting at full slope (±0.38 N at 2.66 Hz, ±0.1 N at 2 Hz: a kink of 1–2 % of the
    # kink model's size). Over 20 ms from the start, five noise seeds each (20 records),
    # the error with the small kink is measured 0.952 times that of the same bank without
    # it (the benchmark record this scenario comes from, seed 7's random cell r04: 1.16 →
    # 1.10 times the fitted integrated random walk over the whole record).
    dt = 2e-4
    cell = Plant.from_modal(2 * math.pi * 770.0, 0.34, 2.4e3)
    bank = ForceObserver(cell, dt, 2.3e-8, force_range_n=1.1).models
    assert bank.kink_small_ratio > 0.0 and bank.kink_onsets == ()
    banks = {True: bank, False: dataclasses.replace(bank, kink_small_ratio=0.0)}
    starts = [0.1 + offset * dt for offset in (0.3, 0.7)]
    sines = [(0.38, 2.66), (0.1, 2.0)]
    sse = _sine_start_errors(cell, dt, 2.3e-8, 1.1, 0.55, starts, sines, banks, (0.1, 0.12), 0.13)
    assert math.sqrt(sse[True] / sse[False]) < 0.98


def _sine_start_errors(
    cell: Plant,
    dt: float,
    noise: float,
    span: float,
    level: float,
    starts: list[float],
    sines: list[tuple[float, float]],
    banks: dict[bool, ForceModels],
    window: tuple[float, float],
    record_s: float,
) -> dict[bool, float]:
    """Squared force error of each bank within ``window`` (s), summed over records that
    hold ``level`` N, then from each of ``starts`` follow a sine (amplitude N, Hz) starting
    at full slope, five noise seeds each. Truth: scipy.signal.lsim (reference library) at 8
    points a sample period."""
    over = 8
    n = round(record_s / dt)
    t = np.arange(n) * dt
    tf = np.arange(n * over) * (dt / over)
    inside = (t >= window[0]) & (t < window[1])
    k = cell.stiffness_n_per_m
    sse = dict.fromkeys(banks, 0.0)
    for start, (amplitude, hz) in itertools.product(starts, sines):
        moving = amplitude * np.sin(2 * np.pi * hz * (tf - start))
        force = level + np.where(tf < start, 0.0, moving)
        _, x, _ = scipy.signal.lsim(cell.state_space(), force, tf, X0=[level / k, 0.0])
        for seed in range(1, 6):
            z = x[::over] + np.random.default_rng(seed).normal(0.0, noise, n)
            for key, bank in banks.items():
                obs = ForceObserver(cell, dt, noise, 0.0, ObserverTuning(models=bank), span)
                err = obs.process(t, z)["force_n"] - force[::over]
                sse[key] += float(np.sum(err[inside] ** 2))
    return sse


# --------------------------------------------------------------- the kernel vs filterpy


def test_one_model_kernel_is_the_kalman_filter() -> None:
    # Reference: an independent filterpy KalmanFilter loop (reference library; Kalman
    # 1960) on [x, v, F] in physical units, Φ and Q from van_loan on a locally built A.
    # With one model and π = [[1]] the IMM is the Kalman filter.
    models = ForceModels.for_cell(CELL, SPAN, Q_HOLD)
    PHI, Q, _ = model_tables(CELL, models, np.array([DT]))
    phi1, q1 = np.ascontiguousarray(PHI[:, :1]), np.ascontiguousarray(Q[:, :1])
    t, z, _ = step_run([10.0, 35.0, 5.0], 0.25, seed=21)
    D = scaling(CELL)
    x0 = np.array([STIFF * z[0], 0.0, STIFF * z[0], 0.0])
    P0 = np.diag([R_SCALED, SPAN**2, SPAN**2, SPAN**2])
    ox, ov, _ = run_kernel(STIFF * z, phi1, q1, np.ones((1, 1, 1)), x0, P0, np.ones(1))

    A, L = cell_force_model(CELL)
    kf = KalmanFilter(dim_x=3, dim_z=1)
    kf.F, kf.Q = van_loan(A, L, Q_HOLD, DT)
    kf.H, kf.R = np.array([[1.0, 0.0, 0.0]]), np.array([[NOISE**2]])
    Di = 1.0 / D[:3]
    kf.x = (x0[:3] * Di).reshape(3, 1)
    kf.P = P0[:3, :3] * np.outer(Di, Di)
    ref_f, ref_u, ref_x = np.empty(t.size), np.empty(t.size), np.empty(t.size)
    for i in range(t.size):
        kf.predict()
        kf.update(z[i])
        ref_f[i], ref_u[i], ref_x[i] = kf.x[2, 0], math.sqrt(kf.P[2, 2]), kf.x[0, 0]
    # Requirement: agreement to 1e-9 relative (force to its largest value).
    assert np.max(np.abs(ox[:, 2] - ref_f)) / np.max(np.abs(ref_f)) < 1e-9
    np.testing.assert_allclose(np.sqrt(ov[:, 2]), ref_u, rtol=1e-9)
    np.testing.assert_allclose(ox[:, 0] / D[0], ref_x, rtol=1e-9)


def test_the_kernel_refuses_a_transition_it_would_get_wrong() -> None:
    # The kernel leaves out Φ's structural zeros (the force depends on no state of the
    # cell, its rate not on the force): a table without them is refused, not mis-used.
    models = ForceModels.for_cell(CELL, SPAN, Q_HOLD)
    PHI, Q, _ = model_tables(CELL, models, np.array([DT, 1e-6, 5.0]))
    assert not PHI[:, :, 2:, :2].any() and not PHI[:, :, 3, 2].any()
    phi1, q1 = np.ascontiguousarray(PHI[:1, :1]), np.ascontiguousarray(Q[:1, :1])
    z = np.full(3, 1.0)
    x0, P0 = np.array([1.0, 0.0, 1.0, 0.0]), np.diag([R_SCALED, 1.0, 1.0, 1.0])
    run_kernel(z, phi1, q1, np.ones((1, 1, 1)), x0, P0, np.ones(1))  # accepted
    for at in [(2, 0), (3, 1), (3, 2)]:
        bad = phi1.copy()
        bad[0, 0][at] = 1e-12
        with pytest.raises(ValueError, match="must be zero"):
            run_kernel(z, bad, q1, np.ones((1, 1, 1)), x0, P0, np.ones(1))


def test_imm_agrees_with_filterpy_imm_estimator() -> None:
    # Reference: filterpy's IMMEstimator (reference library; Blom & Bar-Shalom 1988;
    # Bar-Shalom, Li & Kirubarajan 2001, 11.6.6) with three filterpy KalmanFilters.
    # Order: filterpy computes the mixing weights from μ at construction and at the end
    # of each update, and mixes at the start of predict; our kernel mixes, predicts and
    # updates per sample. Started from the same posteriors and μ, the two do the same
    # operations in the same order. filterpy floors each likelihood at the smallest
    # normal double; the step (20 N) is chosen so that no log-likelihood goes below it,
    # which the loop checks.
    bank = ForceModels.for_cell(CELL, SPAN, Q_HOLD)
    models = dataclasses.replace(
        bank, q_rate_n2_per_s3=(bank.q_rate_n2_per_s3[1],), jump_timing=(0.5,),
        kink_rate_sd_n_per_s=0.0,
    )  # fmt: skip
    assert models.count == 3  # hold, one rate, jump
    PHI, Q, PI = model_tables(CELL, models, np.array([DT]))
    n = 300
    _, z, _ = step_run([10.0, 30.0], n * DT / 2, seed=22)
    zs = STIFF * z
    x0 = np.array([zs[0], 0.0, zs[0], 0.0])
    P0 = np.diag([R_SCALED, SPAN**2, SPAN**2, SPAN**2])
    mu0 = np.array([0.5, 0.3, 0.2])
    ox, ov, om = run_kernel(zs, PHI, Q, PI, x0, P0, mu0)

    filters = []
    for j in range(3):
        kf = KalmanFilter(dim_x=4, dim_z=1)
        kf.F, kf.Q = PHI[0, j].copy(), Q[0, j].copy()
        kf.H, kf.R = np.array([[1.0, 0.0, 0.0, 0.0]]), np.array([[R_SCALED]])
        kf.x, kf.P = x0.reshape(4, 1).copy(), P0.copy()
        filters.append(kf)
    imm = IMMEstimator(filters, mu0.copy(), PI[0].copy())
    rx, rv, rm = np.empty((n, 4)), np.empty((n, 4)), np.empty((n, 3))
    floor = math.log(sys.float_info.min)
    for i in range(n):
        imm.predict()
        imm.update(zs[i])
        assert min(f.log_likelihood for f in filters) > floor
        rx[i], rv[i], rm[i] = imm.x[:, 0], np.diag(imm.P), imm.mu
    assert np.max(np.abs(rm[:, 2])) > 0.99  # the step was taken by the jump model
    # Requirement: 1e-9, each state component relative to its largest value, each
    # variance relative to itself, probabilities absolute. Measured here: 7e-12, 2e-11
    # and 2e-13 (rounding of the start-up, when P0 is 1e8 times R).
    assert np.all(np.max(np.abs(ox - rx), axis=0) / np.max(np.abs(rx), axis=0) < 1e-9)
    np.testing.assert_allclose(ov, rv, rtol=1e-9)
    np.testing.assert_allclose(om, rm, rtol=0, atol=1e-9)


# --------------------------------------------------------------- block sizes


def test_bit_identical_whatever_the_block_sizes() -> None:
    # Project rule (DEVELOPERS.md): any split of the input gives the same bytes.
    t, z, _ = step_run([5.0, 40.0, 12.0], 0.5, seed=4)
    z = z.copy()
    z[700] += 60 * NOISE  # spikes
    z[1800] -= 300 * NOISE
    z[2200:2203] = np.nan  # missing samples
    z[2600] = np.nan
    keep = np.ones(t.size, bool)
    keep[1200:1240] = False  # a gap in time
    keep[2900] = False  # a dropped row
    t, z = t[keep], z[keep]
    whole_obs = make_observer()
    whole = whole_obs.process(t, z)
    assert whole_obs.counters.rejected >= 2 and whole_obs.counters.gaps == 2
    rng = np.random.default_rng(9)
    splits = {"one by one, then the rest": [*range(51), t.size]}
    for max_block in (7, 500):
        cuts, i = [0], 0
        while i < t.size:
            i = min(t.size, i + int(rng.integers(1, max_block + 1)))
            cuts.append(i)
        splits[f"random blocks up to {max_block}"] = cuts
    for name, cuts in splits.items():
        obs = make_observer()
        parts = [obs.process(t[a:b], z[a:b]) for a, b in itertools.pairwise(cuts)]
        assert np.concatenate(parts).tobytes() == whole.tobytes(), name
        assert dataclasses.asdict(obs.counters) == dataclasses.asdict(whole_obs.counters)


# --------------------------------------------------------------- statistics


PRIORS = {  # name: (model drawn from, starting force rate N/s)
    "hold": (0, 0.0),  # the hold prior: a constant force
    "slow rate": (1, 2.0),  # the slowest rate prior: a force changing at a constant rate
    "rate": (2, 0.0),  # integrated random walks of the bank's second and fourth
    "fast rate": (4, 0.0),  # rate intensities (1.1·10⁴ and 7.1·10⁶ N²/s³ here)
}


@pytest.fixture(scope="module")
def prior_runs() -> dict[str, tuple[np.ndarray, np.ndarray]]:
    """Truth drawn from each prior of the bank's regular models, and the estimates."""
    runs = {}
    obs = make_observer(process_noise_n2_per_s=Q_HOLD)
    PHI, Q, _ = model_tables(CELL, obs.models, np.array([DT]))
    # the priors: the floor models assume no process noise (their intensities set gains)
    prior = np.where(obs.models.floors[:, None, None], 0.0, Q[0])
    for name, (model, rate) in PRIORS.items():
        obs = make_observer(process_noise_n2_per_s=Q_HOLD)
        t, z, truth = simulate_model(PHI[0, model], prior[model], 40_000, 31 + model, rate)
        runs[name] = (obs.process(t, z)[2000:], truth[2000:])  # past start-up
    return runs


@pytest.mark.parametrize("truth", list(PRIORS))
def test_two_sigma_coverage_on_truth_from_the_priors(prior_runs, truth: str) -> None:
    est, states = prior_runs[truth]
    share = np.mean(np.abs(est["force_n"] - states[:, 2]) < 2.0 * est["force_u_n"])
    # ±2σ holds 95.45 % of a Gaussian (handbook value); requirement band 0.93-0.97.
    # Measured here: 0.962 (hold), 0.954 (slow rate), 0.959 (rate), 0.955 (fast rate).
    assert 0.93 <= share <= 0.97, f"±2σ coverage {share:.3f}"


def test_a_load_wandering_like_the_hold_models_design_is_covered_most_of_the_time() -> None:
    # A documented limit, not a prior of the bank: a force that is a random walk of the
    # hold model's design intensity. The hold model states the error of a constant
    # force, the rate models take such a load only in part, and σ falls short; measured
    # here 0.86 (Gaussian 0.9545). The band guards against it getting worse.
    obs = make_observer(process_noise_n2_per_s=Q_HOLD)
    PHI, Q, _ = model_tables(CELL, obs.models, np.array([DT]))
    t, z, truth = simulate_model(PHI[0, 0], Q[0, 0], 40_000, seed=31)
    est = obs.process(t, z)[2000:]
    share = np.mean(np.abs(est["force_n"] - truth[2000:, 2]) < 2.0 * est["force_u_n"])
    assert 0.80 <= share <= 0.97, f"±2σ coverage {share:.3f}"


@pytest.mark.parametrize("truth", list(PRIORS))
def test_mean_nis_on_truth_from_the_priors(prior_runs, truth: str) -> None:
    # With the right model each NIS is χ²(1) and the mean of N is χ²(N)/N (Bar-Shalom,
    # Li & Kirubarajan 2001, §5.4); band from scipy.stats.chi2 via nis_band.
    est, _ = prior_runs[truth]
    nis = est["nis"][est["flags"] == 0]
    lo, hi = nis_band(nis.size)
    assert lo <= np.mean(nis) <= hi, f"mean NIS {np.mean(nis):.3f} outside [{lo:.3f}, {hi:.3f}]"


def test_nis_band_is_the_chi_square_band() -> None:
    # Reference library: scipy.stats.chi2.ppf (nis_band computes the same quantile
    # through scipy.special to keep scipy.stats out of every command's start-up).
    n = np.arange(0, 20_000)
    for level in (0.9, 0.95, 0.99):
        lo, hi = nis_band(n, level)
        tail = (1.0 - level) / 2.0
        with np.errstate(invalid="ignore", divide="ignore"):
            np.testing.assert_array_equal(lo, scipy.stats.chi2.ppf(tail, n) / n)
            np.testing.assert_array_equal(hi, scipy.stats.chi2.ppf(1.0 - tail, n) / n)


def _shown_mixture(mu: np.ndarray, f: np.ndarray, var: np.ndarray, prune: np.ndarray, tail: float):
    """Mean and variance of the mixture over the models shown, written from the
    definition (loop, sort): models below ``prune`` out, then the least probable while
    their total stays within ``tail`` of the rest."""
    w = np.where(mu >= prune, mu, 0.0)
    budget, spent = tail * w.sum(), 0.0
    for j in np.argsort(w, kind="stable"):
        if w[j] == 0.0:
            continue
        if np.count_nonzero(w) <= 1 or spent + w[j] > budget:
            break
        spent += w[j]
        w[j] = 0.0
    w = w / w.sum()
    mean = float(w @ f)
    return mean, float(w @ (var + (f - mean) ** 2))


def _lag_term(mu: np.ndarray, f: np.ndarray, rates: range, floors: np.ndarray) -> float:
    """The lag of the prior, from its definition: when a rate model that is not the
    fastest leads, (its force − the next faster one's)² / 12 (a rectangular distribution
    of that full width, GUM 4.3.7), or / 3 when it is a floor model (the mean square of a
    uniform error from 0 to that width); else 0."""
    lead = int(np.argmax(mu))
    if lead in rates and lead + 1 in rates:
        return float((f[lead + 1] - f[lead]) ** 2 / (3.0 if floors[lead] else 12.0))
    return 0.0


def test_stated_sigma_is_that_of_the_models_holding_96_percent_and_the_lag() -> None:
    # Definition (GUM Supplement 1, JCGM 101:2008, 5.3: a coverage interval is a
    # statement about the bulk of the distribution): the shown mixture leaves out the
    # least probable models up to 4 % in total; checked row by row against a direct
    # implementation, on a record with a step and a ramp.
    t, z, _ = step_run([10.0, 35.0], 0.3, seed=41)
    z = z + np.where(t > 0.45, (t - 0.45) * 40.0 / STIFF, 0.0)  # then a 40 N/s ramp
    obs = make_observer()
    obs.keep_log = True
    est = obs.process(t, z)
    _, lx, lP, om = obs.log[0]
    rows = np.flatnonzero(est["flags"] == 0)
    rates = range(1, obs.models.regular)
    dropped = lagging = floor_lagging = 0
    for i in rows:
        mean, var = _shown_mixture(om[i], lx[i, :, 2], lP[i, :, 2, 2], obs._prune, 0.04)
        lag = _lag_term(om[i], lx[i, :, 2], rates, obs.models.floors)
        floor_lagging += lag > 0.0 and bool(obs.models.floors[int(np.argmax(om[i]))])
        assert est["force_n"][i] == pytest.approx(mean, rel=1e-6, abs=1e-9)
        assert est["force_u_n"][i] == pytest.approx(math.sqrt(var + lag), rel=1e-6)
        full = _shown_mixture(om[i], lx[i, :, 2], lP[i, :, 2, 2], obs._prune, 0.0)[1]
        dropped += var < full * (1 - 1e-9)
        lagging += lag > 1e-3 * var
    assert dropped > rows.size // 10  # the rule acts on this record (not vacuous)
    assert lagging > rows.size // 10  # so does the lag of the prior (on the ramp)
    assert floor_lagging > 0  # with the slowest rate model (a floor model) leading too
    # with shown_tail = 0 the whole (pruned) mixture is shown
    whole = make_observer(shown_tail=0.0).process(t, z)
    i = rows[-1]
    _, vfull = _shown_mixture(om[i], lx[i, :, 2], lP[i, :, 2, 2], obs._prune, 0.0)
    lag = _lag_term(om[i], lx[i, :, 2], rates, obs.models.floors)
    assert whole["force_u_n"][i] == pytest.approx(math.sqrt(vfull + lag), rel=1e-6)


# --------------------------------------------------------------- gaps and missing


def test_gap_and_missing_sample_are_flagged_and_finite() -> None:
    # Source: the constant applied load (20 N) is the truth; ±3σ (handbook Gaussian).
    n = 4000
    rng = np.random.default_rng(12)
    t = np.arange(n) * DT
    z = 20.0 / STIFF + rng.normal(0.0, NOISE, n)
    z[2000] = np.nan
    keep = np.ones(n, bool)
    keep[1000] = False  # a dropped row: the time jumps two periods
    obs = make_observer()
    est = obs.process(t[keep], z[keep])
    gap_row, nan_row = 1000, 1999
    assert est["flags"][gap_row] == FLAG_GAP and est["flags"][nan_row] == FLAG_MISSING
    assert np.count_nonzero(est["flags"]) == 2
    assert obs.counters.gaps == 1 and obs.counters.missing == 1
    for name in ("force_n", "force_u_n", "displacement_m", "velocity_m_s"):
        assert np.all(np.isfinite(est[name])), name
    # innovation and NIS are NaN on the missing row only
    assert np.flatnonzero(~np.isfinite(est["innovation_m"])).tolist() == [nan_row]
    assert np.flatnonzero(~np.isfinite(est["nis"])).tolist() == [nan_row]
    near = np.r_[gap_row - 20 : gap_row + 20, nan_row - 20 : nan_row + 20]
    assert np.all(np.abs(est["force_n"][near] - 20.0) <= 3.0 * est["force_u_n"][near])


def test_a_spike_followed_by_a_missing_sample_is_decided_from_the_running_state() -> None:
    # A suspect sample whose next row is missing is decided by the suspects alone. That
    # decision once merged the branches held by the caller at the start of the block
    # instead of the running ones (a rewrite of the kernel's layout, caught by the next
    # one): after it, the estimate went back to the block's first level. Source: the
    # applied load (0 N, then 40 N) is the truth; ±3σ (handbook Gaussian).
    n = 3000
    rng = np.random.default_rng(5)
    t = np.arange(n) * DT
    f = np.where(t < 0.5 * n * DT, 0.0, 40.0)
    z = f / STIFF + rng.normal(0.0, NOISE, n)
    spike = 2500
    z[spike] += 50.0 * NOISE
    z[spike + 1] = np.nan
    for block in (n, 700):  # one block, and blocks that begin at the 0 N level
        obs = make_observer()
        est = np.concatenate([obs.process(t[i : i + block], z[i : i + block])
                              for i in range(0, n, block)])  # fmt: skip
        # the spike held, then judged an outlier on the missing row
        assert est["flags"][spike + 1] & FLAG_MISSING
        assert est["flags"][spike + 1] & FLAG_OUTLIER_BEFORE
        after = np.arange(spike + 1, spike + 40)
        err = np.abs(est["force_n"][after] - 40.0)
        assert np.all(err <= 3.0 * est["force_u_n"][after]), err.max()


# --------------------------------------------------------------- bad input


def test_bad_input_is_named() -> None:
    obs = make_observer()
    with pytest.raises(EstimatorError, match="time_s has 2 samples but displacement_m has 3"):
        obs.process(np.zeros(2), np.zeros(3))
    with pytest.raises(EstimatorError, match=r"displacement_m\[2\] = inf"):
        obs.process(np.array([0.0, DT, 2 * DT]), np.array([0.0, 0.0, np.inf]))
    # issue 15 (found by the fuzzing suite): 1e308 m overflowed k·z
    with pytest.raises(EstimatorError, match=r"displacement_m\[0\] = 1e\+308: a metre or more"):
        obs.process(np.array([0.0, DT]), np.array([1e308, 0.0]))
    with pytest.raises(EstimatorError, match=r"time_s\[2\] = 0.001 does not come after 0.001"):
        obs.process(np.array([0.0, 0.001, 0.001]), np.zeros(3))
    with pytest.raises(EstimatorError, match=r"time_s\[1\] = nan: sample times must be finite"):
        obs.process(np.array([0.0, np.nan, 0.001]), np.zeros(3))
    with pytest.raises(EstimatorError, match=r"time_s\[1\] = inf: sample times must be finite"):
        obs.process(np.array([0.0, np.inf]), np.zeros(2))
    # Refused blocks leave no trace: the observer then gives what a fresh one gives.
    t, z = np.arange(200) * DT, np.full(200, 1e-5)
    assert obs.process(t, z).tobytes() == make_observer().process(t, z).tobytes()
    with pytest.raises(EstimatorError, match=r"time_s\[0\] = 0.0 does not come after 0.0995"):
        obs.process(np.array([0.0]), np.zeros(1))
    assert issubclass(EstimatorError, ValueError)


@pytest.mark.parametrize(
    ("field", "value"),
    [
        ("gate_sigma", -1.0),
        ("outlier_probability", 0.7),
        ("outlier_tail", 1.0),
        ("prune", 0.5),
        ("jump_prune", 0.6),
        ("rate_scale", 0.0),
    ],
)
def test_bad_tuning_is_named(field: str, value: float) -> None:
    with pytest.raises(ParameterError, match=rf"{field} = {value!r}"):
        ObserverTuning(**{field: value})


def test_a_bank_wider_than_the_kernel_is_refused_by_name() -> None:
    bank = ForceModels.for_cell(CELL, SPAN, Q_HOLD, rates=40)
    with pytest.raises(ParameterError, match=r"bank has 4\d models; the kernel takes at most 32"):
        ForceObserver(CELL, DT, NOISE, 0.0, ObserverTuning(models=bank), SPAN)


def test_zero_measurement_variance_is_refused() -> None:
    with pytest.raises(ParameterError, match="measurement variance"):
        ForceObserver(CELL, DT, 0.0, 0.0)


def test_a_cell_at_rest_when_the_record_starts_reads_calm_from_its_first_row() -> None:
    # The start-up takes the cell at rest (F = k·x, both known to the noise of the first
    # reading; the same assumption as the closed-form diffuse-prior start of a Kalman filter
    # on an at-rest cell). An invented soft, moderately damped cell (42 Hz, ζ 0.49, read at
    # 10 kHz: a force barely moves it within a sample) holding 9.35 N from t = 0, so that
    # x = F/k throughout (statics): over the first 5 ms the error stays within twice that of
    # k·z, one reading's noise (measured 1.6 times; with the earlier broad start, ẋ and F
    # each within one span, the second row read -141 N and those 5 ms had 800 times it).
    k, rate = 3.1e5, 10_000.0
    wn = 2 * math.pi * 42.1
    m = k / wn**2
    plant = Plant(m, 2 * 0.4921 * math.sqrt(k * m), k)
    t = np.arange(2000) / rate
    force = np.full(t.size, 9.35)
    z = force / k + np.random.default_rng(3).normal(0.0, 9.4e-8, t.size)
    est = ForceObserver(plant, 1 / rate, 9.4e-8, 0.0, force_range_n=190.0).process(t, z)
    err = est["force_n"] - force
    assert np.sqrt(np.mean(err[t < 0.005] ** 2)) < 2 * k * 9.4e-8
    assert np.mean(np.abs(err[t < 0.2]) <= 2 * est["force_u_n"][t < 0.2]) > 0.9


def test_a_record_that_starts_while_the_cell_rings_is_taken_by_the_moving_start(
    monkeypatch: pytest.MonkeyPatch,
) -> None:
    # The same invented lightly damped cell (150 Hz, ζ 0.04, 10 kHz), its record cut 3 ms
    # after a 10 → 60 N step (truth from scipy.signal.lsim): the start-up's "already
    # moving" hypothesis (the first jump model at 0.03) takes the ringing cell. Measured
    # over the first 50 ms: RMSE 10.5 N with it, 12.4 N with the cell taken at rest alone;
    # ±2σ coverage 0.99 either way.
    import estimator.observer as observer_module

    k, rate, noise = 2.0e5, 10_000.0, 2e-8
    wn = 2 * math.pi * 150.0
    m = k / wn**2
    plant = Plant(m, 2 * 0.04 * math.sqrt(k * m), k)
    t = np.arange(10_000) / rate
    force = np.where(t >= 0.2, 60.0, 10.0)
    system = scipy.signal.lti([1.0], [m, plant.damping_n_s_per_m, k])
    x = scipy.signal.lsim(system, force - 10.0, t)[1] + 10.0 / k
    z = x + np.random.default_rng(1).normal(0.0, noise, t.size)
    cut = int(0.203 * rate)
    first = t[cut:] - t[cut] < 0.05
    rmse = {}
    for moving in (observer_module._START_MOVING, 0.0):
        monkeypatch.setattr(observer_module, "_START_MOVING", moving)
        obs = ForceObserver(plant, 1 / rate, noise, 0.0, force_range_n=100.0)
        est = obs.process(t[cut:] - t[cut], z[cut:])
        err = (est["force_n"] - force[cut:])[first]
        rmse[moving] = np.sqrt(np.mean(err**2))
        assert np.mean(np.abs(err) <= 2 * est["force_u_n"][first]) > 0.9
    assert rmse[0.03] < 0.9 * rmse[0.0]


def test_a_wild_first_sample_does_not_stop_the_observer() -> None:
    # Found by the fuzzing suite: a record whose first displacement is -0.5 m (the start-up
    # then sets F = k·z0, thousands of newtons off), then an invented held load of 10 N.
    # The next samples have no density under any model with a non-zero probability; the
    # kernel divided by zero. Now: finite output, and the held load within 0.01 N after
    # 50 ms (the observer restarts its belief, it does not stop).
    t = np.arange(1000) * DT
    z = np.full(t.size, 10.0 / STIFF) + np.random.default_rng(5).normal(0.0, NOISE, t.size)
    z[0] = -0.5
    est = make_observer().process(t, z)
    assert np.all(np.isfinite(est["force_n"])) and np.all(np.isfinite(est["force_u_n"]))
    assert np.max(np.abs(est["force_n"][t > 0.05] - 10.0)) < 0.01
