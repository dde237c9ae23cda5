"""Alarms on a live force stream, each with hysteresis, a stable id and a clear message.

An :class:`AlarmSet` is fed, block by block and in stream order, the samples and the
observer's estimates of the same samples (one row each). It returns every alarm
transition (:class:`AlarmChange`, ``raised`` or ``cleared``) with the stream position
and time of the sample at which it happened. Nothing inside reads a clock, a file or a
thread: every decision depends only on the data given, so a replay of the recorded
samples and estimates reproduces the same transitions, whatever the block sizes.

The alarms (ids are stable; thresholds in :class:`AlarmSettings`; defaults and their
reasons in ``docs/method-monitor.md``):

``stalled-stream`` (critical)
    no sample has arrived for longer than ``stall_timeout_s`` of host time; clears once
    samples have flowed again for ``stall_clear_after_s``.
``overload`` (critical)
    the force estimate leaves the calibrated range ``[force_min_n, force_max_n]``;
    clears when it has stayed inside by a margin for a hold time.
``travel`` (critical, only when the profile gives ``travel_m``)
    the displacement estimate comes within a fraction of the mechanical stop; clears
    when it has stayed below a lower fraction for the same hold time.
``model-mismatch`` (warning)
    the mean NIS of consecutive windows lies outside its chi-square band
    (:mod:`estimator.consistency`) for several windows in a row; clears after several
    windows in a row inside.
``sample-loss`` (warning)
    more than a fraction of the last ``loss_window_s`` of samples lost (gaps in the
    sequence numbers) or empty (no measurement); clears at a lower fraction.
``zero-drift`` (advisory)
    the settled reading of the unloaded cell has moved away from the zero set at the
    last tare for a hold time; clears when back near zero for that time, or at a tare.

The stalled-stream alarm uses the host receive times the samples carry
(``host_time_s``, the host's monotonic clock). A silence is found in two ways that give
the same transition: between two samples whose host times are more than the timeout
apart, or by :meth:`AlarmSet.tick` (called by the live loop with the same clock) once
the timeout has passed with no sample. Either way it is stamped with the moment the
silence exceeded the timeout, ``last host time + stall_timeout_s``, and the stream
position of the next sample, so a replay finds it from the recorded host times alone;
only a silence at the very end of a recording needs a final ``tick`` with the time the
recording stopped.
"""

from __future__ import annotations

import math
from collections.abc import Iterable
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np

from estimator.consistency import nis_band, windowed_nis
from estimator.errors import ParameterError
from estimator.monitor import SETTLED, STATES, SettlingMonitor, SettlingRule, _latch
from estimator.observer import ESTIMATE_DTYPE, FLAG_MISSING

if TYPE_CHECKING:
    from estimator.profile import CellProfile

__all__ = [
    "ALARM_EVENT",
    "ALARM_IDS",
    "CLEARED",
    "DRIFT",
    "LOSS",
    "MISMATCH",
    "OVERLOAD",
    "RAISED",
    "SEVERITIES",
    "STALL",
    "TRAVEL",
    "ActiveAlarm",
    "AlarmChange",
    "AlarmSet",
    "AlarmSettings",
]

OVERLOAD = "overload"
TRAVEL = "travel"
MISMATCH = "model-mismatch"
LOSS = "sample-loss"
STALL = "stalled-stream"
DRIFT = "zero-drift"
#: Every alarm id, in the order transitions at the same sample are listed.
#: A stall comes first: at a stream position it happened before that sample arrived.
ALARM_IDS: tuple[str, ...] = (STALL, OVERLOAD, TRAVEL, MISMATCH, LOSS, DRIFT)
#: Severities, most urgent first.
SEVERITIES: tuple[str, ...] = ("critical", "warning", "advisory")
_SEVERITY = {
    OVERLOAD: "critical",
    TRAVEL: "critical",
    MISMATCH: "warning",
    LOSS: "warning",
    STALL: "critical",
    DRIFT: "advisory",
}
RAISED = "raised"
CLEARED = "cleared"
#: Event kind of an alarm transition in a run's event log.
ALARM_EVENT = "alarm"


def _check(
    name: str, value: Any, low: float, high: float = math.inf, *, open_low: bool = False
) -> None:
    ok = isinstance(value, int | float) and not isinstance(value, bool) and math.isfinite(value)
    if ok:
        ok = (value > low if open_low else value >= low) and value <= high
    if not ok:
        sign = ">" if open_low else ">="
        upper = f" and <= {high:g}" if math.isfinite(high) else ""
        raise ParameterError(f"{name} = {value!r}: must be a finite number {sign} {low:g}{upper}")


