"""A live acquisition session: serial reader → estimation pipeline → recording.

`LiveSession` is what ``forcelens live`` (and the benchmarks) run: it owns the reading
thread, the pipeline and the optional recording, and is polled from one consumer
thread. Each `poll` drains the samples and reader events that arrived, estimates
force, logs the events in the run and keeps the run's flush interval.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np

from ui.pipeline import EstimationPipeline, Tare

if TYPE_CHECKING:
    from daq.serial_source import ReaderEvent
    from estimator.profile import CellProfile
    from ui.recording import Recording

__all__ = ["LiveSession", "PollResult"]


@dataclass(frozen=True)
class PollResult:
    """What one `LiveSession.poll` brought: samples, their estimates and reader events."""

    samples: np.ndarray
    estimates: np.ndarray
    events: list[ReaderEvent]


class LiveSession:
    """Read a port, estimate force and record, polled from one consumer thread.

    Args:
        profile: cell profile (framing, serial settings, observer).
        port: serial port or pyserial URL to read.
        recording: an open `ui.recording.Recording`, or None for no recording.
        reader_options: extra keyword arguments for `daq.serial_source.SerialReader`.
    """

    def __init__(
        self,
        profile: CellProfile,
        port: str,
        *,
        recording: Recording | None = None,
        **reader_options: Any,
    ) -> None:
        from daq.serial_source import SerialReader
        from ui.wiring import decoder_for, port_settings_for

        self.profile = profile
        self.port = port
        self.recording = recording
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

    def start(self) -> LiveSession:
        """Start the reading thread; returns self."""
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
            if writer is not None:
                writer.event(ev.kind, ev.message, host_time_s=ev.host_time_s, last_seq=ev.last_seq)
        if samples.size:
            estimates = self.pipeline.process(samples)
        else:
            estimates = self.pipeline.process(samples[:0])
            if writer is not None:
                writer.maybe_flush()
        return PollResult(samples, estimates, events)

    def mark(self, message: str) -> int | None:
        """Log an operator mark in the run at the last sample; returns its seq (None: no data)."""
        seq = self.pipeline.last_seq
        if self.recording is not None:
            self.recording.writer.event("mark", message or "mark", seq=seq)
        return seq

    def tare(self) -> Tare:
        """Zero on the last samples (cell unloaded and at rest); logged in the run."""
        return self.pipeline.tare()

    def summary(self) -> dict[str, Any]:
        """Counters for the closing record and the final report."""
        st = self.reader.stats()
        d = st.decoder
        return {
            "samples": self.pipeline.samples_in,
            "samples_lost": d.samples_lost,
            "rejected_frames": d.rejected,
            "bytes_discarded": d.bytes_discarded,
            "seq_restarts": d.seq_restarts,
            "reconnects": st.reconnects,
            "bytes_read": st.bytes_read,
            "observer_rejected": self.pipeline.observer_totals()["rejected"],
            "observer_restarts": self.pipeline.restarts,
            "measured_rate_hz": _number_or_none(st.rate_hz),
            "drift_ppm": _number_or_none(st.drift_ppm),
        }

    def close(self, status: str = "complete", reason: str = "") -> dict[str, Any]:
        """Stop reading, estimate what is left, seal the run; returns the summary (idempotent)."""
        if not self._closed:
            self._closed = True
            try:
                self.reader.stop()
                if status != "failed":
                    self.poll()
            finally:
                summary = {"reason": reason, **self.summary()}
                if self.recording is not None:
                    self.recording.close(status, summary)
            self._summary = summary
        return self._summary


def _number_or_none(value: float | None) -> float | None:
    if value is None or not math.isfinite(value):
        return None
    return float(value)
