"""The one path from samples to force estimates, shared by live runs and replays.

`EstimationPipeline` takes sample blocks (``daq.samples.SAMPLE_DTYPE``) in stream
order and returns estimate blocks (``estimator.observer.ESTIMATE_DTYPE``), one row per
sample. Live acquisition feeds it blocks as they arrive and records both the samples
and the estimates; a replay feeds the recorded samples, in blocks of any size, through
a fresh pipeline built from the recorded profile and the recorded tare events. Because
the observer's output does not depend on how the stream is cut into blocks, the
replayed estimates are bit-identical to the ones computed live.

Zero (tare): the transducer's zero offset and a constant force cannot be told apart,
so the zero is set explicitly with the cell unloaded and at rest. `tare` takes the mean
raw displacement of the most recent samples as the new offset; it applies from the
next sample on, whose position in the stream is stored with the offset in a ``tare``
event. At that sample the observer restarts from scratch on the re-zeroed displacement.

Device restart: when the device clock goes back (the device rebooted and its counter
started again), the observer restarts at that sample and an ``observer-restart`` event
is logged. Replays find the same samples from the recorded times alone.
"""

from __future__ import annotations

import math
from collections import deque
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np

from daq.samples import SAMPLE_DTYPE, TIME_MAX_S
from estimator.alarms import ALARM_EVENT, AlarmSet
from estimator.monitor import SETTLING_EVENT, SettlingMonitor, SettlingRule, StateChange
from estimator.observer import ESTIMATE_DTYPE, ForceObserver, concat_estimates

if TYPE_CHECKING:
    from estimator.profile import CellProfile

__all__ = [
    "ESTIMATE_STREAM",
    "ESTIMATE_UNITS",
    "RESTART_EVENT",
    "TARE_EVENT",
    "EstimationPipeline",
    "Tare",
    "estimate_samples",
    "prepare_estimator",
    "tares_from_events",
]

#: Name of the run stream holding the estimates computed live.
ESTIMATE_STREAM = "estimates"
#: Units of each ESTIMATE_DTYPE field (force_u_n is a standard uncertainty, k = 1).
ESTIMATE_UNITS: dict[str, str] = {
    "time_s": "s",
    "force_n": "N",
    "force_u_n": "N",
    "displacement_m": "m",
    "velocity_m_s": "m/s",
    "innovation_m": "m",
    "nis": "1",
    "p_hold": "1",
    "p_rate": "1",
    "p_jump": "1",
    "flags": "1",
}
#: Event kind recording a zero (tare).
TARE_EVENT = "tare"
#: Event kind recording that the device clock went back and the observer restarted.
RESTART_EVENT = "observer-restart"

_TARE_WINDOW_S = 0.1  # default averaging time of a tare, s
_TARE_HISTORY_S = 5.0  # how far back a tare requested earlier can reach, s


@dataclass(frozen=True)
class Tare:
    """A zero offset applied from one sample of the stream on (inclusive).

    Attributes:
        index: position in the stream (0 = the run's first sample) of the first sample read
            against the new zero; positions, unlike sequence numbers, survive a device
            restart.
        offset_m: raw displacement subtracted from every later sample, m.
        n_samples: how many samples were averaged to find the offset.
        seq: sequence number of that first sample as expected when the zero was set
            (for people reading the event log).
    """

    index: int
    offset_m: float
    n_samples: int = 0
    seq: int | None = None

    def event_fields(self) -> dict[str, Any]:
        """The fields stored in the run's ``tare`` event."""
        return {
            "index": self.index,
            "seq": self.seq,
            "offset_m": self.offset_m,
            "n_samples": self.n_samples,
        }


def _whole(value: object) -> bool:
    """A JSON whole number >= 0 (not a bool, not a float such as 1e999)."""
    return isinstance(value, int) and not isinstance(value, bool) and value >= 0


def _real(value: object) -> bool:
    return isinstance(value, int | float) and not isinstance(value, bool)