@dataclass(frozen=True)
class AlarmSettings:
    """Thresholds of every alarm; fractions of the span are of ``force_max_n − force_min_n``.

    Attributes:
        overload_clear_margin_fraction: the overload clears once the force is back inside
            the range by this fraction of the span ...
        overload_clear_hold_s: ... and has stayed there this long, s (the travel alarm
            uses the same hold).
        travel_raise_fraction, travel_clear_fraction: the travel alarm raises at
            ``|x| ≥ raise·travel_m`` and clears at ``|x| ≤ clear·travel_m``.
        nis_window: samples per NIS window.
        nis_level: two-sided probability of the chi-square band (0.99 = 99 %).
        nis_raise_windows: consecutive windows outside the band that raise the alarm.
        nis_clear_windows: consecutive windows inside the band that clear it.
        nis_min_used_fraction: a window where the observer used fewer samples than this
            fraction (suspect, load jump, missing) is not judged.
        loss_window_s: length of the sliding window of the loss count, s of samples.
        loss_raise_fraction: raise when more than this fraction of the window is lost.
        loss_clear_fraction: clear when at most this fraction is lost.
        stall_timeout_s: silence (host time) that raises the stalled-stream alarm, s.
        stall_clear_after_s: samples must have flowed again this long to clear it, s.
        drift_raise_fraction: zero drift (of the span) that raises the alarm.
        drift_clear_fraction: zero drift (of the span) at or below which it clears.
        drift_unloaded_fraction: a settled reading within this fraction of the span
            from zero is taken as the unloaded cell.
        drift_hold_s: the drift must stay beyond (or back within) its threshold on
            unloaded, settled readings for this long to raise (or clear), s.
    """

    overload_clear_margin_fraction: float = 0.01
    overload_clear_hold_s: float = 0.1
    travel_raise_fraction: float = 0.9
    travel_clear_fraction: float = 0.8
    nis_window: int = 200
    nis_level: float = 0.99
    nis_raise_windows: int = 5
    nis_clear_windows: int = 5
    nis_min_used_fraction: float = 0.5
    loss_window_s: float = 1.0
    loss_raise_fraction: float = 0.005
    loss_clear_fraction: float = 0.001
    stall_timeout_s: float = 0.5
    stall_clear_after_s: float = 0.5
    drift_raise_fraction: float = 0.002
    drift_clear_fraction: float = 0.001
    drift_unloaded_fraction: float = 0.005
    drift_hold_s: float = 1.0

    def __post_init__(self) -> None:
        _check("overload_clear_margin_fraction", self.overload_clear_margin_fraction, 0.0, 0.5)
        _check("overload_clear_hold_s", self.overload_clear_hold_s, 0.0)
        _check("travel_raise_fraction", self.travel_raise_fraction, 0.0, 1.0, open_low=True)
        _check("travel_clear_fraction", self.travel_clear_fraction, 0.0, 1.0)
        if not self.travel_clear_fraction < self.travel_raise_fraction:
            raise ParameterError(
                f"travel_clear_fraction = {self.travel_clear_fraction!r}: must be below "
                f"travel_raise_fraction = {self.travel_raise_fraction!r} (hysteresis)"
            )
        for name in ("nis_window", "nis_raise_windows", "nis_clear_windows"):
            value = getattr(self, name)
            if not (isinstance(value, int) and not isinstance(value, bool) and value >= 1):
                raise ParameterError(f"{name} = {value!r}: must be an integer >= 1")
        _check("nis_level", self.nis_level, 0.0, 1.0, open_low=True)
        if self.nis_level >= 1.0:
            raise ParameterError(f"nis_level = {self.nis_level!r}: must be below 1, e.g. 0.99")
        _check("nis_min_used_fraction", self.nis_min_used_fraction, 0.0, 1.0)
        _check("loss_window_s", self.loss_window_s, 0.0, open_low=True)
        _check("loss_raise_fraction", self.loss_raise_fraction, 0.0, 1.0)
        _check("loss_clear_fraction", self.loss_clear_fraction, 0.0, 1.0)
        if not self.loss_clear_fraction < self.loss_raise_fraction:
            raise ParameterError(
                f"loss_clear_fraction = {self.loss_clear_fraction!r}: must be below "
                f"loss_raise_fraction = {self.loss_raise_fraction!r} (hysteresis)"
            )
        _check("stall_timeout_s", self.stall_timeout_s, 0.0, open_low=True)
        _check("stall_clear_after_s", self.stall_clear_after_s, 0.0)
        _check("drift_raise_fraction", self.drift_raise_fraction, 0.0, 1.0, open_low=True)
        _check("drift_clear_fraction", self.drift_clear_fraction, 0.0, 1.0)
        if not self.drift_clear_fraction < self.drift_raise_fraction:
            raise ParameterError(
                f"drift_clear_fraction = {self.drift_clear_fraction!r}: must be below "
                f"drift_raise_fraction = {self.drift_raise_fraction!r} (hysteresis)"
            )
        _check("drift_unloaded_fraction", self.drift_unloaded_fraction, 0.0, 1.0)
        if not self.drift_unloaded_fraction > self.drift_raise_fraction:
            raise ParameterError(
                f"drift_unloaded_fraction = {self.drift_unloaded_fraction!r}: must exceed "
                f"drift_raise_fraction = {self.drift_raise_fraction!r}, or drift never shows"
            )
        _check("drift_hold_s", self.drift_hold_s, 0.0)


