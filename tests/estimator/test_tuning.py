"""Noise from a quiet stretch, bandwidth by innovation likelihood, and the gain of
re-acquisition on a staircase."""

from __future__ import annotations

import math

import numpy as np
import pytest

from estimator.errors import EstimatorError
from estimator.observer import ForceObserver, ObserverTuning
from estimator.plant import Plant
from estimator.tuning import (
    compare_on_steps,
    innovation_log_likelihood,
    noise_from_quiet,
    tune_bandwidth,
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


@pytest.mark.xfail(
    strict=False,
    reason="regression of the multiple-model observer (issue 11, open): tune still scans only the hold model's bandwidth",  # noqa: E501
)
def test_likelihood_peaks_near_the_bandwidth_that_made_the_data() -> None:
    # Data drawn from the observer's own model (force a random walk of the intensity a
    # 5 Hz tuning implies): the maximum-likelihood bandwidth must be close to 5 Hz
    # (the prediction-error likelihood of a linear Gaussian state-space model).
    truth = ForceObserver(CELL, DT, NOISE, 0.0, ObserverTuning(force_bandwidth_hz=5.0), 130.0)
    phi, Q = truth._nominal.phi, truth._nominal.Q
    rng = np.random.default_rng(4)
    n = 12_000
    w = rng.multivariate_normal(np.zeros(3), Q, size=n, method="eigh")
    s = np.array([10.0 / 4e5, 0.0, 10.0])
    z = np.empty(n)
    for i in range(n):
        s = phi @ s + w[i]
        z[i] = s[0] + rng.normal(0.0, NOISE)
    t = np.arange(n) * DT
    grid = np.geomspace(1.0, 25.0, 11)
    result = tune_bandwidth(CELL, DT, NOISE, 0.0, t, z, bandwidths_hz=grid, force_range_n=130.0)
    assert not result.at_edge
    assert 5.0 / 1.6 < result.best_hz < 5.0 * 1.6  # within a grid step or so
    assert result.measured_bandwidth_hz == pytest.approx(result.best_hz, rel=0.1)
    ll, used = innovation_log_likelihood(truth.process(t, z))
    assert used > n - 10 and math.isfinite(ll)


@pytest.mark.xfail(
    strict=False,
    reason="regression of the multiple-model observer (issue 11, open): re-acquisition no longer exists; the comparison must be rewritten for the jump model",  # noqa: E501
)
def test_reacquisition_is_quiet_between_steps_and_quick_at_them() -> None:
    # An exact staircase through the cell (scipy.signal.lsim of the plant), 50 nm noise.
    import scipy.signal

    rng = np.random.default_rng(2)
    t = np.arange(0.0, 5.0, DT)
    levels = [(1.0, 20.0), (2.0, 60.0), (3.0, 100.0), (4.0, 30.0)]
    f = np.zeros_like(t)
    for t0, level in levels:
        f[t >= t0] = level
    _, x, _ = scipy.signal.lsim(CELL.state_space(), f, t)
    z = x + rng.normal(0.0, NOISE, t.size)

    def obs(b: float, reacquire: bool) -> ForceObserver:
        tuning = ObserverTuning(
            force_bandwidth_hz=b,
            gate_sigma=5.0 if reacquire else 1e9,
            reacquire_after=3 if reacquire else 10**9,
        )
        return ForceObserver(CELL, DT, NOISE, 0.0, tuning, 130.0)

    quiet, _, fast = compare_on_steps(
        [("quiet, re-acquires", obs(2.0, True)), ("quiet only", obs(2.0, False)),
         ("fast only", obs(40.0, False))],
        t, z, f, levels,
    )  # fmt: skip
    # Both at once: quieter than the fast tuning and quicker to settle (2 % band).
    assert quiet.hold_noise_n < 0.5 * fast.hold_noise_n
    assert quiet.median_settling_s < 0.5 * fast.median_settling_s
