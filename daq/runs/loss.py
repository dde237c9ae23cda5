"""Telling a crash mid-flush from data lost: an unclosed run's streams and events checked
against each other.

A run that was never closed (crash, power cut) has lost at most what was waiting for the
next flush: the writer writes and fsyncs every stream and the event log together, at most
``FLUSH_INTERVAL_MAX_S`` apart. So, in an unclosed run,

* the sample and estimate streams (appended together, one estimate per sample stamped with
  the sample's device time) end within one flush interval of each other, and
* no event names a sample index beyond the samples on disk by more than that,

and anything beyond is data lost after the fact (a file cut, a copy gone wrong), not the
crash. To stay clear of false alarms the allowance is two flushes: the samples of twice
the run's flush interval (``run.json``
``flush_interval_s``; ``FLUSH_INTERVAL_MAX_S`` for runs that predate it) at the run's own
rate (from the median step of its device clock), plus one.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np

__all__ = ["lost_data_problems"]

#: Flush intervals of data a crash may leave unwritten, with room for a pipeline that fell
#: behind its samples for a moment (a flush then carries more than its interval of data).
_SLACK = 2.0


def _per_flush(device_time_s: np.ndarray, flush_interval_s: float) -> int | None:
    """Records in one flush interval at the run's rate; None if unknown."""
    if device_time_s.size < 2:
        return None
    step = float(np.median(np.diff(device_time_s[-min(device_time_s.size, 10_000) :])))
    if not (math.isfinite(step) and step > 0):
        return None
    return math.ceil(_SLACK * flush_interval_s / step) + 1


def lost_data_problems(
    where: str,
    flush_interval_s: float,
    streams: Mapping[str, np.ndarray],
    events: Sequence[Mapping[str, Any]],
) -> list[str]:
    """What an unclosed run lost beyond one flush, one sentence each (empty: nothing)."""
    samples = streams.get("samples")
    if samples is None or "device_time_s" not in (samples.dtype.names or ()):
        return []
    allowance = _per_flush(np.asarray(samples["device_time_s"], dtype=float), flush_interval_s)
    if allowance is None:
        return []
    n = int(samples.size)
    problems = []
    estimates = streams.get("estimates")
    if (
        estimates is not None
        and "time_s" in (estimates.dtype.names or ())
        and n
        and estimates.size
    ):
        # one estimate per sample, stamped with the sample's device time: the two streams
        # end within one flush of each other
        t_samples = float(samples["device_time_s"][-1])
        t_estimates = float(estimates["time_s"][-1])
        if abs(t_estimates - t_samples) > _SLACK * flush_interval_s:
            problems.append(
                f"{where}: data lost: samples.bin ends at device time {t_samples:.6g} s "
                f"({n} records) and estimates.bin at {t_estimates:.6g} s "
                f"({int(estimates.size)} records); a crash leaves them at most "
                f"{_SLACK * flush_interval_s:g} s apart (flushes of {flush_interval_s:g} s), "
                "so records were removed after the recording"
            )
    indices = [
        ev["index"]
        for ev in events
        if isinstance(ev.get("index"), int) and not isinstance(ev.get("index"), bool)
    ]
    if indices and max(indices) >= n + allowance:
        problems.append(
            f"{where}: data lost: an event names sample {max(indices)} but samples.bin ends "
            f"at {n} records, more than a crash can lose ({allowance} records); records "
            "were removed after the recording"
        )
    return problems