@dataclass(frozen=True)
class AlarmChange:
    """One alarm transition.

    Attributes:
        alarm_id: one of :data:`ALARM_IDS`.
        event: ``"raised"`` or ``"cleared"``.
        index: stream position of the sample at which it happened (for a stall, of the
            first sample after the silence began).
        time_s: when it happened, s, on the clock named by ``clock``.
        clock: ``"device"`` (the sample's device time) or ``"host"`` (host receive
            time; the stalled-stream alarm).
        severity: one of :data:`SEVERITIES`.
        message: what happened, with numbers and units.
        value: the measured quantity that decided it (unit ``unit``).
        limit: the threshold it was compared with (unit ``unit``).
        unit: unit of ``value`` and ``limit``.
    """

    alarm_id: str
    event: str
    index: int
    time_s: float
    clock: str
    severity: str
    message: str
    value: float
    limit: float
    unit: str

    def event_fields(self) -> dict[str, Any]:
        """The fields of an ``alarm`` event in a run's log (the message is separate)."""
        return {
            "alarm": self.alarm_id,
            "event": self.event,
            "index": self.index,
            "time_s": self.time_s,
            "clock": self.clock,
            "severity": self.severity,
            "value": self.value,
            "limit": self.limit,
            "unit": self.unit,
        }


@dataclass(frozen=True)
class ActiveAlarm:
    """An alarm that is raised now.

    Attributes:
        alarm_id, severity, message: as in the :class:`AlarmChange` that raised it.
        raised_index, raised_time_s, clock: where and when it was raised.
        acknowledged: the operator has seen it (the condition may still hold).
    """

    alarm_id: str
    severity: str
    message: str
    raised_index: int
    raised_time_s: float
    clock: str
    acknowledged: bool = False


@dataclass
class _Block:
    """One block as the detectors see it."""

    est: np.ndarray  # ESTIMATE_DTYPE (n,)
    samples: np.ndarray  # fields seq, host_time_s (n,)
    pos: np.ndarray  # stream positions, int64 (n,)
    tares: list[int] = field(default_factory=list)  # offsets in the block, sorted


def _change(
    alarm_id: str,
    event: str,
    index: int,
    time_s: float,
    message: str,
    value: float,
    limit: float,
    unit: str,
    clock: str = "device",
) -> AlarmChange:
    return AlarmChange(
        alarm_id,
        event,
        int(index),
        float(time_s),
        clock,
        _SEVERITY[alarm_id],
        message,
        float(value),
        float(limit),
        unit,
    )


def _edges(state: np.ndarray, state0: bool) -> tuple[np.ndarray, np.ndarray]:
    """Offsets where a latched state turns on, and where it turns off."""
    prev = np.concatenate(([state0], state[:-1]))
    return np.flatnonzero(state & ~prev), np.flatnonzero(~state & prev)


def _run_lengths(cond: np.ndarray, carry: int) -> np.ndarray:
    """Consecutive True samples ending at each sample (``carry`` of them before the block)."""
    n = cond.size
    idx = np.arange(n)
    last_false = np.maximum.accumulate(np.where(cond, -1, idx))
    return np.where(last_false >= 0, idx - last_false, idx + 1 + carry) * cond


class _Overload:
    """Force outside the calibrated range; clears after ``hold`` samples inside by a margin."""

    alarm_id = OVERLOAD

    def __init__(self, force_min_n: float, force_max_n: float, margin_n: float, hold: int) -> None:
        self.low, self.high, self.margin, self.hold = force_min_n, force_max_n, margin_n, hold
        self.inside_run = 0
        self.active = False

    def describe(self) -> str:
        return (
            f"overload: force outside {self.low:g} … {self.high:g} N; clears after "
            f"{self.hold} samples at least {self.margin:.3g} N inside the range"
        )

    def process(self, b: _Block) -> list[AlarmChange]:
        f = b.est["force_n"]
        finite = np.isfinite(f)
        outside = finite & ((f > self.high) | (f < self.low))
        inside = finite & (f >= self.low + self.margin) & (f <= self.high - self.margin)
        run = _run_lengths(inside, self.inside_run)
        state = _latch(outside, run >= self.hold, self.active)
        on, off = _edges(state, self.active)
        changes = []
        for i in on.tolist():
            edge = self.high if f[i] > self.high else self.low
            changes.append(
                _change(
                    OVERLOAD,
                    RAISED,
                    b.pos[i],
                    b.est["time_s"][i],
                    f"force {f[i]:.4g} N is outside the calibrated range "
                    f"{self.low:g} … {self.high:g} N",
                    f[i],
                    edge,
                    "N",
                )
            )
        for i in off.tolist():
            edge = self.high - self.margin if f[i] > 0 else self.low + self.margin
            changes.append(
                _change(
                    OVERLOAD,
                    CLEARED,
                    b.pos[i],
                    b.est["time_s"][i],
                    f"force {f[i]:.4g} N has stayed within {self.low + self.margin:.4g} … "
                    f"{self.high - self.margin:.4g} N for {self.hold} samples "
                    f"(range less a {self.margin:.3g} N margin)",
                    f[i],
                    edge,
                    "N",
                )
            )
        self.active = bool(state[-1])
        self.inside_run = int(run[-1])
        return changes


