"""Load changes and their change table read a block at a time from columns, so that a
record of any length is measured in bounded memory (issue 12, big records).

`detect_changes_in_blocks` and `iter_change_table_in_blocks` give the very rows that
``estimator.metrics.detect_changes`` and ``change_table`` give on the whole arrays, bit for
bit (tests compare them on records cut into blocks of several sizes), because each step
of the rule is either local or exact:

* the running medians are local: each block is filtered with the samples within half a
  window on either side (``scipy.ndimage.median_filter``, mode "nearest" at the record's
  ends only);
* the medians and percentiles over the whole record (the sample interval, the noise σ,
  the 1–99 % range) are exact order statistics found in a few passes
  (``estimator.exact_quantiles``);
* the peaks of the level difference are the local maxima of ``scipy.signal.find_peaks``
  (a plateau of equal values counts once, at its middle), found by a scan that carries the
  open plateau from block to block, then thinned by distance with SciPy's rule (highest
  first; ``scipy/signal/_peak_finding_utils.pyx``, ``_select_by_peak_distance``).

Memory holds a few blocks, the peaks, and one change's window at a time: it grows with
the longest hold between two changes, not with the record.
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Iterator, Sequence

import numpy as np
import scipy.ndimage

from estimator import exact_quantiles
from estimator.columns import BLOCK, Column, blocks
from estimator.errors import EstimatorError, ParameterError
from estimator.metrics.changes import (
    _MAD_TO_SIGMA,
    _START_FRACTION,
    _START_SIGMAS,
    _STEP_IN_SIGMAS,
    _STEP_RANGE_FRACTION,
    Change,
    ChangeRow,
    _drop_small,
    _start_index,
    _tail_start,
)
from estimator.metrics.step import step_metrics

__all__ = ["detect_changes_in_blocks", "iter_change_table_in_blocks"]


def _check(t: Column, y: Column, value_name: str, block: int) -> None:
    """The checks (and messages) of ``estimator.metrics.step._trace``, block by block."""
    if not (isinstance(block, int) and block >= 1):
        raise ParameterError(
            f"block = {block!r}; give the values read at a time, a whole number >= 1"
        )
    if t.size != y.size:
        raise EstimatorError(
            f"time_s has shape ({t.size},) and {value_name} ({y.size},); "
            "give two 1-D arrays of the same length"
        )
    if t.size < 2:
        raise EstimatorError(f"time_s has {t.size} sample(s); give at least 2")
    for name, column in (("time_s", t), (value_name, y)):
        bad = sum(int(np.count_nonzero(~np.isfinite(b))) for _, b in blocks(column, block=block))
        if bad:
            raise EstimatorError(
                f"{name} contains {bad} non-finite value(s); remove or fill them first"
            )
    for first, d in _diffs(t, block):
        if not np.all(d > 0.0):
            i = first + int(np.argmax(~(d > 0.0)))
            a, b = t.read(i, i + 2)
            raise EstimatorError(
                f"time_s is not strictly increasing at index {i + 1} "
                f"({a!r} then {b!r}); sort the samples and drop duplicates"
            )


def _diffs(t: Column, block: int) -> Iterator[tuple[int, np.ndarray]]:
    """``(i, numpy.diff(t)[i : i + len])`` block by block."""
    for a in range(0, t.size - 1, block):
        yield a, np.diff(t.read(a, min(a + block, t.size - 1) + 1))


def _filtered(y: Column, size: int, a: int, b: int) -> np.ndarray:
    """``median_filter(y, size, mode="nearest")[a:b]`` from the samples it depends on."""
    r = size // 2
    lo, hi = max(a - r, 0), min(b + r, y.size)
    return scipy.ndimage.median_filter(y.read(lo, hi), size=size, mode="nearest")[a - lo : b - lo]


def _strength(y: Column, width: int, a: int, b: int) -> np.ndarray:
    """The detector's level difference ``|after − before|`` at samples ``[a, b)``."""
    n, r = y.size, width // 2
    lo, hi = max(a - 1 - r, 0), min(b + r, n)
    run = _filtered(y, width, lo, hi)
    i = np.arange(a, b)
    after = run[np.clip(i + r, 0, n - 1) - lo]
    before = run[np.clip(i - 1 - r, 0, n - 1) - lo]
    strength = np.abs(after - before)
    strength[(i < width) | (i >= n - width)] = 0.0
    return strength


