"""A live acquisition session: serial reader → estimation pipeline → recording.

`LiveSession` is what ``forcelens live`` (and the benchmarks) run: it owns the reading
thread, the pipeline and the optional recording, and is polled from one consumer
thread. Each `poll` drains the samples and reader events that arrived, estimates
force, logs the events in the run and keeps the run's flush interval.

The session's events (connections, alarms raised and cleared, zeros, marks, recordings
begun and closed, the end) also go, one line each, to the ``forcelens.session`` logger
(`ui.session_log`); nothing is logged per sample.
"""

from __future__ import annotations

import logging
import math
import time
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from ui.pipeline import EstimationPipeline, Tare
from ui.session_log import session_logger

if TYPE_CHECKING:
    from daq.serial_source import ReaderEvent
    from estimator.profile import CellProfile
    from ui.recording import Recording
    from ui.session_log import SessionLog

_log = session_logger()
#: Reader events worth a warning in the session log (the others are information).
_WARN_KINDS = frozenset({"disconnected", "open-failed", "unread-dropped"})

__all__ = ["POLL_PERIOD_S", "LiveSession", "PollResult"]

#: The live command polls its session at most this often: each block has a fixed cost
#: (estimator call, monitor, alarms, recorder), and polling as soon as anything arrived
#: made blocks of ~24 samples at 50 kHz. Blocks of 10 ms (500 samples) took 50 kHz binary
#: with recording from 38.0 to 35.7 % of a core (`tests/benchmarks/bench_live.py`, the
#: same hour); the dashboard polls every 20 ms.
POLL_PERIOD_S = 0.01


@dataclass(frozen=True)
class PollResult:
    """What one `LiveSession.poll` brought: samples, their estimates and reader events."""

    samples: np.ndarray
    estimates: np.ndarray
    events: list[ReaderEvent]
    #: Settling-state changes and alarm transitions found in this poll.
    changes: list[Any] = field(default_factory=list)


