"""The sliding hold-window statistics against a direct reduction of every window (NumPy's
sum, max and min over the window's slice), on random streams cut into random blocks."""

from __future__ import annotations

import itertools

import numpy as np
import pytest

from estimator.window_stats import WindowState, window_stats


def _direct(f: np.ndarray, anchor: np.ndarray, h: int) -> tuple[np.ndarray, ...]:
    n = f.size
    total, high, low = np.zeros(n), np.full(n, -np.inf), np.full(n, np.inf)
    for p in range(n):
        w = f[max(anchor[p], p - h) : p + 1]
        if w.size:
            total[p], high[p], low[p] = w.sum(), w.max(), w.min()
    return total, high, low


@pytest.mark.parametrize(("h", "seed"), [(0, 1), (1, 2), (7, 3), (200, 4)])
def test_sliding_window_equals_the_direct_reduction(h: int, seed: int) -> None:
    rng = np.random.default_rng(seed)
    n = 3000
    # a slow exponential approach (values rising for long stretches: a queue holding the
    # whole window), noise, and restarts of the window, some beyond the sample itself
    f = 10.0 * (1.0 - np.exp(-np.arange(n) / 500.0)) + rng.normal(0.0, 0.01, n)
    f[1500:1800] = 5.0  # ties
    pos = np.arange(n, dtype=np.int64)
    restart = np.where(rng.random(n) < 0.01, pos + rng.integers(0, 2, n), -1)
    anchor = np.maximum.accumulate(np.maximum(restart, 0))
    want = _direct(f, anchor, h)
    cuts = np.unique(np.concatenate([[0, n], rng.integers(1, n, 40)]))
    state = WindowState(h)
    got = [np.empty(n) for _ in range(3)]
    for a, b in itertools.pairwise(cuts):
        window_stats(state, f[a:b], pos[a:b], anchor[a:b], *(g[a:b] for g in got))
    np.testing.assert_allclose(got[0], want[0], rtol=1e-12, atol=1e-11)  # running sum
    np.testing.assert_array_equal(got[1], want[1])  # extremes are exact
    np.testing.assert_array_equal(got[2], want[2])