class _PeakScan:
    """Local maxima at or above ``height`` as ``scipy.signal.find_peaks`` finds them
    (plateaus of equal values with a lower sample on either side, at their middle; never
    the first or last sample), fed the signal block by block in order."""

    def __init__(self, height: float) -> None:
        self.height = height
        self.start = -1  # the open plateau: its first index, value and the value before it
        self.value = math.nan
        self.left = math.inf
        self.peaks: list[np.ndarray] = []
        self.heights: list[np.ndarray] = []

    def feed(self, a: int, x: np.ndarray) -> None:
        if x.size == 0:
            return
        cuts = np.flatnonzero(x[1:] != x[:-1]) + 1
        starts = cuts if x[0] == self.value else np.concatenate(([0], cuts))
        first = np.concatenate(([self.start], a + starts))
        values = np.concatenate(([self.value], x[starts]))
        lefts = np.concatenate(([self.left], values[:-1]))
        v = values[:-1]  # the plateaus closed in this block (the first may be the open one)
        peak = (lefts[:-1] < v) & (values[1:] < v) & (v >= self.height)
        mid = (first[:-1] + first[1:] - 1) // 2
        self.peaks.append(mid[peak])
        self.heights.append(v[peak])
        self.start, self.value, self.left = int(first[-1]), float(values[-1]), float(lefts[-1])

    def result(self) -> tuple[np.ndarray, np.ndarray]:
        """Indices and heights of the peaks found (a plateau still open at the end is none)."""
        if not self.peaks:
            return np.zeros(0, np.intp), np.zeros(0)
        return np.concatenate(self.peaks).astype(np.intp), np.concatenate(self.heights)


def _by_distance(peaks: np.ndarray, priority: np.ndarray, distance: float) -> np.ndarray:
    """Peaks kept by SciPy's distance rule: the highest first, dropping every peak closer
    than ``distance`` to one kept (``_select_by_peak_distance``, repeated here)."""
    keep = np.ones(peaks.size, dtype=bool)
    span = math.ceil(distance)
    for j in np.argsort(priority)[::-1]:
        if not keep[j]:
            continue
        lo = int(np.searchsorted(peaks, peaks[j] - span, side="right"))
        hi = int(np.searchsorted(peaks, peaks[j] + span, side="left"))
        keep[lo:j] = False
        keep[j + 1 : hi] = False
    return peaks[keep]


class _Holds:
    """Hold levels (medians of the last half of each hold) of a column, each found once."""

    def __init__(self, y: Column, block: int) -> None:
        self.y, self.block = y, block
        self.known: dict[tuple[int, int], float] = {}

    def median(self, a: int, b: int) -> float:
        if (a, b) not in self.known:
            if b - a <= 4 * self.block:
                with np.errstate(all="ignore"):  # an empty hold gives NaN, as np.median
                    level = float(np.median(self.y.read(a, b))) if b > a else math.nan
            else:
                level = exact_quantiles.median(
                    lambda: (v for _, v in blocks(self.y, a, b, self.block))
                )
            self.known[a, b] = level
        return self.known[a, b]

    def __call__(self, bounds: list[int]) -> list[float]:
        edges = [0, *bounds, self.y.size]
        return [self.median(_tail_start(a, b), b) for a, b in itertools.pairwise(edges)]


def _noise_sigma(y: Column, size: int, block: int) -> float:
    """1.4826·MAD of the samples about their running median, as the whole-array rule."""

    def residuals() -> Iterator[np.ndarray]:
        for a, v in blocks(y, block=block):
            yield np.abs(v - _filtered(y, size, a, a + v.size))

    return _MAD_TO_SIGMA * float(exact_quantiles.median(residuals))


def detect_changes_in_blocks(
    time_s: Column,
    force_n: Column,
    *,
    noise_n: float | None = None,
    min_step_n: float | None = None,
    min_hold_s: float = 0.5,
    block: int = BLOCK,
) -> list[Change]:
    """``estimator.metrics.detect_changes`` on columns read ``block`` values at a time
    (the same result whatever the block)."""
    _check(time_s, force_n, "force_n", block)
    return _detect(time_s, force_n, noise_n, min_step_n, min_hold_s, block)


