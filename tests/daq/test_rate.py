"""RateMeter: measured rate and drift from synthetic blocks of known rate."""

from __future__ import annotations

import math

import numpy as np
import pytest

from daq.errors import FramingError
from daq.rate import RateMeter
from daq.samples import empty_block

NOMINAL_HZ = 10_000.0
TRUE_HZ = 10_001.0  # the device runs fast by exactly (10001/10000 − 1)·10⁶ = +100 ppm
LATENCY_S = 0.002


def blocks(
    seconds: float,
    *,
    true_hz: float = TRUE_HZ,
    per_read: int = 100,
    jitter_s: float = 0.0,
    seq0: int = 0,
    seed: int = 0,
) -> list[np.ndarray]:
    """Reads of `per_read` samples; each read's host time is when its last sample was
    converted (device clock at `true_hz`) plus a latency (constant + seeded uniform jitter)."""
    rng = np.random.default_rng(seed)
    n = int(seconds * true_hz)
    out = []
    for start in range(0, n - per_read + 1, per_read):
        b = empty_block(per_read)
        b["seq"] = seq0 + np.arange(start, start + per_read)
        last = seq0 + start + per_read - 1
        b["host_time_s"] = last / true_hz + LATENCY_S + rng.uniform(0.0, jitter_s)
        out.append(b)
    return out


def expected_ppm(true_hz: float = TRUE_HZ) -> float:
    # Definition of drift: relative rate error in parts per million.
    return (true_hz / NOMINAL_HZ - 1.0) * 1e6


def test_exact_host_times_give_the_drift_exactly() -> None:
    meter = RateMeter(NOMINAL_HZ, window_s=10.0)
    for b in blocks(20.0):
        meter.update(b)
    assert meter.span_s >= 10.0 - 1e-9  # the window is full
    # Exact arrival times: only float rounding of ~1e5 samples / 10 s remains
    # (relative ~1e-15, i.e. ~1e-9 ppm); 1e-6 ppm is a safe margin.
    assert meter.rate_hz == pytest.approx(TRUE_HZ, rel=1e-12)
    assert meter.drift_ppm == pytest.approx(expected_ppm(), abs=1e-6)
    assert expected_ppm() == pytest.approx(100.0, rel=1e-9)


def test_latency_jitter_error_stays_within_its_bound() -> None:
    jitter_s = 0.0005
    meter = RateMeter(NOMINAL_HZ, window_s=10.0)
    for b in blocks(20.0, jitter_s=jitter_s, seed=4):
        meter.update(b)
    # Endpoint estimate: the two host times each carry at most `jitter_s` of extra
    # latency, so the rate error is at most jitter_s / span, i.e. 50 ppm over 10 s.
    bound_ppm = jitter_s / meter.span_s * 1e6 * (TRUE_HZ / NOMINAL_HZ)
    assert abs(meter.drift_ppm - expected_ppm()) <= bound_ppm
    # And the jittered estimate is not simply the exact one.
    assert meter.drift_ppm != pytest.approx(expected_ppm(), abs=1e-3)


def test_one_host_time_for_many_samples_and_lost_reads_do_not_bias() -> None:
    # Big reads (2000 samples with one host time) and a third of them lost on the way:
    # the sequence span still counts every sample the device made.
    rng = np.random.default_rng(2)
    kept = [b for b in blocks(30.0, per_read=2000) if rng.random() > 1 / 3]
    meter = RateMeter(NOMINAL_HZ, window_s=10.0)
    for b in kept:
        meter.update(b)
    # Same float-rounding margin as the exact case.
    assert meter.drift_ppm == pytest.approx(expected_ppm(), abs=1e-6)


def test_joined_blocks_give_the_same_points_as_separate_ones() -> None:
    parts = blocks(12.0, per_read=37, jitter_s=0.001, seed=5)
    one, many = RateMeter(NOMINAL_HZ), RateMeter(NOMINAL_HZ)
    for b in parts:
        one.update(b)
    for i in range(0, len(parts), 25):  # what drain() hands over: several reads joined
        many.update(np.concatenate(parts[i : i + 25]))
    assert one.rate_hz is not None
    assert many.rate_hz == one.rate_hz


def test_none_until_enough_span_then_window_slides() -> None:
    meter = RateMeter(NOMINAL_HZ, window_s=4.0)  # needs 2 s of span by default
    assert meter.min_span_s == 2.0
    data = blocks(12.0)
    t = [float(b["host_time_s"][0]) for b in data]
    first = t[0]
    for b, tb in zip(data, t, strict=True):
        meter.update(b)
        if tb - first < 2.0 - 1e-9:
            assert meter.rate_hz is None and meter.drift_ppm is None
    assert meter.rate_hz == pytest.approx(TRUE_HZ, rel=1e-12)
    # The window keeps at most window_s plus one read of history.
    assert 4.0 <= meter.span_s < 4.0 + 100 / TRUE_HZ + 1e-9


def test_restart_nan_and_measure_only() -> None:
    meter = RateMeter(NOMINAL_HZ, window_s=2.0)
    for b in blocks(3.0):
        meter.update(b)
    assert meter.rate_hz is not None
    for b in blocks(0.5, seq0=0):  # the device restarted: seq back to 0
        meter.update(b)
    assert meter.restarts == 1 and meter.rate_hz is None
    nan_block = empty_block(10)
    nan_block["seq"] = np.arange(10**6, 10**6 + 10)
    nan_block["host_time_s"] = math.nan
    before = meter.span_s
    meter.update(nan_block)  # no host time: ignored
    meter.update(empty_block())
    assert meter.span_s == before and meter.restarts == 1
    plain = RateMeter(None, window_s=2.0)
    for b in blocks(3.0, true_hz=2000.0):
        plain.update(b)
    assert plain.rate_hz == pytest.approx(2000.0, rel=1e-12) and plain.drift_ppm is None


@pytest.mark.parametrize(
    ("kwargs", "field"),
    [
        ({"nominal_rate_hz": 0.0}, "nominal_rate_hz"),
        ({"nominal_rate_hz": math.inf}, "nominal_rate_hz"),
        ({"nominal_rate_hz": 1000.0, "window_s": -1.0}, "window_s"),
        ({"nominal_rate_hz": 1000.0, "window_s": 2.0, "min_span_s": 3.0}, "min_span_s"),
        ({"nominal_rate_hz": True}, "nominal_rate_hz"),
    ],
)
def test_validation_names_the_field(kwargs: dict, field: str) -> None:
    with pytest.raises(FramingError, match=field):
        RateMeter(**kwargs)
