"""Exact medians and percentiles of values that arrive in blocks, in bounded memory.

The values are read again on each pass (``blocks`` is a function returning a fresh
iterable of float64 arrays). Each pass narrows every wanted order statistic to the values
sharing more leading bits of an order-preserving 64-bit key; once few enough values
remain (`COLLECT_LIMIT`) they are gathered and partitioned. The results are the very
numbers NumPy gives on the whole array: `median` equals ``numpy.median`` and
`percentiles` ``numpy.percentile`` (method "linear"), bit for bit; the interpolation
repeats NumPy 2's formula (``numpy/lib/_function_base_impl.py``: the "linear" entry of
``_QuantileMethods``, ``_get_indexes``, ``_lerp``), and tests compare both on many sizes.
One exception: where −0.0 and +0.0 tie at the wanted rank, which of the two NumPy's
partition returns is not repeated (the values compare equal).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Iterable, Sequence

import numpy as np

from estimator.errors import EstimatorError

__all__ = ["COLLECT_LIMIT", "Blocks", "median", "order_statistics", "percentiles"]

#: A function returning the values again, as float64 blocks, each time it is called.
Blocks = Callable[[], Iterable[np.ndarray]]
#: At most this many values are gathered at once (2 MB of keys).
COLLECT_LIMIT = 1 << 18
_DIGIT = 16  # key bits resolved per pass
_SIGN = np.uint64(1 << 63)


def _keys(values: np.ndarray) -> np.ndarray:
    """Order-preserving unsigned keys of float64 values (not NaN)."""
    bits = np.ascontiguousarray(values, dtype=np.float64).view(np.uint64)
    return np.where(bits & _SIGN, ~bits, bits | _SIGN)


def _value(key: int) -> float:
    key = np.uint64(key)
    bits = key & ~_SIGN if key & _SIGN else ~key
    return float(np.array([bits], dtype=np.uint64).view(np.float64)[0])


def order_statistics(blocks: Blocks, ranks: Sequence[int]) -> tuple[int, int, list[float]]:
    """``(count, NaN count, [k-th smallest value for k in ranks])``, ranks from 0.

    NaN values are counted and left out of the ranking; ``ranks`` must lie in
    ``[0, count − NaN count)``.
    """
    n = nans = 0
    hist = np.zeros(1 << _DIGIT, dtype=np.int64)
    for block in blocks():
        block = np.asarray(block, dtype=np.float64)
        bad = np.isnan(block)
        n += block.size
        if bad.any():
            nans += int(np.count_nonzero(bad))
            block = block[~bad]
        hist += np.bincount((_keys(block) >> np.uint64(64 - _DIGIT)).astype(np.intp),
                            minlength=1 << _DIGIT)  # fmt: skip
    valid = n - nans
    for r in ranks:
        if not 0 <= r < valid:
            raise EstimatorError(f"rank {r} is outside [0, {valid}): {valid} values to rank")
    # each wanted rank: (key prefix, bits used, rank within the prefix's values, count)
    wanted = {r: _narrow(hist, 0, 0, r) for r in ranks}
    found: dict[int, float] = {}
    while len(found) < len(wanted):
        groups = {(p, used, c) for r, (p, used, _, c) in wanted.items() if r not in found}
        parts: dict[tuple[int, int], list[np.ndarray]] = {(p, u): [] for p, u, _ in groups}
        hists = {
            (p, u): np.zeros(1 << _DIGIT, np.int64) for p, u, c in groups if c > COLLECT_LIMIT
        }
        for block in blocks():
            block = np.asarray(block, dtype=np.float64)
            keys = _keys(block[~np.isnan(block)])
            for p, used, _ in groups:
                mine = keys[(keys >> np.uint64(64 - used)) == np.uint64(p)]
                if (p, used) in hists:
                    digit = (mine >> np.uint64(64 - used - _DIGIT)) & np.uint64((1 << _DIGIT) - 1)
                    hists[p, used] += np.bincount(digit.astype(np.intp), minlength=1 << _DIGIT)
                else:
                    parts[p, used].append(mine)
        for r, (p, used, within, _) in list(wanted.items()):
            if r in found:
                continue
            if (p, used) in hists:
                wanted[r] = _narrow(hists[p, used], p, used, within)
                if wanted[r][1] == 64:  # every key of the group is the same
                    found[r] = _value(wanted[r][0])
            else:
                keys = np.concatenate(parts[p, used])
                found[r] = _value(int(np.partition(keys, within)[within]))
    return n, nans, [found[r] for r in ranks]


def _narrow(hist: np.ndarray, prefix: int, used: int, rank: int) -> tuple[int, int, int, int]:
    """The next digit holding the ``rank``-th value: (prefix, bits used, rank, count)."""
    cum = np.cumsum(hist)
    digit = int(np.searchsorted(cum, rank, side="right"))
    before = int(cum[digit - 1]) if digit else 0
    return (prefix << _DIGIT) | digit, used + _DIGIT, rank - before, int(hist[digit])


def _count(blocks: Blocks) -> tuple[int, int]:
    n = nans = 0
    for block in blocks():
        n += np.asarray(block).size
        nans += int(np.count_nonzero(np.isnan(block)))
    return n, nans


def median(blocks: Blocks) -> float:
    """``numpy.median`` of the concatenated blocks (NaN if any value is NaN).

    Raises:
        EstimatorError: there are no values.
    """
    n, nans = _count(blocks)
    if n == 0:
        raise EstimatorError("no values: the median of an empty set is undefined")
    if nans:
        return math.nan
    ranks = [n // 2] if n % 2 else [n // 2 - 1, n // 2]
    values = order_statistics(blocks, ranks)[2]
    return float(np.median(np.array(values)))  # the mean of the middle two as NumPy forms it


def percentiles(blocks: Blocks, q: Sequence[float]) -> list[float]:
    """``numpy.percentile(values, q)`` (method "linear") of the concatenated blocks.

    Raises:
        EstimatorError: no values, a NaN among them, or a percentile outside [0, 100].
    """
    n, nans = _count(blocks)
    if n == 0 or nans:
        raise EstimatorError(f"{n} values, {nans} NaN: give at least one value and no NaN")
    qs = np.true_divide(np.asarray(q, dtype=np.float64), 100)
    if not np.all((qs >= 0.0) & (qs <= 1.0)):
        raise EstimatorError(f"percentiles {list(q)!r}: each must be in [0, 100]")
    virtual = (n - 1) * qs
    previous = np.floor(virtual)
    following = previous + 1
    above = virtual >= n - 1
    previous[above], following[above] = n - 1, n - 1
    below = virtual < 0
    previous[below], following[below] = 0, 0
    prev_i, next_i = previous.astype(np.intp), following.astype(np.intp)
    ranks = sorted({int(i) for i in (*prev_i, *next_i)})
    got = dict(zip(ranks, order_statistics(blocks, ranks)[2], strict=True))
    a = np.array([got[int(i)] for i in prev_i])
    b = np.array([got[int(i)] for i in next_i])
    gamma = np.asarray(virtual - np.floor(virtual))
    diff = b - a
    out = np.add(a, diff * gamma)
    np.subtract(b, diff * (1 - gamma), out=out, where=gamma >= 0.5)
    return [float(v) for v in out]
