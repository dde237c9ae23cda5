"""The ring-down check of the model-mismatch alarm, against SciPy's responses of the cell."""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.signal

from estimator.alarms.ringdown import ZETA_MAX, RingdownWatch, fit_ringing

# An invented cell: 250 Hz, ζ 0.05, k 1e5 N/m, read at 5 kHz with 20 nm of noise.
FN_HZ, ZETA, K_N_PER_M, RATE_HZ, NOISE_M = 250.0, 0.05, 1e5, 5000.0, 20e-9
WN = 2.0 * math.pi * FN_HZ
MASS_KG = K_N_PER_M / WN**2
DAMPING = 2.0 * ZETA * MASS_KG * WN


def _step_response(step_n: float, n: int, zeta: float = ZETA) -> np.ndarray:
    """Displacement after a force step of ``step_n`` from rest: scipy.signal.step of
    1/(m·s² + b·s + k) (reference library), with white noise."""
    system = scipy.signal.lti([1.0], [MASS_KG, 2.0 * zeta * MASS_KG * WN, K_N_PER_M])
    t = np.arange(n) / RATE_HZ
    _, x = scipy.signal.step(system, T=t)
    return step_n * x + np.random.default_rng(5).normal(0.0, NOISE_M, n)


def test_the_fit_finds_fn_and_zeta_of_a_step_response_within_its_uncertainty() -> None:
    x = _step_response(20.0, 200)  # 10 periods
    u = np.arange(x.size) / RATE_HZ
    fit = fit_ringing(u, x, WN * 1.04, ZETA * 1.5)  # started off the true values
    assert fit is not None
    assert abs(fit.fn_hz - FN_HZ) < 4.0 * fit.fn_u_hz
    assert abs(fit.zeta - ZETA) < 4.0 * fit.zeta_u
    assert fit.zeta_u < 0.01 * ZETA and fit.fn_u_hz < 0.001 * FN_HZ
    # the ringing starts at −ΔF/k about the new rest level (closed form)
    assert fit.amplitude_m == pytest.approx(20.0 / K_N_PER_M, rel=0.01)
    assert fit.rms_m == pytest.approx(NOISE_M, rel=0.15)


def _checks(x: np.ndarray, jump_rows: list[int], zeta: float = ZETA) -> list:
    watch = RingdownWatch(FN_HZ, zeta, RATE_HZ, NOISE_M, 0.03, 0.25, 30.0)
    jump = np.zeros(x.size, bool)
    jump[jump_rows] = True
    t = np.arange(x.size) / RATE_HZ
    return watch.feed(np.arange(x.size), t, x, jump)


def test_a_window_starts_after_the_jump_rows_and_agrees_or_disagrees() -> None:
    x = np.concatenate((np.zeros(100), _step_response(20.0, 900)))
    (check,) = _checks(x, [100, 101])
    assert check.start_index == 102 and check.agrees
    # the same record against a profile with twice its damping, or 10 % off in fn
    assert not _checks(x, [100, 101], zeta=2 * ZETA)[0].agrees
    watch = RingdownWatch(1.1 * FN_HZ, ZETA, RATE_HZ, NOISE_M, 0.03, 0.25, 30.0)
    jump = np.zeros(x.size, bool)
    jump[[100, 101]] = True
    (off,) = watch.feed(np.arange(x.size), np.arange(x.size) / RATE_HZ, x, jump)
    assert not off.agrees and off.fit.fn_hz == pytest.approx(FN_HZ, rel=0.001)


def test_windows_that_are_not_a_free_decay_or_too_small_are_not_judged() -> None:
    ring = _step_response(20.0, 900)
    # a second step 1.5 periods into the window: halved down to 3 periods, then dropped
    spoilt = ring.copy()
    spoilt[30:] += _step_response(20.0, 870)
    assert _checks(np.concatenate((np.zeros(100), spoilt)), [100, 101]) == []
    # ringing of 10 noise σ (a step of 0.02 N): too small to say anything
    small = _step_response(10 * NOISE_M * K_N_PER_M, 900)
    assert _checks(np.concatenate((np.zeros(100), small)), [100, 101]) == []


def test_a_cell_that_does_not_ring_is_not_checked() -> None:
    watch = RingdownWatch(FN_HZ, ZETA_MAX * 1.1, RATE_HZ, NOISE_M, 0.03, 0.25, 30.0)
    assert not watch.enabled and "not checked" in watch.describe()
    x = _step_response(20.0, 500, zeta=ZETA_MAX * 1.1)
    jump = np.zeros(x.size, bool)
    jump[0] = True
    assert watch.feed(np.arange(x.size), np.arange(x.size) / RATE_HZ, x, jump) == []


def test_windows_start_a_tenth_of_a_second_apart_and_sparser_while_they_agree() -> None:
    # load changes every 40 ms (200 samples), each seen by the observer: a window at
    # least 0.1 s (500 samples) after the one before, twice that for each window in a row
    # that agreed before it opened: gaps of 0.1, 0.2, 0.4 s
    x = np.concatenate([_step_response(20.0, 200) + 20.0 / K_N_PER_M * i for i in range(20)])
    starts = [200 * i for i in range(20)]
    checks = _checks(x, starts)
    assert [c.start_index for c in checks] == [1, 601, 1601, 3601]
    assert all(c.agrees for c in checks)
    # against a profile with twice the damping every window disagrees: no sparser
    off = _checks(x, starts, zeta=2 * ZETA)
    assert [c.start_index for c in off] == [1, 601, 1201, 1801, 2401, 3001, 3601]
    assert not any(c.agrees for c in off)
