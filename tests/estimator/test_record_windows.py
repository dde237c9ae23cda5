"""The windows `identify` finds in whole records (estimator.record_windows).

Truth from `scipy.signal.step` (reference library) of the textbook plant
``m·x'' + c·x' + k·x = F`` (invented cells; seeded noise).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.signal

from estimator.errors import EstimatorError
from estimator.identify import identify_ringdown, identify_step
from estimator.record_windows import (
    WindowNotFoundError,
    find_ringdown_window,
    find_step_window,
)

K = 2.0e4  # N/m, invented


def _record(fn_hz: float, zeta: float, rate_hz: float, levels: list[tuple[float, float]]):
    """Time (s) and displacement (m) of a cell under held loads ``(duration s, force N)``
    changed by ideal steps (superposed step responses of `scipy.signal.step`, exact at
    every sample), with 0.1 µm of noise (seed 3)."""
    wn = 2.0 * math.pi * fn_hz
    m = K / wn**2
    c = 2.0 * zeta * math.sqrt(K * m)
    system = scipy.signal.lti([1.0], [m, c, K])
    n = round(sum(d for d, _ in levels) * rate_hz)
    t = np.arange(n) / rate_hz
    x = np.zeros(n)
    start, before = 0.0, 0.0
    for duration, f in levels:
        after = t >= start
        if f != before and after.any():
            x[after] += (f - before) * scipy.signal.step(system, T=t[after] - start)[1]
        start, before = start + duration, f
    return t, x + np.random.default_rng(3).normal(0.0, 1e-7, n)


@pytest.mark.parametrize(("fn_hz", "zeta"), [(60.0, 2.5), (150.0, 0.04), (400.0, 0.65)])
def test_the_step_is_the_loading_and_the_fit_recovers_the_plant(fn_hz: float, zeta: float):
    # rest, a 20 N load at 0.4 s, held, taken off at 1.4 s, rest: the loading is found and
    # the step fit on its window gives fn within 1 % and ζ within 3 % of the truth.
    t, x = _record(fn_hz, zeta, 2000.0, [(0.4, 0.0), (1.0, 20.0), (1.0, 0.0)])
    window = find_step_window(t, x)
    assert window.start_s < 0.4 < window.moves_s + 0.01
    assert window.settled_s < window.end_s < 1.4
    assert window.after_m - window.before_m == pytest.approx(20.0 / K, rel=0.01)
    assert window.candidates == 2  # the loading and the unloading
    keep = (t >= window.start_s) & (t <= window.end_s)
    fit = identify_step(t[keep], x[keep])
    assert fit.natural_freq_rad_s.value / (2 * math.pi) == pytest.approx(fn_hz, rel=0.01)
    assert fit.damping_ratio.value == pytest.approx(zeta, rel=0.03)


def test_the_ringdown_is_the_release():
    # the lightly damped cell released after a load: the free decay after 1.4 s.
    t, x = _record(150.0, 0.04, 2000.0, [(0.4, 0.0), (1.0, 20.0), (1.0, 0.0)])
    window = find_ringdown_window(t, x)
    assert 1.35 < window.start_s < 1.4 < window.decay_end_s < window.end_s
    keep = (t >= window.start_s) & (t <= window.end_s)
    fit = identify_ringdown(t[keep], x[keep])
    assert fit.natural_freq_rad_s.value / (2 * math.pi) == pytest.approx(150.0, rel=0.01)
    assert fit.damping_ratio.value == pytest.approx(0.04, rel=0.05)


def test_a_record_with_no_step_is_refused_with_the_reason():
    t, x = _record(150.0, 0.04, 2000.0, [(1.0, 0.0)])
    with pytest.raises(WindowNotFoundError, match="nothing moves"):
        find_step_window(t, x)
    with pytest.raises(WindowNotFoundError, match="only 50 samples"):
        find_step_window(t[:50], x[:50])


def test_a_release_too_quick_to_fit_is_refused_with_the_reason():
    # An invented critically damped 3 kHz cell read at 2 kHz: its release is over within a
    # sample, and the window round it (17 samples) is too short for identify_ringdown (20
    # or more). The finder used to return it, and identify then said "the record has 17
    # samples" of a record of 4800; now the finder refuses and says why.
    t, x = _record(3000.0, 1.0, 2000.0, [(0.4, 0.0), (1.0, 20.0), (1.0, 0.0)])
    with pytest.raises(WindowNotFoundError, match="holds 17 samples and a fit needs 20"):
        find_ringdown_window(t, x)


def test_a_fit_beyond_the_nyquist_frequency_is_refused():
    # An invented critically damped 1000 Hz cell read at 2 kHz, released: its decay is over
    # within a couple of samples. The two-exponential fit gave fn = 2166 Hz with a 95 %
    # interval of ±3 % (truth 1000 Hz), above the record's Nyquist frequency (half the
    # sample rate: sampling theorem), where samples cannot tell one frequency from another.
    t, x = _record(1000.0, 1.0, 2000.0, [(0.4, 0.0), (1.0, 20.0), (1.0, 0.0)])
    window = find_ringdown_window(t, x)
    keep = (t >= window.start_s) & (t <= window.end_s)
    with pytest.raises(EstimatorError, match="above the record's Nyquist frequency"):
        identify_ringdown(t[keep], x[keep])