def tares_from_events(events: Iterable[Mapping[str, Any]]) -> list[Tare]:
    """The tares stored in a run's event log, in stream order.

    Raises ValueError naming the event and the field if a ``tare`` event's ``index``,
    ``offset_m``, ``n_samples`` or ``seq`` is missing or of the wrong kind.
    """
    tares = []
    for i, ev in enumerate(events):
        if ev.get("kind") != TARE_EVENT:
            continue
        index, offset = ev.get("index"), ev.get("offset_m")
        n_samples, seq = ev.get("n_samples", 0), ev.get("seq")
        problem = None
        if not _whole(index):
            problem = f"index {index!r} is not a sample number (a whole number >= 0)"
        elif not (_real(offset) and math.isfinite(offset)):
            problem = f"offset_m {offset!r} is not a finite number of metres"
        elif not _whole(n_samples):
            problem = f"n_samples {n_samples!r} is not a whole number >= 0"
        elif seq is not None and not _whole(seq):
            problem = f"seq {seq!r} is not a sequence number"
        if problem:
            raise ValueError(f"event {i} (tare): {problem}; the run's event log is damaged")
        tares.append(Tare(index, float(offset), n_samples, seq))
    return sorted(tares, key=lambda t: t.index)


#: how long the compiled kernels may take to load before a session says it is compiling
_PREPARE_NOTICE_S = 1.0


def prepare_estimator(profile: CellProfile, say: Any = print) -> None:
    """Compile (or load from numba's cache) every kernel a live session runs: the
    observer's and the settling monitor's, by a throwaway pipeline over a few samples at
    rest. From the cache this takes a fraction of a second; the first session after an
    install compiles them (about 20 s on a 2-core machine), and ``say`` is told so when
    the wait passes `_PREPARE_NOTICE_S`, so that nobody takes the silence for a hang."""
    import threading

    from daq.samples import empty_block

    text = "preparing the estimator: compiling its kernels (once after an install, about 20 s)..."
    notice = threading.Timer(_PREPARE_NOTICE_S, say, args=(text,))
    notice.daemon = True
    notice.start()
    try:
        block = empty_block(64)
        block["seq"] = np.arange(64)
        block["device_time_s"] = np.arange(64) / profile.acquisition.sample_rate_hz
        block["host_time_s"] = block["device_time_s"]
        EstimationPipeline(profile).process(block)
    finally:
        notice.cancel()


