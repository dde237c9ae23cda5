"""One detector per alarm, each with its hysteresis, on blocks of the live stream."""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import TYPE_CHECKING

import numpy as np

from estimator.alarms.definitions import (
    _SEVERITY,
    CLEARED,
    DRIFT,
    LOSS,
    MISMATCH,
    OVERLOAD,
    RAISED,
    STALL,
    TRAVEL,
    AlarmChange,
    AlarmSettings,
)
from estimator.alarms.ringdown import RingdownWatch
from estimator.consistency import nis_band, windowed_nis
from estimator.errors import ParameterError
from estimator.monitor import SETTLED, STATES, SettlingMonitor, _latch
from estimator.observer import ESTIMATE_DTYPE, FLAG_JUMP, FLAG_MISSING

if TYPE_CHECKING:
    pass


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
    """The cell does not behave like its model, by either of two kinds of evidence:

    * the windowed NIS outside its chi-square band for several windows in a row (clears
      after several inside): innovations larger or smaller than the model expects;
    * the ring-down after a load change fitted with fn or ζ off the profile's, for several
      load changes in a row (clears after as many that agree; `ringdown.RingdownWatch`).

    The alarm is raised while either holds; the transition carries the message of the
    evidence that decided it.
    """

    alarm_id = MISMATCH

    def __init__(self, s: AlarmSettings, ring: RingdownWatch | None = None) -> None:
        self.window = s.nis_window
        self.level = s.nis_level
        self.raise_after = s.nis_raise_windows
        self.clear_after = s.nis_clear_windows
        self.min_used = max(1, math.ceil(s.nis_min_used_fraction * s.nis_window))
        self.ring = ring
        self.ring_raise_after = s.ring_raise_checks
        self.ring_clear_after = s.ring_clear_checks
        self.rest = np.zeros(0, ESTIMATE_DTYPE)
        self.rest_first = 0  # stream position of rest[0]
        self.out_run = 0
        self.in_run = 0
        self.nis_active = False
        self.ring_off_run = 0
        self.ring_ok_run = 0
        self.ring_active = False
        self.active = False
        # band of each count of used samples, computed once (scipy's χ² quantile costs
        # ~150 µs a call: 4 % of a core at 50 kHz when called for every block)
        self.bands: dict[int, tuple[float, float]] = {}

    def describe(self) -> str:
        text = (
            f"model-mismatch: mean NIS of {self.window} samples outside its "
            f"{self.level * 100:g} % chi-square band for {self.raise_after} windows in a row; "
            f"clears after {self.clear_after} windows inside"
        )
        if self.ring is not None:
            text += (
                f"; or {self.ring.describe()}, after {self.ring_raise_after} load changes in "
                f"a row; clears after {self.ring_clear_after} that agree"
            )
        return text

    def process(self, b: _Block) -> list[AlarmChange]:
        # (index, order, raise?, change) of each source's own transitions, merged below
        events = self._nis_events(b) + self._ring_events(b)
        events.sort(key=lambda e: (e[0], e[1]))
        changes = []
        for _, order, raised, change in events:
            if order == 0:
                self.nis_active = raised
            else:
                self.ring_active = raised
            now = self.nis_active or self.ring_active
            if now != self.active:
                self.active = now
                changes.append(change)
        return changes

    def _nis_events(self, b: _Block) -> list[tuple[int, int, bool, AlarmChange]]:
        rows = np.concatenate((self.rest, b.est))
        first = self.rest_first
        mean, used = windowed_nis(rows, self.window)
        full = mean.size * self.window
        self.rest = rows[full:].copy()
        self.rest_first = first + full
        events: list[tuple[int, int, bool, AlarmChange]] = []
        active = self.nis_active
        for w in range(mean.size):
            if used[w] < self.min_used:
                continue  # too few samples to judge; runs are left as they are
            band = self.bands.get(int(used[w]))
            if band is None:
                band = tuple(float(v) for v in nis_band(int(used[w]), self.level))
                self.bands[int(used[w])] = band
            low, high = band
            outside = not (low <= mean[w] <= high)
            self.out_run = self.out_run + 1 if outside else 0
            self.in_run = 0 if outside else self.in_run + 1
            end = (w + 1) * self.window - 1
            t_end = float(rows["time_s"][end])
            index = first + end
            if not active and self.out_run >= self.raise_after:
                active = True
                side = "larger" if mean[w] > high else "smaller"
                cause = (
                    "the cell does not behave like its profile (plant changed, wrong profile, "
                    "or a load faster than the observer's tuning)"
                    if side == "larger"
                    else "the measurement is quieter than the profile says"
                )
                edge = high if side == "larger" else low
                message = (
                    f"mean NIS {mean[w]:.3g} over {int(used[w])} samples is outside its "
                    f"{self.level * 100:g} % band {low:.3g} … {high:.3g} for "
                    f"{self.out_run} windows in a row: innovations {side} than the model "
                    f"expects; {cause}"
                )
                change = _change(MISMATCH, RAISED, index, t_end, message, mean[w], edge, "1")
                events.append((index, 0, True, change))
            elif active and self.in_run >= self.clear_after:
                active = False
                message = (
                    f"mean NIS {mean[w]:.3g} back within {low:.3g} … {high:.3g} "
                    f"for {self.in_run} windows in a row"
                )
                change = _change(MISMATCH, CLEARED, index, t_end, message, mean[w], high, "1")
                events.append((index, 0, False, change))
        return events

    def _ring_events(self, b: _Block) -> list[tuple[int, int, bool, AlarmChange]]:
        if self.ring is None:
            return []
        names = b.samples.dtype.names or ()
        reading = (
            b.samples["displacement_m"] if "displacement_m" in names else b.est["displacement_m"]
        )
        jump = (b.est["flags"] & FLAG_JUMP) != 0
        checks = self.ring.feed(b.pos, b.est["time_s"], reading, jump)
        events: list[tuple[int, int, bool, AlarmChange]] = []
        active = self.ring_active
        ring = self.ring
        for c in checks:
            self.ring_off_run = 0 if c.agrees else self.ring_off_run + 1
            self.ring_ok_run = self.ring_ok_run + 1 if c.agrees else 0
            f = c.fit
            fitted = f"fn {f.fn_hz:.4g} Hz, ζ {f.zeta:.3g}"
            profile = f"fn {ring.fn_hz:.4g} Hz, ζ {ring.zeta:.3g}"
            zeta_off = abs(f.zeta - ring.zeta) > ring.zeta_tolerance * ring.zeta
            value, limit, unit = (
                (f.zeta, ring.zeta, "1") if zeta_off else (f.fn_hz, ring.fn_hz, "Hz")
            )
            if not active and self.ring_off_run >= self.ring_raise_after:
                active = True
                message = (
                    f"the cell rang after the last {self.ring_off_run} load changes with "
                    f"{fitted}; the profile says {profile}: the cell does not behave like "
                    "its profile (plant changed or wrong profile); identify it again"
                )
                change = _change(MISMATCH, RAISED, c.index, c.time_s, message, value, limit, unit)
                events.append((c.index, 1, True, change))
            elif active and self.ring_ok_run >= self.ring_clear_after:
                active = False
                message = (
                    f"the ring-downs after the last {self.ring_ok_run} load changes agree "
                    f"with the profile ({fitted}; profile {profile})"
                )
                change = _change(MISMATCH, CLEARED, c.index, c.time_s, message, value, limit, unit)
                events.append((c.index, 1, False, change))
        return events


