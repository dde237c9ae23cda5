"""Where the load changed in a force-estimate trace (`detect_changes`), one entry per change
however much the estimate rings after it, and the metrics of every change (`change_table`)
for the observer's estimate and, when given, the static conversion ``k·x``.

Whole arrays; `estimator.metrics.changes_in_blocks` gives the very same rows from columns
read a block at a time (a record of any length in bounded memory), and the tests hold the
two equal.
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from functools import partial

import numpy as np
import scipy.ndimage
import scipy.signal
from numpy.typing import ArrayLike

from estimator.errors import ParameterError
from estimator.metrics.step import StepMetrics, _trace, step_metrics

__all__ = ["Change", "ChangeRow", "change_table", "detect_changes"]

#: 1.4826·MAD estimates σ for Gaussian noise (common practice; 1/Φ⁻¹(3/4)).
_MAD_TO_SIGMA = 1.482602218505602
#: Default smallest step, in noise standard deviations, when ``min_step_n`` is not given.
_STEP_IN_SIGMAS = 10.0
#: ... and never below this fraction of the trace's 1–99 percentile range.
_STEP_RANGE_FRACTION = 0.01
#: A sample still counts as "at the old level" within max(4σ, 2 % of the step).
_START_SIGMAS = 4.0
_START_FRACTION = 0.02


@dataclass(frozen=True)
class Change:
    """One load change found by :func:`detect_changes`.

    Attributes:
        t_start_s: start of the change: time of the last sample still at the old level, s.
        index: index of that sample in the trace.
        level_before_n: robust level of the hold before the change, N.
        level_after_n: robust level of the hold after it, N.
    """

    t_start_s: float
    index: int
    level_before_n: float
    level_after_n: float

    @property
    def step_n(self) -> float:
        """Size of the change, ``level_after_n − level_before_n``, N."""
        return self.level_after_n - self.level_before_n


@dataclass(frozen=True)
class ChangeRow:
    """One line of the change table.

    Attributes:
        change: the detected change.
        observer: metrics of the observer's force estimate.
        static: metrics of the static conversion ``k·x`` over the same window, or None.
    """

    change: Change
    observer: StepMetrics
    static: StepMetrics | None = None

    @property
    def settling_ratio(self) -> float:
        """Static settling time over the observer's (both from the start); NaN if unknown."""
        if self.static is None:
            return math.nan
        fast, slow = self.observer.settling_time_s, self.static.settling_time_s
        if not (math.isfinite(fast) and math.isfinite(slow)) or fast <= 0.0:
            return math.nan
        return slow / fast


# ------------------------------------------------------------------ change detection


def _tail_start(a: int, b: int) -> int:
    """First index of the last half of the samples ``[a, b)``."""
    return a + (b - a) // 2


def _hold_levels(y: np.ndarray, bounds: list[int]) -> list[float]:
    """Median of the last half of each hold ``[bounds[j], bounds[j+1])`` (plus the end)."""
    edges = [0, *bounds, y.size]
    return [float(np.median(y[_tail_start(a, b) : b])) for a, b in itertools.pairwise(edges)]


def _noise_sigma(y: np.ndarray, smooth: np.ndarray) -> float:
    """Robust σ of the samples about their running median (1.4826·MAD)."""
    return _MAD_TO_SIGMA * float(np.median(np.abs(y - smooth)))


def _drop_small(
    hold_levels: Callable[[list[int]], list[float]], idx: list[int], min_step_n: float
) -> list[int]:
    """Drop the weakest boundary until every hold differs from the next by >= min_step_n.

    ``hold_levels(bounds)`` gives the level of each hold between the bounds (`_hold_levels`).
    """
    idx = list(idx)
    while idx:
        lv = hold_levels(idx)
        steps = np.abs(np.diff(lv))
        weakest = int(np.argmin(steps))
        if steps[weakest] >= min_step_n:
            break
        del idx[weakest]
    return idx