def _detect(
    t: Column,
    y: Column,
    noise_n: float | None,
    min_step_n: float | None,
    min_hold_s: float,
    block: int,
) -> list[Change]:
    if not (math.isfinite(min_hold_s) and min_hold_s > 0.0):
        raise ParameterError(f"min_hold_s = {min_hold_s!r}; give the shortest hold in s, > 0")
    n = y.size
    dt = float(exact_quantiles.median(lambda: (d for _, d in _diffs(t, block))))
    half = max(2, round(min_hold_s / (2.0 * dt)))
    if n < 2 * half + 1:
        return []
    if noise_n is None:
        sigma = _noise_sigma(y, 2 * half + 1, block)
    else:
        sigma = float(noise_n)
        if not (math.isfinite(sigma) and sigma >= 0.0):
            raise ParameterError(f"noise_n = {noise_n!r}; give the noise σ in N, >= 0, or None")
    if min_step_n is None:
        p1, p99 = exact_quantiles.percentiles(
            lambda: (v for _, v in blocks(y, block=block)), [1.0, 99.0]
        )
        step = max(_STEP_IN_SIGMAS * sigma, _STEP_RANGE_FRACTION * float(p99 - p1))
        if not step > 0.0:
            return []  # a constant trace
    else:
        step = float(min_step_n)
        if not (math.isfinite(step) and step > 0.0):
            raise ParameterError(
                f"min_step_n = {min_step_n!r}; give the smallest change in N, > 0, or None"
            )

    width = half if half % 2 else half + 1
    scan = _PeakScan(0.5 * step)
    for a in range(0, n, block):
        scan.feed(a, _strength(y, width, a, min(a + block, n)))
    peaks, heights = scan.result()
    holds = _Holds(y, block)
    idx = _drop_small(holds, [int(p) for p in _by_distance(peaks, heights, 2 * half)], step)

    starts: list[int] = []
    lv = holds(idx)
    for j, c in enumerate(idx):
        lo = max(c - 2 * half, (idx[j - 1] + c) // 2 if j else 0)
        hi = min(c + 2 * half, (c + idx[j + 1]) // 2 if j + 1 < len(idx) else n)
        tol = max(_START_SIGMAS * sigma, _START_FRACTION * abs(lv[j + 1] - lv[j]))
        starts.append(lo + _start_index(y.read(lo, hi), c - lo, 0, hi - lo, lv[j], lv[j + 1], tol))
    merged: list[int] = []
    for s in starts:
        if merged and _at(t, s) - _at(t, merged[-1]) < min_hold_s:
            continue  # closer than the hold: part of the previous change
        merged.append(s)
    merged = _drop_small(holds, merged, step)
    lv = holds(merged)
    return [
        Change(t_start_s=_at(t, s), index=s, level_before_n=lv[j], level_after_n=lv[j + 1])
        for j, s in enumerate(merged)
    ]


def _at(column: Column, i: int) -> float:
    return float(column.read(i, i + 1)[0])


def iter_change_table_in_blocks(
    time_s: Column,
    force_n: Column,
    static_force_n: Column | None = None,
    *,
    changes: Sequence[Change] | None = None,
    noise_n: float | None = None,
    min_step_n: float | None = None,
    min_hold_s: float = 0.5,
    band: float = 0.02,
    band_floor_n: float = 0.0,
    convention: str = "interpolated",
    levels: str = "median",
    block: int = BLOCK,
) -> Iterator[ChangeRow]:
    """``estimator.metrics.change_table`` on columns read a block at a time (the same rows,
    one at a time; the changes are found first, and each change's window is read whole)."""
    t, y, ys = time_s, force_n, static_force_n
    _check(t, y, "force_n", block)
    if ys is not None:
        _check(t, ys, "static_force_n", block)
    if changes is None:
        changes = _detect(t, y, noise_n, min_step_n, min_hold_s, block)
    bounds = [c.index for c in changes]
    for j, change in enumerate(changes):
        start = _tail_start(bounds[j - 1] if j else 0, change.index)
        if j + 1 < len(bounds):
            stop = bounds[j + 1] - max(2, (bounds[j + 1] - change.index) // 50)
        else:
            stop = t.size
        stop = min(max(stop, change.index + 2), t.size)
        tw = t.read(start, stop)
        measured = [
            step_metrics(
                tw,
                column.read(start, stop),
                t_change=change.t_start_s,
                band=band,
                band_floor=band_floor_n,
                convention=convention,
                levels=levels,
                tail_fraction=0.5,
            )
            for column in ((y,) if ys is None else (y, ys))
        ]
        yield ChangeRow(change, *measured)
