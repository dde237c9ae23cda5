"""The smoothed force's σ: noise part by simulation, bias by plug-in
(`estimator.smoother_sigma`), checked on a centred moving average, a linear smoother whose
answers are known in closed form."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.ndimage import uniform_filter1d

from estimator.smoother_sigma import smoother_variance

W = 21  # samples in the moving average


def _moving_average(record: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    # a "cell" whose force is its displacement: the smoothed state is one array
    smoothed = uniform_filter1d(record, size=W, mode="nearest")
    return smoothed, smoothed


def test_noise_part_of_a_moving_average_is_sigma_squared_over_its_width() -> None:
    # The mean of W independent values of variance s² has variance s²/W (textbook).
    # Each windowed value rests on about 8·101/21 ≈ 40 independent squares (22 % standard
    # error), the median over the interior on about 8·2600/21 ≈ 1000 (5 %): band 15 %.
    s = 2e-3
    n = 3000
    flat = np.zeros(n)
    var = smoother_variance(_moving_average, flat, flat, flat, s)
    interior = var[200:-200]
    assert np.median(interior) == pytest.approx(s * s / W, rel=0.15)


def test_plug_in_bias_of_a_moving_average_on_a_parabola_is_exact() -> None:
    # A centred average of W samples of a·t² is a·t² + a·dt²·(W² − 1)/12 (the variance of
    # a discrete uniform offset; textbook). Its estimate smooths the smoothed parabola
    # once more, which adds the same constant again: b̂ = a·dt²·(W² − 1)/12 exactly.
    dt, a = 1e-3, 50.0
    t = np.arange(2000) * dt
    h = a * t * t
    fhat = _moving_average(h)[1]  # the "smoothed force" of a noise-free record
    var = smoother_variance(_moving_average, h, fhat, fhat, 1e-12, replicas=1)
    expected = a * dt * dt * (W * W - 1) / 12.0
    interior = slice(100, -100)
    np.testing.assert_allclose(np.sqrt(var[interior]), expected, rtol=1e-6)


def test_samples_left_out_stay_out() -> None:
    # NaN marks a sample the smoother left out: no simulated noise goes there either.
    seen = []

    def smooth(record: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        seen.append(np.isnan(record).copy())
        return np.nan_to_num(record), np.nan_to_num(record)

    z = np.zeros(50)
    z[[3, 17]] = np.nan
    smoother_variance(smooth, z, np.zeros(50), np.zeros(50), 1.0, replicas=2)
    assert all(np.array_equal(m, np.isnan(z)) for m in seen)


def test_the_plug_in_bias_loses_the_variance_of_its_own_noise() -> None:
    # b̂ = G·x̂ − F̂ is linear in the data: on a moving average b̂ = (G² − G)·z, and its noise
    # part has variance s²·Σd², d the coefficients of G² − G (white noise through a linear
    # filter; textbook). That share is taken off b̂². Here the parabola of the test above
    # gives b̂ = c exactly, so the stated variance is V + c² − Var(b̂ noise); the same seed
    # gives the same V on a flat record, which leaves the subtracted share to compare.
    s, dt, a, n = 2e-3, 1e-3, 50.0, 3000
    t = np.arange(n) * dt
    h = a * t * t
    fhat = _moving_average(h)[1]
    c = a * dt * dt * (W * W - 1) / 12.0
    coefficients = np.convolve(np.ones(W) / W, np.ones(W) / W)
    coefficients[(W - 1) // 2 : (W - 1) // 2 + W] -= 1.0 / W
    expected = s * s * np.sum(coefficients**2)
    assert c * c > 3 * expected  # the positive part is not reached
    with_bias = smoother_variance(_moving_average, h, fhat, fhat, s)
    flat = np.zeros(n)
    noise_part = smoother_variance(_moving_average, flat, flat, flat, s)
    subtracted = noise_part + c * c - with_bias
    # ≈ 1000 independent squares behind the median over the interior (as above): band 15 %
    assert np.median(subtracted[200:-200]) == pytest.approx(expected, rel=0.15)
