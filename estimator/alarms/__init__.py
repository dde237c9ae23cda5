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
    (:mod:`estimator.consistency`) for several windows in a row, or the cell's ring-down
    after several load changes in a row has an fn or ζ off the profile's
    (:mod:`estimator.alarms.ringdown`); clears after several windows in a row inside and
    several ring-downs that agree.
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

The package: ids, severities and settings (`definitions`), one detector per alarm
(`detectors`), the ring-down fits of the model-mismatch alarm (`ringdown`), and the set
that runs them (`alarm_set`).
"""

from __future__ import annotations

from estimator.alarms.alarm_set import AlarmSet
from estimator.alarms.definitions import (
    ALARM_EVENT,
    ALARM_IDS,
    CLEARED,
    DRIFT,
    LOSS,
    MISMATCH,
    OVERLOAD,
    RAISED,
    SEVERITIES,
    STALL,
    TRAVEL,
    ActiveAlarm,
    AlarmChange,
    AlarmSettings,
)

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
