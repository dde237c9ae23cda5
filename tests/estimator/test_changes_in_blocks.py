"""Tests of estimator.metrics.changes_in_blocks: the same changes and change table as the
whole-array rules of estimator.metrics, bit for bit, whatever the block size.

Sources: ``estimator.metrics.detect_changes`` / ``change_table`` on the whole arrays (the
reference kept in this project), and ``scipy.signal.find_peaks`` (SciPy 1.17) for the
peaks and their thinning by distance.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.signal

from estimator import exact_quantiles
from estimator.columns import ArrayColumn
from estimator.errors import EstimatorError
from estimator.metrics import change_table, detect_changes
from estimator.metrics.changes_in_blocks import (
    _by_distance,
    _PeakScan,
    detect_changes_in_blocks,
    iter_change_table_in_blocks,
)

FS_HZ = 2000.0


def _record(levels: list[float], hold_s: float, seed: int) -> tuple[np.ndarray, ...]:
    """Invented staircase: a lightly damped 80 Hz second-order response to each step,
    noise, quantised to 0.01 N (flat stretches, ties); and a noisier k·x stand-in."""
    rng = np.random.default_rng(seed)
    n = int(len(levels) * hold_s * FS_HZ)
    t = np.arange(n) / FS_HZ
    target = np.asarray(levels)[(t // hold_s).astype(int)]
    wn = 2.0 * math.pi * 80.0
    b, a = scipy.signal.bilinear([1.0], [1.0 / wn**2, 2.0 * 0.1 / wn, 1.0], FS_HZ)
    y = scipy.signal.lfilter(b, a, target - target[0]) + target[0]
    y = np.round(y + rng.normal(0.0, 0.05, n), 2)
    static = target + rng.normal(0.0, 0.3, n)
    return t, y, static


def _same(a: object, b: object) -> bool:
    return repr(a) == repr(b)  # dataclasses of floats: repr round-trips every bit


RECORDS = [
    ([0, 20, 50, 80, 40, 10, 10.5, 60, -5], 0.6, 3),  # 10.5 N: below the smallest step
    ([5, 5.2, 30, 0, 0.1, 100, 99, 12], 0.9, 8),
]


@pytest.mark.parametrize(("levels", "hold_s", "seed"), RECORDS)
@pytest.mark.parametrize("block", [97, 1000, 4096, 1 << 16])
def test_change_table_in_blocks_equals_the_whole_array_table(
    levels: list[float], hold_s: float, seed: int, block: int, monkeypatch: pytest.MonkeyPatch
) -> None:
    monkeypatch.setattr(exact_quantiles, "COLLECT_LIMIT", 256)
    t, y, s = _record(levels, hold_s, seed)
    whole = change_table(t, y, s, band_floor_n=0.2)
    assert len(whole) >= 4  # several load changes to compare
    cols = ArrayColumn(t), ArrayColumn(y), ArrayColumn(s)
    got = list(iter_change_table_in_blocks(*cols, band_floor_n=0.2, block=block))
    assert _same(got, whole)
    assert _same(detect_changes_in_blocks(cols[0], cols[1], block=block), detect_changes(t, y))


def test_given_noise_step_and_hold_pass_through() -> None:
    t, y, _ = _record([0, 20, 50, 80], 0.6, 1)
    kw = {"noise_n": 0.05, "min_step_n": 5.0, "min_hold_s": 0.4}
    got = detect_changes_in_blocks(ArrayColumn(t), ArrayColumn(y), block=500, **kw)
    assert _same(got, detect_changes(t, y, **kw)) and len(got) == 3


def test_peak_scan_finds_scipy_s_peaks_with_plateaus() -> None:
    rng = np.random.default_rng(11)
    for _ in range(8):
        x = rng.integers(0, 6, 1000).astype(np.float64)  # many plateaus of equal values
        x[rng.integers(0, 1000, 20)] = 9.0
        want, props = scipy.signal.find_peaks(x, height=3.0)
        for block in (1, 2, 13, 1000):
            scan = _PeakScan(3.0)
            for a in range(0, x.size, block):
                scan.feed(a, x[a : a + block])
            peaks, heights = scan.result()
            assert peaks.tolist() == want.tolist()
            assert heights.tolist() == props["peak_heights"].tolist()
        for distance in (1, 5, 40):
            kept, _ = scipy.signal.find_peaks(x, height=3.0, distance=distance)
            assert _by_distance(want, x[want], distance).tolist() == kept.tolist()


def test_bad_columns_are_refused_as_the_whole_array_rule_refuses_them() -> None:
    t, y, _ = _record([0, 20, 50], 0.6, 2)
    bad_y = y.copy()
    bad_y[700] = math.nan
    bad_t = t.copy()
    bad_t[1500] = bad_t[1499]
    for tt, yy in ((t, bad_y), (bad_t, y), (t[:1], y[:1]), (t, y[:-1])):
        with pytest.raises(EstimatorError) as whole:
            detect_changes(tt, yy)
        with pytest.raises(EstimatorError) as blocked:
            detect_changes_in_blocks(ArrayColumn(tt), ArrayColumn(yy), block=256)
        assert str(blocked.value) == str(whole.value)
    with pytest.raises(EstimatorError, match="block = 0"):
        detect_changes_in_blocks(ArrayColumn(t), ArrayColumn(y), block=0)