def _start_index(
    y: np.ndarray, centre: int, lo: int, hi: int, before: float, after: float, tol: float
) -> int:
    """Last sample still at the old level before the first 50 % crossing near ``centre``.

    The search runs over ``[lo, hi)``; the result is in ``[lo, centre]``.
    """
    sign = math.copysign(1.0, after - before)
    mid = 0.5 * (before + after)
    hits = np.nonzero(sign * (y[lo:hi] - mid) >= 0.0)[0]
    k = lo + int(hits[0]) if hits.size else centre
    still = np.nonzero(sign * (y[lo:k] - before) <= tol)[0]
    return lo + int(still[-1]) if still.size else lo


def detect_changes(
    time_s: ArrayLike,
    force_n: ArrayLike,
    *,
    noise_n: float | None = None,
    min_step_n: float | None = None,
    min_hold_s: float = 0.5,
) -> list[Change]:
    """Load changes in a force-estimate trace, one entry per change.

    The rule (docs/method-metrics.md): with ``W`` = half the hold time in samples, the
    level difference ``d[i] = median(y[i : i+W]) − median(y[i−W : i])`` is large only
    near a change; its peaks above ``min_step_n/2`` and at least ``2W`` samples apart are
    the candidates. Ringing shorter than about ``W/2`` cannot move a median over ``W``
    samples, so one change gives one peak. Candidates whose holds (the medians of the
    last half of the samples between changes) differ by less than ``min_step_n`` are
    dropped, the weakest first. The start of each change is the last sample within
    ``max(4σ, 2 % of the step)`` of the old level before the first 50 % crossing.

    Args:
        time_s: sample times in s, shape (n,), finite, strictly increasing, near-uniform.
        force_n: the force estimate in N, shape (n,), finite.
        noise_n: standard deviation of the estimate's noise in N; None estimates it as
            1.4826·MAD of the samples about their running median.
        min_step_n: smallest change reported, N; None takes max(10σ, 1 % of the
            trace's 1–99 percentile range).
        min_hold_s: shortest hold between changes, s (> 0); changes closer than this
            are merged. It should exceed about twice the estimate's settling time.

    Returns:
        Changes in time order. None within ``min_hold_s/2`` of either end of the trace.
    """
    t, y = _trace(time_s, force_n, "force_n")
    if not (math.isfinite(min_hold_s) and min_hold_s > 0.0):
        raise ParameterError(f"min_hold_s = {min_hold_s!r}; give the shortest hold in s, > 0")
    dt = float(np.median(np.diff(t)))
    half = max(2, round(min_hold_s / (2.0 * dt)))
    if y.size < 2 * half + 1:
        return []
    smooth = scipy.ndimage.median_filter(y, size=2 * half + 1, mode="nearest")
    if noise_n is None:
        sigma = _noise_sigma(y, smooth)
    else:
        sigma = float(noise_n)
        if not (math.isfinite(sigma) and sigma >= 0.0):
            raise ParameterError(f"noise_n = {noise_n!r}; give the noise σ in N, >= 0, or None")
    if min_step_n is None:
        p1, p99 = np.percentile(y, [1.0, 99.0])
        step = max(_STEP_IN_SIGMAS * sigma, _STEP_RANGE_FRACTION * float(p99 - p1))
        if not step > 0.0:
            return []  # a constant trace
    else:
        step = float(min_step_n)
        if not (math.isfinite(step) and step > 0.0):
            raise ParameterError(
                f"min_step_n = {min_step_n!r}; give the smallest change in N, > 0, or None"
            )

    # Medians of the W samples after and before i, from one running median of width W.
    width = half if half % 2 else half + 1
    run = scipy.ndimage.median_filter(y, size=width, mode="nearest")
    i = np.arange(y.size)
    r = width // 2
    after = run[np.clip(i + r, 0, y.size - 1)]
    before = run[np.clip(i - 1 - r, 0, y.size - 1)]
    strength = np.abs(after - before)
    strength[:width] = 0.0
    strength[y.size - width :] = 0.0
    peaks, _ = scipy.signal.find_peaks(strength, height=0.5 * step, distance=2 * half)
    idx = _drop_small(partial(_hold_levels, y), [int(p) for p in peaks], step)

    # Place each start, then re-check the holds between the refined starts.
    starts: list[int] = []
    lv = _hold_levels(y, idx)
    for j, c in enumerate(idx):
        lo = max(c - 2 * half, (idx[j - 1] + c) // 2 if j else 0)
        hi = min(c + 2 * half, (c + idx[j + 1]) // 2 if j + 1 < len(idx) else y.size)
        tol = max(_START_SIGMAS * sigma, _START_FRACTION * abs(lv[j + 1] - lv[j]))
        starts.append(_start_index(y, c, lo, hi, lv[j], lv[j + 1], tol))
    merged: list[int] = []
    for s in starts:
        if merged and t[s] - t[merged[-1]] < min_hold_s:
            continue  # closer than the hold: part of the previous change
        merged.append(s)
    merged = _drop_small(partial(_hold_levels, y), merged, step)
    lv = _hold_levels(y, merged)
    return [
        Change(
            t_start_s=float(t[s]),
            index=s,
            level_before_n=lv[j],
            level_after_n=lv[j + 1],
        )
        for j, s in enumerate(merged)
    ]


# ----------------------------------------------------------------------- the table


def change_table(
    time_s: ArrayLike,
    force_n: ArrayLike,
    static_force_n: ArrayLike | None = None,
    *,
    changes: Sequence[Change] | None = None,
    noise_n: float | None = None,
    min_step_n: float | None = None,
    min_hold_s: float = 0.5,
    band: float = 0.02,
    band_floor_n: float = 0.0,
    convention: str = "interpolated",
    levels: str = "median",
) -> list[ChangeRow]:
    """Metrics of every change in ``force_n`` and, when given, in ``static_force_n``.

    Each change is measured over the window from the last half of the hold before it to
    just before the next change (the last 2 % of the hold, at least two samples, are left
    out) or the end of the trace, with ``t_change`` at its
    start. The static trace ``k·x`` (N, same times) is measured over the same window
    with its own levels, so the two settling times compare directly.

    Args:
        time_s: sample times in s, shape (n,).
        force_n: the observer's force estimate in N, shape (n,).
        static_force_n: the static conversion ``k·x`` in N, shape (n,), or None.
        changes: changes to measure; None runs :func:`detect_changes` on ``force_n``
            with ``noise_n``, ``min_step_n`` and ``min_hold_s``.
        band, convention, levels: passed to :func:`step_metrics` (``tail_fraction`` is
            0.5, so the "median" levels equal the detector's hold levels).
        band_floor_n: passed as ``band_floor`` (N) to both traces.

    Returns:
        One :class:`ChangeRow` per change, in time order.
    """
    t, y = _trace(time_s, force_n, "force_n")
    ys = None if static_force_n is None else _trace(t, static_force_n, "static_force_n")[1]
    if changes is None:
        changes = detect_changes(
            t, y, noise_n=noise_n, min_step_n=min_step_n, min_hold_s=min_hold_s
        )
    rows: list[ChangeRow] = []
    bounds = [c.index for c in changes]
    for j, change in enumerate(changes):
        start = _tail_start(bounds[j - 1] if j else 0, change.index)
        if j + 1 < len(bounds):
            # End a little before the next change is detected: a trace that reacts
            # sooner than the estimate (k·x) has already left the level there.
            stop = bounds[j + 1] - max(2, (bounds[j + 1] - change.index) // 50)
        else:
            stop = t.size
        window = slice(start, max(stop, change.index + 2))
        measured = [
            step_metrics(
                t[window],
                values[window],
                t_change=change.t_start_s,
                band=band,
                band_floor=band_floor_n,
                convention=convention,
                levels=levels,
                tail_fraction=0.5,
            )
            for values in ((y,) if ys is None else (y, ys))
        ]
        rows.append(ChangeRow(change, *measured))
    return rows