class EstimationPipeline:
    """Samples in, force estimates out, with zero (tare) and optional recording.

    Args:
        profile: the cell profile the observer is built from.
        recorder: when given, an object with ``append(block, stream=...)`` and
            ``event(kind, message, **fields)`` (a ``daq.runs.RunWriter``); every sample
            block and its estimates are appended, and tares are logged.
        tares: tares to apply at their sequence numbers (a replay passes the recorded
            ones; a live run starts with none and calls `tare`).
        tare_window_s: averaging time of `tare`, s.
    """

    def __init__(
        self,
        profile: CellProfile,
        *,
        recorder: Any = None,
        tares: Sequence[Tare] = (),
        tare_window_s: float = _TARE_WINDOW_S,
        watch: bool = True,
    ) -> None:
        if not (math.isfinite(tare_window_s) and tare_window_s > 0):
            raise ValueError(f"tare_window_s = {tare_window_s!r}: must be a number > 0 s")
        self.profile = profile
        self.observer = ForceObserver.from_profile(profile)
        self.observer.warm_up()  # before any port opens: no sample waits for the compiler
        self.recorder = recorder
        self.monitor: SettlingMonitor | None = None
        self.alarms: AlarmSet | None = None
        if watch:
            lim = profile.limits
            rule = SettlingRule.for_range(lim.force_min_n, lim.force_max_n)
            self.monitor = SettlingMonitor(
                rule,
                profile.acquisition.sample_rate_hz,
                force_min_n=lim.force_min_n,
                force_max_n=lim.force_max_n,
            )
            # the zero-drift alarm reads the settling monitor's trace (fed first, in _watch)
            self.alarms = AlarmSet.for_profile(profile, rule=rule, monitor=self.monitor)
        #: State changes and alarm transitions of the last `process` or `tick` call.
        self.last_changes: list[Any] = []
        self._pending = deque(sorted(tares, key=lambda t: t.index))
        self.offset_m = 0.0
        self.tares_applied: list[Tare] = []
        n_window = max(1, round(tare_window_s * profile.acquisition.sample_rate_hz))
        # Raw displacement and host receive time of the last few seconds, for `tare`.
        self._recent: deque[np.ndarray] = deque()
        self._recent_n = 0
        self._history = max(n_window, round(_TARE_HISTORY_S * profile.acquisition.sample_rate_hz))
        self._window = n_window
        self._last_seq: int | None = None
        self._t_last: float | None = None
        self.samples_in = 0
        #: Times the device clock went back and the observer started afresh.
        self.restarts = 0
        self._totals = dict.fromkeys(
            ("samples", "rejected", "suspect", "missing", "gaps", "jumps"), 0
        )

    # ---------------------------------------------------------------- feeding
    def process(self, block: np.ndarray) -> np.ndarray:
        """Estimate force for `block` (SAMPLE_DTYPE, shape (n,)); returns ESTIMATE_DTYPE (n,)."""
        if not isinstance(block, np.ndarray) or block.dtype != SAMPLE_DTYPE:
            dtype = getattr(block, "dtype", type(block).__name__)
            raise ValueError(f"pipeline: block has dtype {dtype}; pass daq.samples.SAMPLE_DTYPE")
        if block.size == 0:
            return np.zeros(0, ESTIMATE_DTYPE)
        first = self.samples_in  # stream position of block[0]
        far = np.abs(block["device_time_s"]) >= TIME_MAX_S
        if far.any():  # damage, not a clock: its sample intervals would overflow
            i = int(np.nonzero(far)[0][0])
            raise ValueError(
                f"sample {first + i} (seq {int(block['seq'][i])}): device_time_s = "
                f"{float(block['device_time_s'][i])!r} s is {TIME_MAX_S:g} s or more from zero "
                "(over 30 000 years): not a device clock (damaged data)"
            )
        parts = []
        # Cut the block where the device clock goes back (a device restart: the observer
        # starts afresh) and where a zero applies.
        t = block["device_time_s"]
        restart_at = {int(i) for i in np.flatnonzero(t[1:] <= t[:-1]) + 1}
        if self._t_last is not None and t[0] <= self._t_last:
            restart_at.add(0)
        tares: dict[int, Tare] = {}
        while self._pending and self._pending[0].index < first + block.size:
            tare = self._pending.popleft()
            tares[max(0, tare.index - first)] = tare
        start = 0
        for cut in sorted(restart_at | tares.keys()):
            if cut > start:
                parts.append(self._estimate(block[start:cut]))
                start = cut
            if cut in restart_at:
                self._restart(block[cut])
            if cut in tares:
                self._apply(tares[cut])
        parts.append(self._estimate(block[start:]))
        est = parts[0] if len(parts) == 1 else concat_estimates(parts)
        self._remember(block)
        self._t_last = float(t[-1])
        if self.recorder is not None:
            self.recorder.append(block)
            self.recorder.append(est, ESTIMATE_STREAM)
        self.samples_in += block.size
        self._watch(est, block)
        return est

    def _watch(self, est: np.ndarray, block: np.ndarray) -> None:
        """Feed the settling monitor and the alarms; log their transitions."""
        changes: list[Any] = []
        if self.monitor is not None:
            changes += self.monitor.update(est)
        if self.alarms is not None:
            changes += self.alarms.update(est, block)
        self._log_changes(changes)

    def tick(self, now_s: float) -> list[Any]:
        """Tell the alarms the host time (s, the samples' clock) when no sample came."""
        if self.alarms is None:
            return []
        changes = self.alarms.tick(now_s)
        self._log_changes(changes)
        return changes

    def _log_changes(self, changes: list[Any]) -> None:
        self.last_changes = changes
        if self.recorder is None:
            return
        for c in changes:
            if isinstance(c, StateChange):
                kind, message = SETTLING_EVENT, c.message()
            else:
                kind, message = ALARM_EVENT, c.message
            fields = {
                k: None if isinstance(v, float) and not math.isfinite(v) else v
                for k, v in c.event_fields().items()
            }
            self.recorder.event(kind, message, **fields)

    def _estimate(self, part: np.ndarray) -> np.ndarray:
        x = part["displacement_m"]
        if self.offset_m != 0.0:
            x = x - self.offset_m
        return self.observer.process(part["device_time_s"], x)

    def _reset_observer(self) -> None:
        c = self.observer.counters
        for name in self._totals:
            self._totals[name] += getattr(c, name)
        self.observer.reset()

    def observer_totals(self) -> dict[str, int]:
        """Observer counters (samples, rejected, suspect, missing, gaps, jumps) summed
        over every restart and zero since the pipeline was built."""
        c = self.observer.counters
        return {name: total + getattr(c, name) for name, total in self._totals.items()}

    def _restart(self, sample: np.ndarray) -> None:
        """The device clock went back (device restart): start the observer afresh."""
        self._reset_observer()
        self.restarts += 1
        if self.recorder is not None:
            self.recorder.event(
                RESTART_EVENT,
                f"device clock went back to {float(sample['device_time_s']):.6f} s "
                f"(seq {int(sample['seq'])}): observer restarted",
                seq=int(sample["seq"]),
            )

    def _apply(self, tare: Tare) -> None:
        if self.alarms is not None:
            self.alarms.tare_at(tare.index)
        self.offset_m = tare.offset_m
        self._reset_observer()
        self.tares_applied.append(tare)

    def _remember(self, block: np.ndarray) -> None:
        self._recent.append(block[["host_time_s", "displacement_m"]].copy())
        self._recent_n += block.size
        while self._recent and self._recent_n - self._recent[0].size >= self._history:
            self._recent_n -= self._recent.popleft().size
        self._last_seq = int(block["seq"][-1])

    @property
    def next_offset_m(self) -> float:
        """The zero the next sample will be read against (a pending tare included), m."""
        return self._pending[-1].offset_m if self._pending else self.offset_m

    @property
    def last_seq(self) -> int | None:
        """Sequence number of the last sample processed (None before the first)."""
        return self._last_seq

    @property
    def last_device_time_s(self) -> float | None:
        """Device time of the last sample processed, s (None before the first)."""
        return self._t_last

    # ------------------------------------------------------------------- zero
    def tare(self, offset_m: float | None = None, *, requested_s: float | None = None) -> Tare:
        """Zero from the next sample on; returns the tare (logged as a ``tare`` event).

        Without `offset_m`: the mean raw displacement of the last `tare_window_s` of
        samples, which is only valid with the cell unloaded and at rest (the caller
        confirms that with the operator). `requested_s`, on the samples' host clock, is
        when the operator asked: only samples received by then are averaged, so a load
        applied while the request waited is not taken for the zero. Raises ValueError
        before any sample has arrived or when no valid sample qualifies. With
        `offset_m`: that offset, m (a zero carried over from before a recording began).
        """
        if offset_m is not None:
            if not math.isfinite(offset_m):
                raise ValueError(f"tare: offset_m = {offset_m!r} is not a finite number")
            seq = None if self._last_seq is None else self._last_seq + 1
            tare = Tare(self.samples_in, float(offset_m), 0, seq)
            message = f"zero carried over: {tare.offset_m:.6e} m"
        else:
            if self._last_seq is None:
                raise ValueError("cannot zero yet: no sample has arrived; wait for data")
            recent = np.concatenate(list(self._recent))
            if requested_s is not None and math.isfinite(requested_s):
                recent = recent[~(recent["host_time_s"] > requested_s)]  # NaN times stay
            x = recent["displacement_m"][-self._window :]
            finite = x[np.isfinite(x)]
            if finite.size == 0:
                raise ValueError("cannot zero: no valid displacement received before the request")
            tare = Tare(self.samples_in, float(np.mean(finite)), int(finite.size),
                        self._last_seq + 1)  # fmt: skip
            message = f"zero set to {tare.offset_m:.6e} m from {tare.n_samples} samples"
        self._pending.append(tare)
        if self.recorder is not None:
            self.recorder.event(TARE_EVENT, message, **tare.event_fields())
        return tare


def estimate_samples(
    profile: CellProfile,
    samples: np.ndarray,
    tares: Sequence[Tare] = (),
    *,
    block_size: int = 200_000,
) -> np.ndarray:
    """Replay `samples` (SAMPLE_DTYPE, (n,)) through a fresh pipeline; ESTIMATE_DTYPE (n,)."""
    pipeline = EstimationPipeline(profile, tares=tares)
    parts = [
        pipeline.process(np.asarray(samples[i : i + block_size]))
        for i in range(0, samples.size, block_size)
    ]
    return concat_estimates(parts) if parts else np.zeros(0, ESTIMATE_DTYPE)
