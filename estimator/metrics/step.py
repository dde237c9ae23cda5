"""Response metrics of one load change in a window of samples: `step_metrics`.

Initial and final levels, 10–90 % rise time, overshoot, undershoot and preshoot, peak, and
the settling time to a band measured from the start of the change and from its 50 %
crossing (IEEE Std 181).

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

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike

from estimator.errors import EstimatorError, ParameterError

__all__ = ["CONVENTIONS", "HISTOGRAM_BINS", "LEVEL_METHODS", "StepMetrics", "step_metrics"]

#: Ways of reading instants off a sampled trace.
CONVENTIONS = ("interpolated", "sampled")
#: Ways of estimating the initial and final levels when they are not given.
LEVEL_METHODS = ("median", "histogram")

#: Default number of histogram bins of the IEEE Std 181 histogram-mode level estimate.
HISTOGRAM_BINS = 100


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