class _Travel:
    """Displacement near the mechanical stop; clears after ``hold`` samples well away."""

    alarm_id = TRAVEL

    def __init__(
        self, travel_m: float, raise_fraction: float, clear_fraction: float, hold: int
    ) -> None:
        self.travel = travel_m
        self.raise_fraction, self.clear_fraction = raise_fraction, clear_fraction
        self.raise_m = raise_fraction * travel_m
        self.clear_m = clear_fraction * travel_m
        self.hold = hold
        self.inside_run = 0
        self.active = False

    def describe(self) -> str:
        return (
            f"travel: |displacement| ≥ {self.raise_m * 1e6:.4g} µm "
            f"({self.raise_fraction * 100:g} % of the {self.travel * 1e6:.4g} µm travel to the "
            f"stop); clears after {self.hold} samples below {self.clear_m * 1e6:.4g} µm"
        )

    def process(self, b: _Block) -> list[AlarmChange]:
        x = np.abs(b.est["displacement_m"])
        finite = np.isfinite(x)
        run = _run_lengths(finite & (x <= self.clear_m), self.inside_run)
        state = _latch(finite & (x >= self.raise_m), run >= self.hold, self.active)
        on, off = _edges(state, self.active)
        changes = []
        for i in on.tolist():
            changes.append(
                _change(
                    TRAVEL,
                    RAISED,
                    b.pos[i],
                    b.est["time_s"][i],
                    f"displacement {x[i] * 1e6:.4g} µm is {100 * x[i] / self.travel:.3g} % of the "
                    f"{self.travel * 1e6:.4g} µm travel to the mechanical stop "
                    f"(limit {self.raise_fraction * 100:g} %)",
                    x[i],
                    self.raise_m,
                    "m",
                )
            )
        for i in off.tolist():
            changes.append(
                _change(
                    TRAVEL,
                    CLEARED,
                    b.pos[i],
                    b.est["time_s"][i],
                    f"displacement has stayed below {self.clear_m * 1e6:.4g} µm "
                    f"({self.clear_fraction * 100:g} % of the travel) for {self.hold} samples",
                    x[i],
                    self.clear_m,
                    "m",
                )
            )
        self.active = bool(state[-1])
        self.inside_run = int(run[-1])
        return changes


class _Mismatch:
    """Windowed NIS outside its chi-square band for several windows in a row."""

    alarm_id = MISMATCH

    def __init__(self, s: AlarmSettings) -> None:
        self.window = s.nis_window
        self.level = s.nis_level
        self.raise_after = s.nis_raise_windows
        self.clear_after = s.nis_clear_windows
        self.min_used = max(1, math.ceil(s.nis_min_used_fraction * s.nis_window))
        self.rest = np.zeros(0, ESTIMATE_DTYPE)
        self.rest_first = 0  # stream position of rest[0]
        self.out_run = 0
        self.in_run = 0
        self.active = False

    def describe(self) -> str:
        return (
            f"model-mismatch: mean NIS of {self.window} samples outside its "
            f"{self.level * 100:g} % chi-square band for {self.raise_after} windows in a row; "
            f"clears after {self.clear_after} windows inside"
        )

    def process(self, b: _Block) -> list[AlarmChange]:
        rows = np.concatenate((self.rest, b.est))
        first = self.rest_first
        mean, used = windowed_nis(rows, self.window)
        full = mean.size * self.window
        self.rest = rows[full:].copy()
        self.rest_first = first + full
        if mean.size == 0:
            return []
        low, high = nis_band(used, self.level)
        changes = []
        for w in range(mean.size):
            if used[w] < self.min_used:
                continue  # too few samples to judge; runs are left as they are
            outside = not (low[w] <= mean[w] <= high[w])
            self.out_run = self.out_run + 1 if outside else 0
            self.in_run = 0 if outside else self.in_run + 1
            end = (w + 1) * self.window - 1
            t_end = float(rows["time_s"][end])
            index = first + end
            if not self.active and self.out_run >= self.raise_after:
                self.active = True
                side = "larger" if mean[w] > high[w] else "smaller"
                cause = (
                    "the cell does not behave like its profile (plant changed, wrong profile, "
                    "or a load faster than the observer's tuning)"
                    if side == "larger"
                    else "the measurement is quieter than the profile says"
                )
                edge = high[w] if side == "larger" else low[w]
                changes.append(
                    _change(
                        MISMATCH,
                        RAISED,
                        index,
                        t_end,
                        f"mean NIS {mean[w]:.3g} over {int(used[w])} samples is outside its "
                        f"{self.level * 100:g} % band {low[w]:.3g} … {high[w]:.3g} for "
                        f"{self.out_run} windows in a row: innovations {side} than the model "
                        f"expects; {cause}",
                        mean[w],
                        edge,
                        "1",
                    )
                )
            elif self.active and self.in_run >= self.clear_after:
                self.active = False
                changes.append(
                    _change(
                        MISMATCH,
                        CLEARED,
                        index,
                        t_end,
                        f"mean NIS {mean[w]:.3g} back within {low[w]:.3g} … {high[w]:.3g} "
                        f"for {self.in_run} windows in a row",
                        mean[w],
                        high[w],
                        "1",
                    )
                )
        return changes