class _Loss:
    """Lost or empty samples among the last ``window`` expected samples.

    Each received sample occupies one slot of the stream; a jump of the sequence number
    by ``d > 1`` leaves ``d − 1`` empty slots before it (a device restart, where the
    number goes back, leaves none). Over the last ``window`` slots, the lost count is
    the slots minus the samples received with a measurement. Integer arithmetic only,
    so the counts do not depend on block boundaries.

    The samples of the last window are kept in a buffer of twice its size (slot, and the
    running count of good samples up to it), compacted when full: a block costs its own
    length, not the window's (at 50 kHz the window is 50 000 samples and blocks ~25).
    """

    alarm_id = LOSS

    def __init__(self, window: int, raise_fraction: float, clear_fraction: float) -> None:
        self.window = window
        self.raise_fraction = raise_fraction
        self.clear_fraction = clear_fraction
        self.slots = np.zeros(2 * window + 64, np.int64)
        self.counts = np.zeros_like(self.slots)  # good samples received up to each slot
        self.start = self.end = 0  # the buffer's live part
        self.before = 0  # good samples received before the live part
        self.last_seq: int | None = None
        self.next_slot = 0
        self.active = False

    def _append(self, slot: np.ndarray, count: np.ndarray) -> None:
        n = slot.size
        if self.end + n > self.slots.size:  # compact (and grow for a block this long)
            live = self.end - self.start
            size = max(self.slots.size, 2 * (live + n))
            slots, counts = np.zeros(size, np.int64), np.zeros(size, np.int64)
            slots[:live] = self.slots[self.start : self.end]
            counts[:live] = self.counts[self.start : self.end]
            self.slots, self.counts, self.start, self.end = slots, counts, 0, live
        self.slots[self.end : self.end + n] = slot
        self.counts[self.end : self.end + n] = count
        self.end += n

    def describe(self) -> str:
        return (
            f"sample-loss: more than {self.raise_fraction * 100:g} % of the last "
            f"{self.window} samples lost or empty; clears at {self.clear_fraction * 100:g} %"
        )

    def process(self, b: _Block) -> list[AlarmChange]:
        seq = b.samples["seq"].astype(np.int64)
        prev = np.concatenate(([seq[0] - 1 if self.last_seq is None else self.last_seq], seq[:-1]))
        skipped = np.clip(seq - prev - 1, 0, None)
        slot = self.next_slot + np.cumsum(skipped + 1) - 1
        good = (b.est["flags"] & FLAG_MISSING) == 0
        good &= np.isfinite(b.est["force_n"])
        first = self.counts[self.end - 1] if self.end > self.start else self.before
        count = first + np.cumsum(good, dtype=np.int64)
        self._append(slot, count)
        live_slots = self.slots[self.start : self.end]
        live_counts = self.counts[self.start : self.end]
        # good samples in each sample's window: its count less the count just before it
        at = np.searchsorted(live_slots, slot - self.window, side="right")
        received_good = count - np.where(at > 0, live_counts[np.maximum(at - 1, 0)], self.before)
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
        drop = int(np.searchsorted(live_slots, slot[-1] - self.window, side="right"))
        if drop:  # out of every later window
            self.before = int(live_counts[drop - 1])
            self.start += drop
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
        self.last_device = math.nan  # device time of the sample received then, s
        self.resumed = math.nan  # host time at which samples came back, s
        self.next_pos = 0
        self.active = False

    def describe(self) -> str:
        return (
            f"stalled-stream: no sample for more than {self.timeout:g} s (host clock); "
            f"clears once samples have flowed again for {self.clear_after:g} s"
        )

    def _raise(self, index: int, last_device_s: float) -> AlarmChange:
        self.active = True
        self.resumed = math.nan
        t = self.last_host + self.timeout
        # the operator's clock is the device time on the plots; the host clock only
        # measures the silence
        last = (
            f"the last sample at device time {last_device_s:.3f} s"
            if math.isfinite(last_device_s)
            else "no device time known"
        )
        return _change(
            STALL,
            RAISED,
            index,
            t,
            f"no sample received for more than {self.timeout:g} s ({last})",
            self.timeout,
            self.timeout,
            "s",
            clock="host",
        )

    def tick(self, now_s: float) -> list[AlarmChange]:
        if self.active or not math.isfinite(self.last_host):
            return []
        if now_s - self.last_host > self.timeout:
            return [self._raise(self.next_pos, self.last_device)]
        return []

    def process(self, b: _Block) -> list[AlarmChange]:
        host = b.samples["host_time_s"].astype(float)
        known = np.flatnonzero(np.isfinite(host))
        self.next_pos = int(b.pos[-1]) + 1
        if known.size == 0:
            return []
        h = host[known]
        dev = b.est["time_s"][known].astype(float)
        prev_dev = np.concatenate(([self.last_device], dev[:-1]))
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
                changes.append(self._raise(int(b.pos[known[stop]]), float(prev_dev[stop])))
            self.resumed = float(h[stop])
            a = stop
        self.last_host = float(h[-1])
        self.last_device = float(dev[-1])
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
