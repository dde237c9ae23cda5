"""Response metrics of load changes in a force trace.

Three layers, all plain functions of arrays (no files, no printing except the table):

* :func:`step_metrics` — one change in a window of samples: initial and final levels,
  10–90 % rise time, overshoot, undershoot and preshoot, peak, and the settling time to a
  band measured from the start of the change and from its 50 % crossing (IEEE Std 181);
* :func:`detect_changes` — where the load changed in a force-estimate trace, one entry
  per change however much the estimate rings after it;
* :func:`change_table` / :func:`format_change_table` — the metrics of every detected
  change, for the observer estimate and, when given, for the static conversion ``k·x``.

Two reading conventions (``convention=``):

* ``"sampled"`` reads every instant off the sample grid, without interpolation: a
  crossing is the first sample at or beyond the level, the settling instant is the
  sample after the last one outside the band. This is how python-control's
  ``step_info`` reads a sampled response (see docs/method-metrics.md for the exact
  correspondence and the differences);
* ``"interpolated"`` (default) places each crossing between the two samples that
  straddle the level, by linear interpolation.

The peak is read off the samples in both conventions. Definitions, formulas and sources
are in docs/method-metrics.md.
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

from estimator.errors import EstimatorError, ParameterError

__all__ = [
    "CONVENTIONS",
    "LEVEL_METHODS",
    "Change",
    "ChangeRow",
    "StepMetrics",
    "change_table",
    "detect_changes",
    "format_change_table",
    "step_metrics",
]

#: Ways of reading instants off a sampled trace.
CONVENTIONS = ("interpolated", "sampled")
#: Ways of estimating the initial and final levels when they are not given.
LEVEL_METHODS = ("median", "histogram")

#: Default number of histogram bins of the IEEE Std 181 histogram-mode level estimate.
HISTOGRAM_BINS = 100
#: 1.4826·MAD estimates σ for Gaussian noise (common practice; 1/Φ⁻¹(3/4)).
_MAD_TO_SIGMA = 1.482602218505602
#: Default smallest step, in noise standard deviations, when ``min_step_n`` is not given.
_STEP_IN_SIGMAS = 10.0
#: ... and never below this fraction of the trace's 1–99 percentile range.
_STEP_RANGE_FRACTION = 0.01
#: A sample still counts as "at the old level" within max(4σ, 2 % of the step).
_START_SIGMAS = 4.0
_START_FRACTION = 0.02


# --------------------------------------------------------------------------- values


@dataclass(frozen=True)
class StepMetrics:
    """Response metrics of one change. Levels are in the unit of the input values.

    Instants (``*_instant_s``) are on the trace's own clock, in s; durations
    (``*_time_s``) are in s. A metric that the window does not allow (the 90 % level is
    never reached, the signal has not settled by the end) is NaN.

    Attributes:
        convention: ``"sampled"`` or ``"interpolated"``.
        level_method: how the levels were found: ``"given"``, ``"median"``,
            ``"histogram"`` or a pair such as ``"given/median"`` (initial/final).
        t_change_s: the start of the change, s.
        initial: level before the change.
        final: level after the change.
        amplitude: ``final − initial`` (never 0).
        band: settling band as a fraction of ``|amplitude|``.
        band_abs: half-width of the settling band, ``max(band·|amplitude|, band_floor)``.
        low_instant_s, mid_instant_s, high_instant_s: first crossings of the low (10 %),
            mesial (50 %) and high (90 %) reference levels after ``t_change_s``.
        rise_time_s: ``high_instant_s − low_instant_s``.
        overshoot_pct: largest excursion beyond ``final`` in the direction of the change,
            in % of ``|amplitude|`` (0 when none).
        undershoot_pct: largest excursion back across ``final`` after the signal first
            reached it (IEEE Std 181 post-transition undershoot), % of ``|amplitude|``.
        preshoot_pct: largest excursion beyond ``initial`` against the direction of the
            change before the 50 % crossing, % of ``|amplitude|`` (python-control
            reports this as ``Undershoot``).
        peak_value: the sample furthest in the direction of the change.
        peak_time_s: its time after ``t_change_s`` (first such sample).
        settled_instant_s: when the signal enters ``final ± band_abs`` for good.
        settling_time_s: ``settled_instant_s − t_change_s``.
        settling_time_mid_s: ``settled_instant_s − mid_instant_s`` (IEEE Std 181).
    """

    convention: str
    level_method: str
    t_change_s: float
    initial: float
    final: float
    amplitude: float
    band: float
    band_abs: float
    low_instant_s: float
    mid_instant_s: float
    high_instant_s: float
    rise_time_s: float
    overshoot_pct: float
    undershoot_pct: float
    preshoot_pct: float
    peak_value: float
    peak_time_s: float
    settled_instant_s: float
    settling_time_s: float
    settling_time_mid_s: float


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


# ----------------------------------------------------------------------- validation


def _trace(time_s: ArrayLike, value: ArrayLike, value_name: str) -> tuple[np.ndarray, np.ndarray]:
    """Both arrays as float64 of shape (n,), finite, time strictly increasing, n >= 2."""
    t = np.asarray(time_s, dtype=np.float64)
    y = np.asarray(value, dtype=np.float64)
    if t.ndim != 1 or y.ndim != 1 or t.shape != y.shape:
        raise EstimatorError(
            f"time_s has shape {t.shape} and {value_name} {y.shape}; "
            "give two 1-D arrays of the same length"
        )
    if t.size < 2:
        raise EstimatorError(f"time_s has {t.size} sample(s); give at least 2")
    for name, arr in (("time_s", t), (value_name, y)):
        bad = np.count_nonzero(~np.isfinite(arr))
        if bad:
            raise EstimatorError(
                f"{name} contains {bad} non-finite value(s); remove or fill them first"
            )
    steps = np.diff(t)
    if not np.all(steps > 0.0):
        first = int(np.argmax(~(steps > 0.0)))
        raise EstimatorError(
            f"time_s is not strictly increasing at index {first + 1} "
            f"({t[first]!r} then {t[first + 1]!r}); sort the samples and drop duplicates"
        )
    return t, y


def _choice(name: str, value: str, allowed: Sequence[str]) -> str:
    if value not in allowed:
        raise ParameterError(f"{name} = {value!r} is not known; use one of {', '.join(allowed)}")
    return value


def _fraction(name: str, value: object, fix: str) -> float:
    try:
        number = float(value)  # type: ignore[arg-type]
    except (TypeError, ValueError):
        raise ParameterError(f"{name} = {value!r} is not a number; {fix}") from None
    if not 0.0 < number < 1.0:
        raise ParameterError(f"{name} = {number!r} is outside (0, 1); {fix}")
    return number


def _optional_level(name: str, value: float | None) -> float | None:
    if value is None:
        return None
    try:
        number = float(value)
    except (TypeError, ValueError):
        raise ParameterError(
            f"{name} = {value!r} is not a number; give the level or None"
        ) from None
    if not math.isfinite(number):
        raise ParameterError(f"{name} = {value!r} is not finite; give the level or None")
    return number


# ------------------------------------------------------------------------- levels


def _histogram_levels(y: np.ndarray, bins: int) -> tuple[float, float]:
    """Low and high state levels by the histogram mode method (IEEE Std 181).

    The histogram of ``y`` over its range is split at the middle of the range; each
    level is the centre of the most populated bin of its half (first one on a tie).
    """
    lo, hi = float(np.min(y)), float(np.max(y))
    if not hi > lo:
        return lo, hi
    counts, edges = np.histogram(y, bins=bins, range=(lo, hi))
    centres = 0.5 * (edges[:-1] + edges[1:])
    half = bins // 2
    low = centres[int(np.argmax(counts[:half]))]
    high = centres[half + int(np.argmax(counts[half:]))]
    return float(low), float(high)


def _levels(
    y: np.ndarray,
    post: int,
    initial: float | None,
    final: float | None,
    method: str,
    tail_fraction: float,
    bins: int,
) -> tuple[float, float, str]:
    """Initial and final levels of a window whose change starts at sample ``post``."""
    head = y[:post] if post > 0 else y[post : post + 1]
    tail = y[post + int((y.size - post) * (1.0 - tail_fraction)) :]
    if method == "histogram" and (initial is None or final is None):
        low, high = _histogram_levels(y, bins)
        rising = np.median(tail) >= np.median(head)
        est_i, est_f = (low, high) if rising else (high, low)
    else:
        est_i, est_f = float(np.median(head)), float(np.median(tail))
    used_i = "given" if initial is not None else method
    used_f = "given" if final is not None else method
    name = used_i if used_i == used_f else f"{used_i}/{used_f}"
    return (
        est_i if initial is None else initial,
        est_f if final is None else final,
        name,
    )


# ---------------------------------------------------------------------- crossings


def _first_crossing(
    t: np.ndarray, y: np.ndarray, start: int, level: float, sign: float, interpolate: bool
) -> float:
    """First instant at or after sample ``start`` where ``sign·(y − level) >= 0``."""
    hits = np.nonzero(sign * (y[start:] - level) >= 0.0)[0]
    if hits.size == 0:
        return math.nan
    i = start + int(hits[0])
    if interpolate and i > 0 and sign * (y[i - 1] - level) < 0.0:
        frac = (level - y[i - 1]) / (y[i] - y[i - 1])
        return float(t[i - 1] + frac * (t[i] - t[i - 1]))
    return float(t[i])


def _settled_instant(
    t: np.ndarray, y: np.ndarray, start: int, final: float, band_abs: float, interpolate: bool
) -> float:
    """When ``y`` enters ``final ± band_abs`` for good (NaN if outside at the last sample).

    A sample on the band's edge counts as outside, as in python-control's ``step_info``.
    """
    outside = np.nonzero(np.abs(y[start:] - final) >= band_abs)[0]
    if outside.size == 0:
        return float(t[start])
    last = start + int(outside[-1])
    if last == y.size - 1:
        return math.nan
    if not interpolate:
        return float(t[last + 1])
    edge = final + math.copysign(band_abs, y[last] - final)
    frac = (edge - y[last]) / (y[last + 1] - y[last])
    return float(t[last] + frac * (t[last + 1] - t[last]))


# -------------------------------------------------------------------- step metrics


def step_metrics(
    time_s: ArrayLike,
    value: ArrayLike,
    *,
    t_change: float | None = None,
    band: float = 0.02,
    band_floor: float = 0.0,
    initial: float | None = None,
    final: float | None = None,
    convention: str = "interpolated",
    levels: str = "median",
    rise_limits: tuple[float, float] = (0.1, 0.9),
    tail_fraction: float = 0.5,
    histogram_bins: int = HISTOGRAM_BINS,
) -> StepMetrics:
    """Response metrics of one change of ``value`` starting at ``t_change``.

    Args:
        time_s: sample times in s, shape (n,), finite, strictly increasing.
        value: the signal, shape (n,), finite (any unit; N for a force).
        t_change: start of the change in s, within the trace. Samples before it form the
            pre-change stretch; the metrics use the samples at or after it. None: the
            first sample (the whole window is the response, as for ``step_info``).
        band: settling band as a fraction of the step ``|final − initial|``, in (0, 1).
        band_floor: smallest half-width of the band, in the unit of ``value`` (>= 0);
            the band is ``max(band·|step|, band_floor)``. Give about twice the noise
            standard deviation when the noise is not small against ``band·|step|``.
        initial: level before the change; None estimates it (``levels``). With no
            sample before ``t_change``, the estimate is the first sample's value.
        final: level after the change; None estimates it (``levels``).
        convention: ``"interpolated"`` (default) or ``"sampled"`` (module docstring).
        levels: ``"median"`` — the median of the pre-change stretch and of the last
            ``tail_fraction`` of the samples after the change; ``"histogram"`` — the
            IEEE Std 181 histogram mode method over the whole window.
        rise_limits: low and high reference levels as fractions of the step, in (0, 1).
        tail_fraction: share of the post-change samples (the last ones) whose median is
            the final level, in (0, 1].
        histogram_bins: number of bins of the histogram method, >= 4.

    Returns:
        The :class:`StepMetrics`.

    Raises:
        EstimatorError: bad arrays, or the levels coincide (no change to measure).
        ParameterError: an option out of range.
    """
    t, y = _trace(time_s, value, "value")
    convention = _choice("convention", convention, CONVENTIONS)
    levels = _choice("levels", levels, LEVEL_METHODS)
    band = _fraction("band", band, "give the settling band as a fraction of the step, e.g. 0.02")
    if len(rise_limits) != 2:
        raise ParameterError(
            f"rise_limits = {rise_limits!r}: give two fractions (low, high), e.g. (0.1, 0.9)"
        )
    low_frac, high_frac = (
        _fraction(name, v, "give reference levels as fractions of the step, e.g. (0.1, 0.9)")
        for name, v in zip(("rise_limits[0]", "rise_limits[1]"), rise_limits, strict=True)
    )
    if not low_frac < high_frac:
        raise ParameterError(
            f"rise_limits = {tuple(rise_limits)!r}: the low level must be below the high one"
        )
    if not 0.0 < tail_fraction <= 1.0:
        raise ParameterError(
            f"tail_fraction = {tail_fraction!r} is outside (0, 1]; e.g. 0.5 for the last half"
        )
    if int(histogram_bins) < 4:
        raise ParameterError(f"histogram_bins = {histogram_bins!r}; give at least 4 bins")
    if not (math.isfinite(band_floor) and band_floor >= 0.0):
        raise ParameterError(
            f"band_floor = {band_floor!r}; give a finite half-width >= 0 in the signal's unit"
        )
    initial = _optional_level("initial", initial)
    final = _optional_level("final", final)

    if t_change is None:
        t0 = float(t[0])
    else:
        t0 = float(t_change)
        if not t[0] <= t0 <= t[-1]:
            raise ParameterError(
                f"t_change = {t_change!r} s is outside the trace [{t[0]!r}, {t[-1]!r}] s; "
                "give a start inside the window"
            )
    post = int(np.searchsorted(t, t0, side="left"))
    if y.size - post < 2:
        raise EstimatorError(
            f"only {y.size - post} sample(s) at or after t_change = {t0!r} s; "
            "give a window that extends past the change"
        )
    y0, y1, method = _levels(y, post, initial, final, levels, tail_fraction, int(histogram_bins))
    amplitude = y1 - y0
    if not amplitude != 0.0:
        raise EstimatorError(
            f"initial and final levels are both {y0!r}: there is no change to measure; "
            "give a window that contains one, or the levels"
        )
    sign = math.copysign(1.0, amplitude)
    interp = convention == "interpolated"
    band_abs = max(band * abs(amplitude), float(band_floor))

    t_low = _first_crossing(t, y, post, y0 + low_frac * amplitude, sign, interp)
    t_mid = _first_crossing(t, y, post, y0 + 0.5 * amplitude, sign, interp)
    t_high = _first_crossing(t, y, post, y0 + high_frac * amplitude, sign, interp)

    seg = y[post:]
    excess = float(np.max(sign * (seg - y1)))
    overshoot = max(excess, 0.0) / abs(amplitude) * 100.0

    reached = np.nonzero(sign * (seg - y1) >= 0.0)[0]
    if reached.size:
        dip = float(np.max(sign * (y1 - seg[int(reached[0]) :])))
        undershoot = max(dip, 0.0) / abs(amplitude) * 100.0
    else:
        undershoot = 0.0

    mid_hits = np.nonzero(sign * (seg - (y0 + 0.5 * amplitude)) >= 0.0)[0]
    pre_end = int(mid_hits[0]) if mid_hits.size else seg.size
    wrong_way = float(np.max(sign * (y0 - seg[: max(pre_end, 1)])))
    preshoot = max(wrong_way, 0.0) / abs(amplitude) * 100.0

    peak_i = post + int(np.argmax(sign * seg))
    settled = _settled_instant(t, y, post, y1, band_abs, interp)

    return StepMetrics(
        convention=convention,
        level_method=method,
        t_change_s=t0,
        initial=y0,
        final=y1,
        amplitude=amplitude,
        band=band,
        band_abs=band_abs,
        low_instant_s=t_low,
        mid_instant_s=t_mid,
        high_instant_s=t_high,
        rise_time_s=t_high - t_low,
        overshoot_pct=overshoot,
        undershoot_pct=undershoot,
        preshoot_pct=preshoot,
        peak_value=float(y[peak_i]),
        peak_time_s=float(t[peak_i]) - t0,
        settled_instant_s=settled,
        settling_time_s=settled - t0,
        settling_time_mid_s=settled - t_mid,
    )


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


def _cell(value: float, fmt: str) -> str:
    return "-" if not math.isfinite(value) else format(value, fmt)


def format_change_table(rows: Sequence[ChangeRow]) -> str:
    """Plain-text table of the rows, one line per change, units in the header.

    Forces in N, instants in s, durations in ms, overshoot in %. "settle" counts from
    the start of the change, "settle50" from its 50 % crossing (IEEE Std 181); the
    ``k·x`` columns and the ratio appear when any row has static metrics. NaN prints "-".
    """
    with_static = any(r.static is not None for r in rows)
    header = [
        "#",
        "t_start s",
        "before N",
        "after N",
        "step N",
        "rise ms",
        "overshoot %",
        "settle ms",
        "settle50 ms",
    ]
    if with_static:
        header += ["k·x settle ms", "k·x overshoot %", "ratio"]
    body: list[list[str]] = []
    for n, row in enumerate(rows, start=1):
        m = row.observer
        line = [
            str(n),
            _cell(row.change.t_start_s, ".4f"),
            _cell(row.change.level_before_n, ".5g"),
            _cell(row.change.level_after_n, ".5g"),
            _cell(row.change.step_n, "+.5g"),
            _cell(m.rise_time_s * 1e3, ".2f"),
            _cell(m.overshoot_pct, ".1f"),
            _cell(m.settling_time_s * 1e3, ".2f"),
            _cell(m.settling_time_mid_s * 1e3, ".2f"),
        ]
        if with_static:
            s = row.static
            line += (
                ["-", "-", "-"]
                if s is None
                else [
                    _cell(s.settling_time_s * 1e3, ".2f"),
                    _cell(s.overshoot_pct, ".1f"),
                    _cell(row.settling_ratio, ".1f"),
                ]
            )
        body.append(line)
    widths = [max(len(r[c]) for r in [header, *body]) for c in range(len(header))]
    lines = [
        "  ".join(cell.rjust(w) for cell, w in zip(r, widths, strict=True))
        for r in [header, *body]
    ]
    if rows:
        m = rows[0].observer
        floors = [
            r.observer.band_abs
            for r in rows
            if r.observer.band_abs > r.observer.band * abs(r.observer.amplitude)
        ]
        band = f"±{m.band * 100.0:g} % of the step"
        if floors:
            band += f" (at least ±{min(floors):.4g} N)"
        lines.append(
            f"settling band {band}; settle from the start of the change, "
            "settle50 from its 50 % crossing"
        )
    else:
        lines.append("no load change found")
    return "\n".join(lines) + "\n"