class _Loss:
    """Lost or empty samples among the last ``window`` expected samples.

    Each received sample occupies one slot of the stream; a jump of the sequence number
    by ``d > 1`` leaves ``d − 1`` empty slots before it (a device restart, where the
    number goes back, leaves none). Over the last ``window`` slots, the lost count is
    the slots minus the samples received with a measurement. Integer arithmetic only,
    so the counts do not depend on block boundaries.
    """

    alarm_id = LOSS

    def __init__(self, window: int, raise_fraction: float, clear_fraction: float) -> None:
        self.window = window
        self.raise_fraction = raise_fraction
        self.clear_fraction = clear_fraction
        self.tail_slot = np.zeros(0, np.int64)
        self.tail_good = np.zeros(0, np.int64)
        self.last_seq: int | None = None
        self.next_slot = 0
        self.active = False

    def describe(self) -> str:
        return (
            f"sample-loss: more than {self.raise_fraction * 100:g} % of the last "
            f"{self.window} samples lost or empty; clears at {self.clear_fraction * 100:g} %"
        )

    def process(self, b: _Block) -> list[AlarmChange]:
        seq = b.samples["seq"].astype(np.int64)
        n = seq.size
        prev = np.concatenate(([seq[0] - 1 if self.last_seq is None else self.last_seq], seq[:-1]))
        skipped = np.clip(seq - prev - 1, 0, None)
        slot = self.next_slot + np.cumsum(skipped + 1) - 1
        good = (b.est["flags"] & FLAG_MISSING) == 0
        good &= np.isfinite(b.est["force_n"])
        all_slot = np.concatenate((self.tail_slot, slot))
        all_good = np.concatenate((self.tail_good, good.astype(np.int64)))
        cum = np.cumsum(all_good)
        start = np.searchsorted(all_slot, slot - self.window, side="right")
        k = self.tail_slot.size + np.arange(n)
        received_good = cum[k] - np.where(start > 0, cum[np.maximum(start - 1, 0)], 0)
        slots = np.minimum(self.window, slot + 1)
        lost = slots - received_good
        fraction = lost / self.window
        state = _latch(
            fraction > self.raise_fraction, fraction <= self.clear_fraction, self.active
        )
        on, off = _edges(state, self.active)
        changes = []
        for i in on.tolist():
            changes.append(
                _change(
                    LOSS,
                    RAISED,
                    b.pos[i],
                    b.est["time_s"][i],
                    f"{lost[i]} of the last {self.window} samples ({fraction[i] * 100:.3g} %) "
                    f"were lost or empty; limit {self.raise_fraction * 100:g} %",
                    fraction[i],
                    self.raise_fraction,
                    "1",
                )
            )
        for i in off.tolist():
            changes.append(
                _change(
                    LOSS,
                    CLEARED,
                    b.pos[i],
                    b.est["time_s"][i],
                    f"{lost[i]} of the last {self.window} samples ({fraction[i] * 100:.3g} %) "
                    f"lost or empty, at or below {self.clear_fraction * 100:g} %",
                    fraction[i],
                    self.clear_fraction,
                    "1",
                )
            )
        self.active = bool(state[-1])
        keep = all_slot > slot[-1] - self.window
        self.tail_slot = all_slot[keep].copy()
        self.tail_good = all_good[keep].copy()
        self.last_seq = int(seq[-1])
        self.next_slot = int(slot[-1]) + 1
        return changes


