"""The alarms' ids, severities and settings, and what a transition or an active alarm is."""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

from estimator.errors import ParameterError

if TYPE_CHECKING:
    pass


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
        ring_fn_tolerance, ring_zeta_tolerance: a ring-down after a load change whose
            fitted fn or ζ is off the profile's by more than this fraction (and by more
            than four of its standard uncertainties) disagrees with the profile.
        ring_min_amplitude: ringing, in noise standard deviations, a ring-down needs to
            be judged.
        ring_raise_checks: consecutive ring-downs that disagree that raise the
            model-mismatch alarm.
        ring_clear_checks: consecutive ring-downs that agree that clear it.
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
    ring_fn_tolerance: float = 0.03
    ring_zeta_tolerance: float = 0.25
    ring_min_amplitude: float = 30.0
    ring_raise_checks: int = 2
    ring_clear_checks: int = 2
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
        for name in (
            "nis_window",
            "nis_raise_windows",
            "nis_clear_windows",
            "ring_raise_checks",
            "ring_clear_checks",
        ):
            value = getattr(self, name)
            if not (isinstance(value, int) and not isinstance(value, bool) and value >= 1):
                raise ParameterError(f"{name} = {value!r}: must be an integer >= 1")
        _check("nis_level", self.nis_level, 0.0, 1.0, open_low=True)
        if self.nis_level >= 1.0:
            raise ParameterError(f"nis_level = {self.nis_level!r}: must be below 1, e.g. 0.99")
        _check("nis_min_used_fraction", self.nis_min_used_fraction, 0.0, 1.0)
        _check("ring_fn_tolerance", self.ring_fn_tolerance, 0.0, 1.0, open_low=True)
        _check("ring_zeta_tolerance", self.ring_zeta_tolerance, 0.0, 1.0, open_low=True)
        _check("ring_min_amplitude", self.ring_min_amplitude, 0.0, open_low=True)
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
