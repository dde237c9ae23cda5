"""The residual bias of quantised noisy readings (estimator.quantisation) and the observer's σ
on held loads read by an ADC whose step is coarser than the noise.

References: the mean of a rounding quantiser's output integrated directly over the Gaussian
noise with `scipy.stats.norm` (reference library); the rectangular distribution of one step,
variance Δ²/12 (JCGM 100:2008, F.2.2.1).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.stats

from estimator.observer import ForceObserver
from estimator.plant import Plant
from estimator.quantisation import residual_bias_sd_m


def _bias_by_integration(step: float, sigma: float, x: np.ndarray) -> np.ndarray:
    """E[round((x + n)/step)·step] − x, n ~ N(0, σ²), summed over the steps within 12σ."""
    j = np.arange(-int(12 * sigma / step) - 2, int(12 * sigma / step) + 3)[:, None]
    upper = scipy.stats.norm.cdf(((j + 0.5) * step - x) / sigma)
    lower = scipy.stats.norm.cdf(((j - 0.5) * step - x) / sigma)
    return (j * step * (upper - lower)).sum(axis=0) - x


@pytest.mark.parametrize("ratio", [0.05, 0.15, 0.25, 1 / 3, 0.45, 0.6])
def test_the_series_is_the_rms_of_the_integrated_bias(ratio: float) -> None:
    step = 2.0e-7
    x = (np.arange(4000) + 0.5) / 4000 * step  # one step, uniformly
    rms = float(np.sqrt(np.mean(_bias_by_integration(step, ratio * step, x) ** 2)))
    assert residual_bias_sd_m(step, ratio * step) == pytest.approx(rms, rel=1e-4, abs=1e-9 * step)


def test_without_noise_it_is_one_step_rectangular_and_with_wide_noise_nothing() -> None:
    assert residual_bias_sd_m(3e-8, 0.0) == pytest.approx(3e-8 / math.sqrt(12.0), rel=1e-15)
    assert residual_bias_sd_m(3e-8, 1e-12) == pytest.approx(3e-8 / math.sqrt(12.0), rel=0.002)
    assert residual_bias_sd_m(3e-8, 3e-8) < 1e-9 * 3e-8  # the noise dithers the steps away
    assert residual_bias_sd_m(5.96e-11, 5e-8) == 0.0  # a 24-bit reading of the demo cell
    assert residual_bias_sd_m(0.0, 5e-8) == 0.0
    with pytest.raises(ValueError, match="step_m"):
        residual_bias_sd_m(-1e-9, 1e-9)
    with pytest.raises(ValueError, match="noise_m"):
        residual_bias_sd_m(1e-9, math.nan)


def test_held_loads_read_by_a_coarse_adc_are_covered() -> None:
    # An invented cell (4·10⁵ N/m, 159 Hz, ζ 0.3, 2 kHz) holding 24 loads spread over one
    # ADC step of 4σ: averaging leaves each level's bias (up to 0.08 of a step), which the
    # stated σ must hold. Measured: 0.976 with it, 0.775 with the hold model's σ alone.
    k, step, sigma, rate = 4.0e5, 3.0e-8, 0.75e-8, 2000.0
    m = k / (2 * math.pi * 159.0) ** 2
    plant = Plant(m, 2 * 0.3 * math.sqrt(k * m), k)
    rng = np.random.default_rng(11)
    n, settle = 1500, 500
    covered, floors = [], []
    for level in (np.arange(24) + 0.5) / 24:
        force = (1000.0 + level) * step * k
        z = step * np.round((force / k + rng.normal(0.0, sigma, n)) / step)
        obs = ForceObserver(plant, 1 / rate, sigma, step, force_range_n=1.2 * force)
        est = obs.process(np.arange(n) / rate, z)
        err = np.abs(est["force_n"][settle:] - force)
        covered.append(np.mean(err <= 2 * est["force_u_n"][settle:]))
        floors.append(obs.quantisation_var_n2 / np.median(est["force_u_n"][settle:] ** 2))
    assert min(floors) > 0.3  # the bias is a large part of what is stated
    assert 0.9 <= np.mean(covered) <= 0.99
