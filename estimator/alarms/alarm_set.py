"""`AlarmSet`: every alarm of a cell on one live stream, in a stable order."""

from __future__ import annotations

import math
from collections.abc import Iterable
from typing import TYPE_CHECKING, Any

import numpy as np

from estimator.alarms.definitions import (
    ALARM_IDS,
    RAISED,
    ActiveAlarm,
    AlarmChange,
    AlarmSettings,
    _check,
)
from estimator.alarms.detectors import _Block, _Drift, _Loss, _Mismatch, _Overload, _Stall, _Travel
from estimator.alarms.ringdown import RingdownWatch
from estimator.errors import ParameterError
from estimator.monitor import SettlingMonitor, SettlingRule
from estimator.observer import ESTIMATE_DTYPE

if TYPE_CHECKING:
    from estimator.plant import Plant
    from estimator.profile import CellProfile


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
        plant: the cell's model; with ``noise_m``, the ring-down after each load change
            is checked against its fn and ζ (model-mismatch alarm). None: not checked.
        noise_m: standard deviation of the readings, m (transducer noise and
            quantisation).
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
        plant: Plant | None = None,
        noise_m: float | None = None,
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
        ring = None
        if plant is not None and noise_m is not None:
            _check("noise_m", noise_m, 0.0, open_low=True)
            ring = RingdownWatch(
                plant.natural_freq_hz,
                plant.damping_ratio,
                fs,
                noise_m,
                s.ring_fn_tolerance,
                s.ring_zeta_tolerance,
                s.ring_min_amplitude,
            )
        detectors += [
            _Mismatch(s, ring),
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
        tr = profile.transducer
        return cls(
            profile.acquisition.sample_rate_hz,
            lim.force_min_n,
            lim.force_max_n,
            travel_m=lim.travel_m,
            settings=settings,
            rule=rule,
            tares=tares,
            monitor=monitor,
            plant=profile.plant,
            noise_m=math.sqrt(tr.noise_m**2 + tr.resolution_m**2 / 12.0),
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
