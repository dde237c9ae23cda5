"""Tests of estimator.exact_quantiles against NumPy's own median and percentile.

Source: ``numpy.median`` and ``numpy.percentile`` (method "linear", NumPy 2.x) on the
whole array are the reference; the block-wise results must equal them bit for bit.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from estimator import exact_quantiles
from estimator.errors import EstimatorError

Q = [0.0, 1.0, 25.0, 50.0, 99.0, 100.0]


def _cut(values: np.ndarray, block: int) -> exact_quantiles.Blocks:
    return lambda: (values[i : i + block] for i in range(0, values.size, block))


def _cases() -> list[np.ndarray]:
    rng = np.random.default_rng(20261205)
    cases = []
    for n in (1, 2, 3, 10, 997, 4096, 20_001):
        cases.append(rng.normal(3.0, 2.0, n))
        cases.append(rng.integers(-3, 4, n).astype(np.float64) + 0.0)  # many ties
        cases.append(np.abs(rng.normal(size=n)) * 1e-300)  # tiny, one exponent range
        cases.append(1.0 + np.round(rng.normal(size=n), 3) * 1e-12)  # equal leading bits
    return cases


@pytest.mark.parametrize("block", [1, 7, 1000, 1 << 16])
def test_median_and_percentiles_equal_numpy_bit_for_bit(
    block: int, monkeypatch: pytest.MonkeyPatch
) -> None:
    monkeypatch.setattr(exact_quantiles, "COLLECT_LIMIT", 64)  # several narrowing passes
    for values in _cases():
        if values.size > 100 * block:
            continue  # tiny blocks on the short cases only: the test stays fast
        got = exact_quantiles.median(_cut(values, block))
        assert np.float64(got).tobytes() == np.median(values).tobytes()
        got_q = np.array(exact_quantiles.percentiles(_cut(values, block), Q))
        assert got_q.tobytes() == np.percentile(values, Q).tobytes()


def test_order_statistics_are_the_sorted_values() -> None:
    values = np.random.default_rng(4).normal(size=5000)
    ranks = [0, 1, 2499, 2500, 4999]
    n, nans, got = exact_quantiles.order_statistics(_cut(values, 333), ranks)
    assert (n, nans) == (5000, 0)
    assert got == np.sort(values)[ranks].tolist()


def test_a_nan_makes_the_median_nan_as_numpy() -> None:
    values = np.array([1.0, math.nan, 3.0])
    assert math.isnan(exact_quantiles.median(_cut(values, 2)))
    assert math.isnan(float(np.median(values)))


def test_no_values_and_bad_percentiles_are_refused() -> None:
    with pytest.raises(EstimatorError, match="empty"):
        exact_quantiles.median(lambda: iter([np.zeros(0)]))
    with pytest.raises(EstimatorError, match=r"\[0, 100\]"):
        exact_quantiles.percentiles(_cut(np.arange(5.0), 2), [101.0])
    with pytest.raises(EstimatorError, match="NaN"):
        exact_quantiles.percentiles(_cut(np.array([1.0, math.nan]), 1), [50.0])
