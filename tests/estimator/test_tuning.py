"""Noise from a quiet stretch, noise and intensities by innovation likelihood, and the
comparison of observers on a staircase."""

from __future__ import annotations

import math

import numpy as np
import pytest

from estimator.errors import EstimatorError
from estimator.observer import ForceObserver, ObserverTuning, process_noise_for_bandwidth
from estimator.plant import Plant
from estimator.tuning import (
    HOLD_BANDWIDTH_MIN_HZ,
    RATE_SCALE_LIMIT,
    compare_on_steps,
    fit_observer,
    noise_from_quiet,
)

# Invented cell of the demo: 0.4 kg, 4e5 N/m, ζ = 0.12, 2 kHz, 50 nm noise.
CELL = Plant.from_modal(1000.0, 0.12, 4.0e5)
DT, NOISE = 5e-4, 5e-8


def test_noise_of_a_quiet_stretch_with_drift() -> None:
    rng = np.random.default_rng(11)
    t = np.arange(4000) * DT
    x = 3e-6 + 2e-7 * t + rng.normal(0.0, NOISE, t.size)  # slow drift is removed
    est = noise_from_quiet(t, x)
    # The sample standard deviation of n normal values has a relative standard error
    # of about 1/√(2n) = 1.1 %; 4 % is more than three of those.
    assert est.noise_m == pytest.approx(NOISE, rel=0.04)
    with pytest.raises(EstimatorError, match="at least 20"):
        noise_from_quiet(t[:5], x[:5])


def _simulate(force: np.ndarray, t: np.ndarray, seed: int) -> np.ndarray:
    """The cell's displacement under ``force`` (scipy.signal.lsim, exact for a force held
    over each step: SciPy is the reference), plus 50 nm of white noise."""
    import scipy.signal

    _, x, _ = scipy.signal.lsim(CELL.state_space(), force, t, interp=False)
    return x + np.random.default_rng(seed).normal(0.0, NOISE, t.size)


def test_likelihood_fit_recovers_the_noise_and_intensity_that_made_the_data() -> None:
    # Data drawn from the hold model's own prior: the force a random walk of intensity
    # q = 4 N²/s (invented). Maximum likelihood is consistent (textbook property of the
    # prediction-error likelihood of a linear Gaussian state-space model, Harvey 1989,
    # from memory): starting 100× off, the fit lands within one refined grid step
    # (√10 ≈ 3.2) of q, and within 5 % of the noise (one refined step is √1.1 ≈ 4.9 %).
    q_true, n = 4.0, 20_000
    rng = np.random.default_rng(4)
    t = np.arange(n) * DT
    force = 20.0 + np.cumsum(rng.normal(0.0, math.sqrt(q_true * DT), n))
    z = _simulate(force, t, seed=5)
    fit = fit_observer(
        CELL, DT, 2 * NOISE, 0.0, t, z, force_range_n=130.0, q_hold_n2_per_s=100 * q_true
    )
    assert not fit.at_edge
    assert q_true / 3.3 < fit.q_hold_n2_per_s < q_true * 3.3
    assert fit.noise_m == pytest.approx(NOISE, rel=0.05)
    assert fit.log_likelihood > fit.start_log_likelihood


def test_fit_on_a_ramp_and_sine_pins_the_rate_scale_and_raises_the_likelihood() -> None:
    # A free-running invented load (ramp plus a 3 Hz sine): the rate models explain it;
    # their scale must be pinned down by the record (not at an edge of the search).
    t = np.arange(0.0, 3.0, DT)
    force = 10.0 + 20.0 * t + 15.0 * np.sin(2 * np.pi * 3.0 * t)
    z = _simulate(force, t, seed=6)
    fit = fit_observer(
        CELL, DT, NOISE, 0.0, t, z, force_range_n=130.0, q_hold_n2_per_s=1e-3, fit_noise=False
    )
    assert "rate_scale" not in fit.at_edge
    assert fit.noise_m == NOISE
    assert fit.log_likelihood >= fit.start_log_likelihood


def test_a_staircase_leaves_the_rate_scale_and_hold_intensity_at_their_limits() -> None:
    # A staircase has no smooth stretch: it says nothing of the rate models, and the
    # likelihood alone drove their scale towards 0 (5.8·10⁻¹¹ on this record; 2·10⁻⁷ on
    # the benchmark's overdamped cell, its sines then 2.8 times worse). The search stops
    # at 1/RATE_SCALE_LIMIT and says so, and `forcelens tune` keeps the profile's scale.
    # Invented overdamped cell (60 Hz, ζ 2.5, 2·10⁴ N/m) at 1 kHz with 100 nm of noise,
    # truth from scipy.signal.lsim (reference library).
    import scipy.signal

    cell = Plant.from_modal(2 * math.pi * 60.0, 2.5, 2.0e4)
    dt, noise = 1e-3, 1e-7
    t = np.arange(0.0, 3.0, dt)
    force = np.select([t < 0.5, t < 1.2, t < 2.0, t < 2.6], [5.0, 60.0, 25.0, 80.0], 40.0)
    _, x, _ = scipy.signal.lsim(cell.state_space(), force, t, X0=[5.0 / 2.0e4, 0.0])
    z = x + np.random.default_rng(3).normal(0.0, noise, t.size)
    fit = fit_observer(
        cell, dt, noise, 0.0, t, z, force_range_n=100.0, q_hold_n2_per_s=1.0, fit_noise=False
    )
    assert "rate_scale" in fit.at_edge
    assert 1.0 / RATE_SCALE_LIMIT <= fit.rate_scale < 1.0
    # its exactly constant holds drive the hold intensity down to its own limit
    q_min = process_noise_for_bandwidth(HOLD_BANDWIDTH_MIN_HZ, 2.0e4, noise**2, dt)
    assert "q_hold_n2_per_s" in fit.at_edge
    assert q_min <= fit.q_hold_n2_per_s < 1.0


def test_compare_on_steps_measures_hold_noise_and_settling() -> None:
    # An exact staircase through the cell (scipy.signal.lsim of the plant), 50 nm noise.
    t = np.arange(0.0, 5.0, DT)
    levels = [(1.0, 20.0), (2.0, 60.0), (3.0, 100.0), (4.0, 30.0)]
    f = np.zeros_like(t)
    for t0, level in levels:
        f[t >= t0] = level
    z = _simulate(f, t, seed=2)

    def obs(b: float) -> ForceObserver:
        return ForceObserver(CELL, DT, NOISE, 0.0, ObserverTuning(force_bandwidth_hz=b), 130.0)

    quiet, noisy = compare_on_steps([("2 Hz", obs(2.0)), ("200 Hz", obs(200.0))], t, z, f, levels)
    # A hold model of lower bandwidth averages longer: quieter on the holds (the steady
    # noise of a random-walk filter grows with its bandwidth, common practice), while
    # the jump model keeps both quick at the steps (2 % band within 5 ms).
    assert quiet.hold_noise_n < noisy.hold_noise_n
    assert max(quiet.settling_s) < 5e-3 and max(noisy.settling_s) < 5e-3