class _Stall:
    """No sample for longer than a timeout of host time."""

    alarm_id = STALL

    def __init__(self, timeout_s: float, clear_after_s: float) -> None:
        self.timeout = timeout_s
        self.clear_after = clear_after_s
        self.last_host = math.nan  # latest host receive time seen, s
        self.resumed = math.nan  # host time at which samples came back, s
        self.next_pos = 0
        self.active = False

    def describe(self) -> str:
        return (
            f"stalled-stream: no sample for more than {self.timeout:g} s (host clock); "
            f"clears once samples have flowed again for {self.clear_after:g} s"
        )

    def _raise(self, index: int) -> AlarmChange:
        self.active = True
        self.resumed = math.nan
        t = self.last_host + self.timeout
        return _change(
            STALL,
            RAISED,
            index,
            t,
            f"no sample received for more than {self.timeout:g} s (last at "
            f"{self.last_host:.3f} s host time)",
            self.timeout,
            self.timeout,
            "s",
            clock="host",
        )

    def tick(self, now_s: float) -> list[AlarmChange]:
        if self.active or not math.isfinite(self.last_host):
            return []
        if now_s - self.last_host > self.timeout:
            return [self._raise(self.next_pos)]
        return []

    def process(self, b: _Block) -> list[AlarmChange]:
        host = b.samples["host_time_s"].astype(float)
        known = np.flatnonzero(np.isfinite(host))
        self.next_pos = int(b.pos[-1]) + 1
        if known.size == 0:
            return []
        h = host[known]
        if math.isfinite(self.last_host):
            h = np.maximum.accumulate(np.concatenate(([self.last_host], h)))[1:]
        else:
            h = np.maximum.accumulate(h)
        prev = np.concatenate(([self.last_host], h[:-1]))
        with np.errstate(invalid="ignore"):
            silences = np.flatnonzero(h - prev > self.timeout)
        changes = []
        a = 0
        for stop in [*silences.tolist(), h.size]:
            # samples a..stop−1 arrive without a long silence: a clear may fall among them
            if self.active and a < stop:
                if math.isnan(self.resumed):
                    self.resumed = float(h[a])
                target = self.resumed + self.clear_after
                j = a + int(np.searchsorted(h[a:stop], target, side="left"))
                if j < stop:
                    flowed = float(h[j]) - self.resumed
                    self.active = False
                    self.resumed = math.nan
                    changes.append(
                        _change(
                            STALL,
                            CLEARED,
                            b.pos[known[j]],
                            h[j],
                            f"samples have flowed again for {flowed:.3g} s "
                            f"(at least {self.clear_after:g} s needed)",
                            flowed,
                            self.clear_after,
                            "s",
                            clock="host",
                        )
                    )
            if stop == h.size:
                break
            # a silence longer than the timeout ends at sample `stop`
            self.last_host = float(prev[stop])
            if not self.active:
                changes.append(self._raise(int(b.pos[known[stop]])))
            self.resumed = float(h[stop])
            a = stop
        self.last_host = float(h[-1])
        return changes


class _Drift:
    """The unloaded, settled reading has moved away from the zero of the last tare.

    After a tare the pipeline reads the unloaded cell as 0 N, so the drift is the
    settled reading itself whenever it lies within ``unloaded_n`` of zero. The alarm
    raises after ``hold`` consecutive such samples beyond ``raise_n``, clears after
    ``hold`` consecutive ones within ``clear_n``, and clears at a new tare.
    """

    alarm_id = DRIFT

    def __init__(
        self,
        monitor: SettlingMonitor,
        raise_n: float,
        clear_n: float,
        unloaded_n: float,
        hold: int,
        *,
        shared: bool = False,
    ) -> None:
        self.monitor = monitor
        #: True when the monitor is fed by its owner before the alarms see a block: its
        #: ``last_trace`` is then read, not computed a second time
        self.shared = shared
        self.raise_n, self.clear_n, self.unloaded_n = raise_n, clear_n, unloaded_n
        self.hold = hold
        self.beyond_run = 0
        self.within_run = 0
        self.active = False

    def describe(self) -> str:
        hold_s = self.hold / self.monitor.sample_rate_hz
        return (
            f"zero-drift: settled reading within ±{self.unloaded_n:.3g} N of zero (taken as "
            f"the unloaded cell) beyond ±{self.raise_n:.3g} N for {hold_s:g} s; clears within "
            f"±{self.clear_n:.3g} N for {hold_s:g} s, or at a new tare"
        )

    def process(self, b: _Block) -> list[AlarmChange]:
        if self.shared:
            trace = self.monitor.last_trace
            if trace.state.size != b.est.size:
                raise ParameterError(
                    "zero-drift alarm: the shared settling monitor has not been fed this "
                    f"block ({trace.state.size} rows for {b.est.size}); feed it first"
                )
        else:
            _, trace = self.monitor.update_with_trace(b.est)
        mean = trace.mean_n
        with np.errstate(invalid="ignore"):
            unloaded = (trace.state == STATES.index(SETTLED)) & (np.abs(mean) <= self.unloaded_n)
            beyond = unloaded & (np.abs(mean) >= self.raise_n)
            within = unloaded & (np.abs(mean) <= self.clear_n)
        n = mean.size
        changes = []
        cuts = [0, *b.tares, n]
        for k in range(len(cuts) - 1):
            a, z = cuts[k], cuts[k + 1]
            if k > 0:  # a tare applies from sample a on: the zero is new
                self.beyond_run = self.within_run = 0
                if self.active:
                    self.active = False
                    changes.append(
                        _change(
                            DRIFT,
                            CLEARED,
                            b.pos[a],
                            b.est["time_s"][a],
                            "zero set again (tare)",
                            0.0,
                            self.clear_n,
                            "N",
                        )
                    )
            if z <= a:
                continue
            up = _run_lengths(beyond[a:z], self.beyond_run)
            down = _run_lengths(within[a:z], self.within_run)
            state = _latch(up >= self.hold, down >= self.hold, self.active)
            on, off = _edges(state, self.active)
            hold_s = self.hold / self.monitor.sample_rate_hz
            for i in on.tolist():
                m = mean[a + i]
                changes.append(
                    _change(
                        DRIFT,
                        RAISED,
                        b.pos[a + i],
                        b.est["time_s"][a + i],
                        f"unloaded reading {m:.4g} N has drifted from the zero of the last tare "
                        f"by more than {self.raise_n:.3g} N for {hold_s:g} s; "
                        "unload the cell and set the zero again",
                        m,
                        self.raise_n,
                        "N",
                    )
                )
            for i in off.tolist():
                m = mean[a + i]
                changes.append(
                    _change(
                        DRIFT,
                        CLEARED,
                        b.pos[a + i],
                        b.est["time_s"][a + i],
                        f"unloaded reading {m:.4g} N within {self.clear_n:.3g} N of zero "
                        f"for {hold_s:g} s",
                        m,
                        self.clear_n,
                        "N",
                    )
                )
            self.active = bool(state[-1])
            self.beyond_run = int(up[-1])
            self.within_run = int(down[-1])
        return changes


