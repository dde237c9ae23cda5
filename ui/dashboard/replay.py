"""A recorded run prepared for the dashboard's replay mode (no Qt here).

`RunPlayback` replays the run once through the same pipeline as the live run (its own
profile, its zero events), then serves the window whatever part of it the cursor is on:
the traces inside a time window, the reading, the settling state and the alarms active
at that sample, the run's events with their times, and the table of load changes.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from ui.dashboard.worker import WorkerStatus, rule_numbers

__all__ = ["PlaybackEvent", "RunPlayback"]


@dataclass(frozen=True)
class PlaybackEvent:
    """One event of the run's log placed on the time axis.

    Attributes:
        time_s: device time of the sample it is placed at, s.
        index: that sample's position in the run.
        kind, message: as in the run's log.
        fields: the event's other keys (e.g. ``old``/``new`` of a settling change).
    """

    time_s: float
    index: int
    kind: str
    message: str
    fields: dict[str, Any] = field(default_factory=dict, compare=False)

    def label(self) -> str:
        """Text for the event list: time, kind and message."""
        return f"{self.time_s:9.3f} s  {self.kind}: {self.message}"


class RunPlayback:
    """A run replayed once, then read at any cursor position.

    Args:
        folder: run folder.

    Attributes:
        time_s, displacement_m, force_n, force_u_n, static_force_n: traces, shape (n,).
        states: settling state of each sample (object array of str), shape (n,).
        events: the run's events with times, in time order.
        changes: the table rows of `estimator.metrics.change_table`.
        identical: whether the replayed estimates equal the recorded live ones bit for bit
            (None when the run holds none).
    """

    def __init__(self, folder: str | Path) -> None:
        from daq.runs import read_run
        from estimator.alarms import AlarmSet
        from estimator.metrics import change_table
        from estimator.monitor import STATES, SettlingMonitor, SettlingRule
        from ui.display_units import CellUnits
        from ui.pipeline import ESTIMATE_STREAM, estimate_samples, tares_from_events
        from ui.wiring import profile_from_text

        self.folder = Path(folder)
        data = read_run(self.folder)
        self.run = data
        self.profile = profile_from_text(
            data.description["profile_toml"], f"{self.folder / 'run.json'} [profile_toml]"
        )
        samples = np.asarray(data.samples)
        if samples.size < 2:
            raise ValueError(
                f"{self.folder}: the run holds {samples.size} sample(s); nothing to play"
            )
        tares = tares_from_events(data.events)
        est = estimate_samples(self.profile, samples, tares)
        live = data.streams.get(ESTIMATE_STREAM)
        self.identical = None if live is None else np.asarray(live).tobytes() == est.tobytes()
        lim = self.profile.limits
        rule = SettlingRule.for_range(lim.force_min_n, lim.force_max_n)
        monitor = SettlingMonitor(
            rule, self.profile.acquisition.sample_rate_hz,
            force_min_n=lim.force_min_n, force_max_n=lim.force_max_n,
        )  # fmt: skip
        _, trace = monitor.update_with_trace(est)
        self.states = np.asarray(STATES, dtype=object)[trace.state]
        self.rule_text = monitor.describe(CellUnits.for_profile(self.profile).force_unit)
        self.rule, self.hold_samples = rule, monitor.hold_samples
        # The observer's model probabilities per sample (p_hold, p_rate, p_jump), (3, n).
        self.model_p = np.vstack([est["p_hold"], est["p_rate"], est["p_jump"]])
        alarms = AlarmSet.for_profile(self.profile, rule=rule, tares=[t.index for t in tares])
        self.alarm_changes = alarms.update(est, samples)
        self.time_s = est["time_s"].astype(float)
        self.displacement_m = est["displacement_m"]
        self.force_n = est["force_n"]
        from estimator.uncertainty import ForceUncertainty

        # Combined standard uncertainty (GUM: observer, calibration, resolution), N.
        self.force_u_n = ForceUncertainty.from_profile(self.profile).combined_n(
            est["force_n"], est["force_u_n"]
        )
        offsets = np.zeros(samples.size)
        for tare in tares:
            offsets[tare.index :] = tare.offset_m
        k = self.profile.plant.stiffness_n_per_m
        self.static_force_n = k * (samples["displacement_m"] - offsets)
        self.seq = samples["seq"]
        self.events = self._place_events(data.events)
        ok = np.isfinite(self.force_n)
        floor = 4.0 * float(np.median(est["force_u_n"][ok])) if ok.any() else 0.0
        self.changes = change_table(
            self.time_s[ok], self.force_n[ok], self.static_force_n[ok], band_floor_n=floor
        )
        self.cursor = self.time_s.size - 1

    # --------------------------------------------------------------- layout
    @property
    def start_s(self) -> float:
        """Time of the first sample, s."""
        return float(self.time_s[0])

    @property
    def end_s(self) -> float:
        """Time of the last sample, s."""
        return float(self.time_s[-1])

    def index_at(self, time_s: float) -> int:
        """The last sample at or before `time_s` (0 before the start)."""
        return max(0, int(np.searchsorted(self.time_s, time_s, side="right")) - 1)

    def _place_events(self, events: list[dict[str, Any]]) -> list[PlaybackEvent]:
        placed = []
        n = self.time_s.size
        for ev in events:
            if ev.get("index") is not None:
                i = int(ev["index"])
            else:
                seq = ev.get("seq", ev.get("last_seq"))
                if seq is None:
                    continue
                i = int(np.searchsorted(self.seq, int(seq), side="left"))
            i = min(max(i, 0), n - 1)
            extra = {k: v for k, v in ev.items() if k not in ("kind", "message")}
            placed.append(
                PlaybackEvent(float(self.time_s[i]), i, ev["kind"], ev["message"], extra)
            )
        return sorted(placed, key=lambda e: e.index)

    # --------------------------------------------------------------- reading
    def window(self, span_s: float, end_s: float | None = None) -> np.ndarray:
        """Traces with time in [end − span, end] (end: the cursor); shape (5, m)."""
        end = float(self.time_s[self.cursor]) if end_s is None else end_s
        lo = int(np.searchsorted(self.time_s, end - span_s, side="left"))
        hi = int(np.searchsorted(self.time_s, end, side="right"))
        return np.vstack(
            [
                self.time_s[lo:hi],
                self.displacement_m[lo:hi],
                self.force_n[lo:hi],
                self.force_u_n[lo:hi],
                self.static_force_n[lo:hi],
            ]
        )

    def status(self) -> WorkerStatus:
        """The readout at the cursor, shaped like the live worker's status."""
        i = self.cursor
        state = str(self.states[i])
        valid_since = None
        if state == "settled":
            j = i
            while j > 0 and self.states[j - 1] == "settled":
                j -= 1
            valid_since = float(self.time_s[j])
        active: dict[str, tuple[str, str, str, bool, float]] = {}
        for c in self.alarm_changes:
            if c.index > i:
                break
            if c.event == "raised":
                since = self.alarm_time_s(c.index, c.clock)
                active[c.alarm_id] = (c.alarm_id, c.severity, c.message, False, since)
            else:
                active.pop(c.alarm_id, None)
        verdict = {True: "identical to live", False: "DIFFERS from live", None: "no live copy"}
        return WorkerStatus(
            state=f"estimates {verdict[self.identical]}",
            port=str(self.folder),
            samples=i + 1,
            recording=self.run.description["run_id"],
            time_s=float(self.time_s[i]),
            force_n=float(self.force_n[i]),
            force_u_n=float(self.force_u_n[i]),
            displacement_m=float(self.displacement_m[i]),
            settling=state,
            settling_rule=self.rule_text,
            rule=rule_numbers(self.rule),
            hold_samples=self.hold_samples,
            valid_since_s=valid_since,
            alarms=tuple(active.values()),
            model=tuple(float(p) for p in self.model_p[:, i]),
        )

    def alarm_time_s(self, index: int, clock: str) -> float:
        """When an alarm raised at stream position `index` began, on the device time
        axis: its sample's time, or for a host-clock alarm (the stalled stream, raised
        at the first sample after the silence) the last sample before the silence."""
        i = index - 1 if clock == "host" else index
        return float(self.time_s[min(max(i, 0), self.time_s.size - 1)])

    def expanded_u_over(self, t0_s: float, t1_s: float) -> float:
        """Median U (k = 2) of the estimates in [t0_s, t1_s], N: the U of a level held
        there (a few samples of a change within the span do not move it). NaN if the
        span holds no finite estimate."""
        lo = int(np.searchsorted(self.time_s, t0_s, side="left"))
        hi = int(np.searchsorted(self.time_s, t1_s, side="right"))
        u = self.force_u_n[lo:hi]
        u = u[np.isfinite(u)]
        return 2.0 * float(np.median(u)) if u.size else math.nan

    def seek(self, time_s: float) -> None:
        """Put the cursor on the last sample at or before `time_s`."""
        if not math.isfinite(time_s):
            raise ValueError(f"seek: time_s = {time_s!r} is not a number")
        self.cursor = self.index_at(time_s)