class LiveSession:
    """Read a port, estimate force and record, polled from one consumer thread.

    Args:
        profile: cell profile (framing, serial settings, observer).
        port: serial port or pyserial URL to read.
        recording: an open `ui.recording.Recording`, or None for no recording.
        log: the session's log file; recordings begun later move it into their folder.
        reader_options: extra keyword arguments for `daq.serial_source.SerialReader`.
    """

    def __init__(
        self,
        profile: CellProfile,
        port: str,
        *,
        recording: Recording | None = None,
        log: SessionLog | None = None,
        **reader_options: Any,
    ) -> None:
        from daq.serial_source import SerialReader
        from ui.wiring import decoder_for, port_settings_for

        self.profile = profile
        self.port = port
        self.recording = recording
        self.log = log
        self.decoder = decoder_for(profile)
        self.reader = SerialReader(
            port_settings_for(profile, port),
            self.decoder,
            nominal_rate_hz=profile.acquisition.sample_rate_hz,
            **reader_options,
        )
        self.pipeline = EstimationPipeline(
            profile, recorder=recording.writer if recording is not None else None
        )
        self.connected_once = False
        self._closed = False
        self._clock = reader_options.get("clock", time.monotonic)  # the samples' host clock
        self._baseline: dict[str, Any] = {}  # reader counters when the recording began

    def start(self) -> LiveSession:
        """Start the reading thread; returns self."""
        _log.info(
            "reading %s: cell %r, %s framing at %g Hz%s",
            self.port,
            self.profile.cell.name,
            self.profile.acquisition.framing,
            self.profile.acquisition.sample_rate_hz,
            f"; recording run {self.recording.run_id}" if self.recording is not None else "",
        )
        self.reader.start()
        return self

    def poll(self) -> PollResult:
        """Drain what arrived, estimate, record; never blocks on the port."""
        events = self.reader.drain_events()
        samples = self.reader.drain()
        writer = self.recording.writer if self.recording is not None else None
        for ev in events:
            if ev.kind in ("connected", "reconnected"):
                self.connected_once = True
            level = logging.WARNING if ev.kind in _WARN_KINDS else logging.INFO
            seq = "" if ev.last_seq is None else f" (last seq {ev.last_seq})"
            _log.log(level, "%s: %s%s", ev.kind, ev.message, seq)
            if writer is not None:
                writer.event(ev.kind, ev.message, host_time_s=ev.host_time_s, last_seq=ev.last_seq)
        if samples.size:
            estimates = self.pipeline.process(samples)
            changes = list(self.pipeline.last_changes)
        else:
            estimates = self.pipeline.process(samples[:0])
            changes = []
        # A silence (stall) is judged only when every received sample is in: when the
        # consumer lags, samples wait in the reader and the clock would run ahead of the
        # data, raising a stall a replay could never see.
        now = self._clock()
        if self.reader.stats().samples_unread == 0:
            changes += self.pipeline.tick(now)
        for change in changes:
            if getattr(change, "alarm_id", None):  # alarms; settling states stay in the run
                level = logging.WARNING if change.event == "raised" else logging.INFO
                _log.log(level, "alarm %s %s (%s): %s", change.alarm_id, change.event,
                         change.severity, change.message)  # fmt: skip
        if writer is not None:
            writer.maybe_flush()
        return PollResult(samples, estimates, events, changes)

    def mark(self, message: str) -> int | None:
        """Log an operator mark in the run at the last sample; returns its seq (None: no data)."""
        seq = self.pipeline.last_seq
        if self.recording is not None:
            self.recording.writer.event("mark", message or "mark", seq=seq)
        _log.info("mark at seq %s: %s", seq, message or "mark")
        return seq

    def tare(self, requested_s: float | None = None) -> Tare:
        """Zero on the samples received up to `requested_s` (default: now), host clock.

        The cell must be unloaded and at rest; the zero is logged in the run.
        """
        try:
            tare = self.pipeline.tare(
                requested_s=self._clock() if requested_s is None else requested_s
            )
        except ValueError as exc:
            _log.warning("zero refused: %s", exc)
            raise
        _log.info(
            "zero set: offset %.6e m from %d samples, from seq %s (sample %d)",
            tare.offset_m, tare.n_samples, tare.seq, tare.index,
        )  # fmt: skip
        return tare

    def start_recording(
        self, root: Path, *, note: str = "", tags: Sequence[str] = ()
    ) -> Recording:
        """Begin recording under `root` from the next sample on; returns the recording.

        The recording gets a fresh pipeline starting at its first sample, with the
        current zero carried over as a ``tare`` event at position 0, so that a replay
        of the run, which starts from that sample too, gives exactly the live numbers.
        The live force restarts there (the observer re-converges within ~0.1 s).
        """
        from ui.recording import open_recording

        if self.recording is not None:
            raise ValueError(f"already recording run {self.recording.run_id}; stop it first")
        recording = open_recording(root, self.profile, note=note, tags=tags,
                                   acquisition={"port": self.port})  # fmt: skip
        offset = self.pipeline.next_offset_m
        self.pipeline = EstimationPipeline(self.profile, recorder=recording.writer)
        if offset != 0.0:
            self.pipeline.tare(offset_m=offset)
        self.recording = recording
        self._baseline = self._counters()
        if self.log is not None:
            self.log.follow_run(recording.folder)
        _log.info(
            "recording run %s in %s%s", recording.run_id, recording.folder,
            f"; zero carried over: {offset:.6e} m" if offset != 0.0 else "",
        )  # fmt: skip
        return recording

    def stop_recording(self, status: str = "complete", reason: str = "") -> dict[str, Any]:
        """Seal the current recording (estimation goes on); returns its summary."""
        if self.recording is None:
            raise ValueError("not recording")
        final_tick = self._clock()
        self.pipeline.tick(final_tick)
        summary = {"reason": reason, **self.summary(), "final_tick_host_s": final_tick}
        recording, self.recording = self.recording, None
        self.pipeline.recorder = None
        try:
            recording.close(status, summary)
        except Exception as exc:
            _log.error("run %s could not be closed: %s", recording.run_id, exc)
            raise
        finally:
            _log.info("run %s closed, status %s: %s", recording.run_id, status, _counts(summary))
            if self.log is not None:
                self.log.leave_run()
        return summary

    def _counters(self) -> dict[str, Any]:
        st = self.reader.stats()
        d = st.decoder
        return {
            "samples_lost": d.samples_lost,
            "rejected_frames": d.rejected,
            "bytes_discarded": d.bytes_discarded,
            "seq_restarts": d.seq_restarts,
            "reconnects": st.reconnects,
            "bytes_read": st.bytes_read,
        }

    def summary(self) -> dict[str, Any]:
        """Counters since the recording began (or the session started), for closing records."""
        st = self.reader.stats()
        counts = {k: v - self._baseline.get(k, 0) for k, v in self._counters().items()}
        return {
            "samples": self.pipeline.samples_in,
            **counts,
            "observer_rejected": self.pipeline.observer_totals()["rejected"],
            "observer_restarts": self.pipeline.restarts,
            "measured_rate_hz": _number_or_none(st.rate_hz),
            "drift_ppm": _number_or_none(st.drift_ppm),
        }

    def close(self, status: str = "complete", reason: str = "") -> dict[str, Any]:
        """Stop reading, estimate what is left, seal the run; returns the summary (idempotent)."""
        if not self._closed:
            self._closed = True
            final_tick = None
            try:
                self.reader.stop()
                if status != "failed":
                    self.poll()
                    # A last look for a silence at the very end; a replay repeats it.
                    final_tick = self._clock()
                    self.pipeline.tick(final_tick)
            finally:
                summary = {"reason": reason, **self.summary(), "final_tick_host_s": final_tick}
                if self.recording is not None:
                    try:
                        self.recording.close(status, summary)
                    except Exception as exc:
                        _log.error("run %s could not be closed: %s", self.recording.run_id, exc)
                        raise
                    _log.info("run %s closed, status %s", self.recording.run_id, status)
                _log.log(
                    logging.ERROR if status == "failed" else logging.INFO,
                    "stopped (%s, %s): %s", status, reason or "no reason given", _counts(summary),
                )  # fmt: skip
            self._summary = summary
        return self._summary


def _counts(summary: dict[str, Any]) -> str:
    """The counters of a summary in one line, for the log."""
    names = ("samples", "samples_lost", "rejected_frames", "reconnects", "observer_restarts")
    return ", ".join(f"{name} {summary.get(name)}" for name in names)


def _number_or_none(value: float | None) -> float | None:
    if value is None or not math.isfinite(value):
        return None
    return float(value)