class AlarmSet:
    """Every alarm of one stream, fed block by block.

    Args:
        sample_rate_hz: nominal sample rate, Hz (turns the settings' seconds into
            sample counts).
        force_min_n, force_max_n: calibrated range, N (profile ``[limits]``).
        travel_m: distance to the mechanical stop, m, or None (no travel alarm).
        settings: thresholds; :class:`AlarmSettings` defaults when None.
        rule: settling rule that decides when the unloaded reading is settled (zero
            drift); by default ``SettlingRule.for_range(force_min_n, force_max_n)``.
        tares: stream positions at which a zero (tare) applied (a replay passes the
            recorded ones; a live run calls :meth:`tare_at`).
        monitor: a settling monitor, with the same rule and rate, that its owner feeds
            each block before the alarms: the zero-drift alarm then reads its trace
            instead of computing the same one again (default: a monitor of its own).
    """

    def __init__(
        self,
        sample_rate_hz: float,
        force_min_n: float,
        force_max_n: float,
        *,
        travel_m: float | None = None,
        settings: AlarmSettings | None = None,
        rule: SettlingRule | None = None,
        tares: Iterable[int] = (),
        monitor: SettlingMonitor | None = None,
    ) -> None:
        _check("sample_rate_hz", sample_rate_hz, 0.0, open_low=True)
        _check("force_min_n", force_min_n, -math.inf)
        _check("force_max_n", force_max_n, -math.inf)
        if not force_min_n < force_max_n:
            raise ParameterError(
                f"force_min_n = {force_min_n!r}: must be below force_max_n = {force_max_n!r}"
            )
        if travel_m is not None:
            _check("travel_m", travel_m, 0.0, open_low=True)
        self.settings = s = settings if settings is not None else AlarmSettings()
        if not isinstance(s, AlarmSettings):
            raise ParameterError(f"settings = {settings!r}: must be an AlarmSettings")
        self.sample_rate_hz = fs = float(sample_rate_hz)
        self.rule = rule if rule is not None else SettlingRule.for_range(force_min_n, force_max_n)
        span = force_max_n - force_min_n
        shared = monitor is not None
        if monitor is None:
            monitor = SettlingMonitor(
                self.rule, fs, force_min_n=force_min_n, force_max_n=force_max_n
            )
        clear_hold = max(1, round(s.overload_clear_hold_s * fs))
        detectors: list[Any] = [
            _Overload(
                force_min_n, force_max_n, s.overload_clear_margin_fraction * span, clear_hold
            )
        ]
        if travel_m is not None:
            detectors.append(
                _Travel(travel_m, s.travel_raise_fraction, s.travel_clear_fraction, clear_hold)
            )
        detectors += [
            _Mismatch(s),
            _Loss(
                max(1, round(s.loss_window_s * fs)), s.loss_raise_fraction, s.loss_clear_fraction
            ),
            _Stall(s.stall_timeout_s, s.stall_clear_after_s),
            _Drift(
                monitor,
                s.drift_raise_fraction * span,
                s.drift_clear_fraction * span,
                s.drift_unloaded_fraction * span,
                max(1, round(s.drift_hold_s * fs)),
                shared=shared,
            ),
        ]
        self._detectors = detectors
        self._stall: _Stall = next(d for d in detectors if isinstance(d, _Stall))
        self._pos = 0
        self._tares: list[int] = []
        self._active: dict[str, ActiveAlarm] = {}
        for index in tares:
            self.tare_at(index)

    @classmethod
    def for_profile(
        cls,
        profile: CellProfile,
        settings: AlarmSettings | None = None,
        *,
        rule: SettlingRule | None = None,
        tares: Iterable[int] = (),
        monitor: SettlingMonitor | None = None,
    ) -> AlarmSet:
        """The alarms of a cell profile (rate from ``[acquisition]``, range from ``[limits]``)."""
        lim = profile.limits
        return cls(
            profile.acquisition.sample_rate_hz,
            lim.force_min_n,
            lim.force_max_n,
            travel_m=lim.travel_m,
            settings=settings,
            rule=rule,
            tares=tares,
            monitor=monitor,
        )

    # ------------------------------------------------------------------ queries
    @property
    def samples_seen(self) -> int:
        """How many samples have been fed."""
        return self._pos

    def describe(self) -> list[str]:
        """One line per alarm: its rule and thresholds, for the user."""
        return [d.describe() for d in self._detectors]

    def active(self) -> list[ActiveAlarm]:
        """The alarms raised now, in the order of :data:`ALARM_IDS`."""
        return [self._active[i] for i in ALARM_IDS if i in self._active]

    def acknowledge(self, alarm_id: str) -> bool:
        """Mark an active alarm as seen; True if it was active.

        Acknowledging does not clear the alarm: it stays active until its condition
        clears. Raises ParameterError for an unknown id.
        """
        if alarm_id not in ALARM_IDS:
            raise ParameterError(
                f"alarm_id = {alarm_id!r}: unknown; known ids: {', '.join(ALARM_IDS)}"
            )
        alarm = self._active.get(alarm_id)
        if alarm is None:
            return False
        self._active[alarm_id] = ActiveAlarm(
            alarm.alarm_id,
            alarm.severity,
            alarm.message,
            alarm.raised_index,
            alarm.raised_time_s,
            alarm.clock,
            acknowledged=True,
        )
        return True

    # ------------------------------------------------------------------ feeding
    def tare_at(self, index: int) -> None:
        """A zero (tare) applies from stream position ``index`` on (``Tare.index``)."""
        if isinstance(index, bool) or not isinstance(index, int | np.integer):
            raise ParameterError(f"tare index = {index!r}: must be an integer stream position")
        if index < self._pos:
            raise ParameterError(
                f"tare index = {index}: samples up to {self._pos - 1} are already judged; "
                "a tare applies from the next sample on"
            )
        self._tares.append(int(index))
        self._tares.sort()

    def update(self, estimates: np.ndarray, samples: np.ndarray) -> list[AlarmChange]:
        """Feed one block; returns its alarm transitions in stream order.

        Args:
            estimates: ``ESTIMATE_DTYPE`` array, shape (n,).
            samples: the same n samples, a structured array with at least the fields
                ``seq`` (sequence number) and ``host_time_s`` (host receive time, s;
                NaN where unknown), e.g. a ``daq.samples.SAMPLE_DTYPE`` block.
        """
        if not isinstance(estimates, np.ndarray) or estimates.dtype != ESTIMATE_DTYPE:
            dtype = getattr(estimates, "dtype", type(estimates).__name__)
            raise ParameterError(
                f"estimates have dtype {dtype}; pass an estimator.observer.ESTIMATE_DTYPE array"
            )
        names = getattr(getattr(samples, "dtype", None), "names", None) or ()
        if "seq" not in names or "host_time_s" not in names:
            raise ParameterError(
                f"samples have fields {names}; pass a sample block with 'seq' and 'host_time_s'"
            )
        est, smp = estimates.reshape(-1), samples.reshape(-1)
        if est.size != smp.size:
            raise ParameterError(
                f"{est.size} estimates but {smp.size} samples: pass the estimates of these samples"
            )
        n = est.size
        if n == 0:
            return []
        pos = self._pos + np.arange(n, dtype=np.int64)
        end = self._pos + n
        tares = sorted({t - self._pos for t in self._tares if t < end})
        self._tares = [t for t in self._tares if t >= end]
        block = _Block(est, smp, pos, tares)
        changes = []
        for detector in self._detectors:
            changes += detector.process(block)
        self._pos = end
        return self._apply(changes)

    def tick(self, now_s: float) -> list[AlarmChange]:
        """Tell the alarms the host time now, s (same clock as ``host_time_s``).

        Call it only after every sample received up to ``now_s`` has been fed. Raises
        the stalled-stream alarm when the last sample is older than the timeout; the
        transition carries the same time and position as a replay finds later.
        """
        if not (isinstance(now_s, int | float) and math.isfinite(now_s)):
            raise ParameterError(f"now_s = {now_s!r}: must be a finite host time in s")
        return self._apply(self._stall.tick(float(now_s)))

    def _apply(self, changes: list[AlarmChange]) -> list[AlarmChange]:
        order = {alarm_id: i for i, alarm_id in enumerate(ALARM_IDS)}
        changes.sort(key=lambda c: (c.index, order[c.alarm_id]))
        for c in changes:
            if c.event == RAISED:
                self._active[c.alarm_id] = ActiveAlarm(
                    c.alarm_id, c.severity, c.message, c.index, c.time_s, c.clock
                )
            else:
                self._active.pop(c.alarm_id, None)
        return changes
