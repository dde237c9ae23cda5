"""Acquisition and estimation on their own thread, for the dashboard.

`AcquisitionWorker` runs a `ui.session.LiveSession` (and, when no port is given, the
built-in simulated cell) on a daemon thread. The window never calls the session
directly: it queues commands (record, mark, zero, stop) that the worker carries out
between two polls, reads a `WorkerStatus` snapshot, and draws from the shared
`TraceBuffer`. Nothing here imports Qt.
"""

from __future__ import annotations

import queue
import threading
import time
from collections import deque
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from ui.dashboard.buffer import TraceBuffer

if TYPE_CHECKING:
    from estimator.profile import CellProfile

__all__ = ["AcquisitionWorker", "SimulatedSource", "WorkerStatus"]

_POLL_S = 0.02  # time between two polls of the session, s


@dataclass(frozen=True)
class SimulatedSource:
    """The built-in simulated cell (invented data): load programme, speed, faults, seed."""

    programme: str = ""  # empty: the demo programme
    speed: float = 1.0
    faults: str = ""
    seed: int = 0
    loop: bool = True


@dataclass(frozen=True)
class WorkerStatus:
    """What the window shows, as of the last poll."""

    state: str = "starting"  # connecting, connected, reconnecting, stopped, failed
    port: str = ""
    rate_hz: float | None = None
    drift_ppm: float | None = None
    samples: int = 0
    lost: int = 0
    rejected: int = 0
    recording: str = ""  # run id while recording
    recording_folder: str = ""
    time_s: float = float("nan")
    force_n: float = float("nan")
    force_u_n: float = float("nan")  # combined standard uncertainty u_c (k = 1)
    displacement_m: float = float("nan")
    settling: str = "waiting"  # the settling monitor's state
    settling_rule: str = ""  # the rule, in words
    valid_since_s: float | None = None  # when the current reading became valid
    alarms: tuple[tuple[str, str, str, bool], ...] = ()  # (id, severity, message, acknowledged)
    messages: tuple[str, ...] = field(default_factory=tuple)  # the latest ones, oldest first
    message_total: int = 0  # messages said since the start (the window shows the new ones)
    error: str = ""


class AcquisitionWorker:
    """A live session on a background thread, fed by a port or the simulated cell.

    Args:
        profile: cell profile.
        port: serial port; None for the built-in simulated cell.
        buffer: where the traces go (time is kept increasing across device restarts).
        runs_root: folder that recordings are created under.
        simulated: options of the simulated cell (used when `port` is None).
    """

    def __init__(
        self,
        profile: CellProfile,
        port: str | None,
        buffer: TraceBuffer,
        *,
        runs_root: Path = Path("recordings"),
        simulated: SimulatedSource | None = None,
    ) -> None:
        self.profile = profile
        self.port = port
        self.buffer = buffer
        self.runs_root = Path(runs_root)
        self.simulated = simulated or SimulatedSource()
        self._commands: queue.Queue[tuple[str, tuple[Any, ...]]] = queue.Queue()
        self._status = WorkerStatus(port=port or "built-in simulated cell")
        self._messages: deque[str] = deque(maxlen=50)
        self._message_total = 0
        self._lock = threading.Lock()
        self._stop = threading.Event()
        self._thread: threading.Thread | None = None
        self._t_offset = 0.0
        self._t_last: float | None = None
        self.session: Any = None

    # ------------------------------------------------------------- control
    def start(self) -> AcquisitionWorker:
        """Start the thread (once); returns self."""
        if self._thread is None:
            self._thread = threading.Thread(target=self._run, name="acquisition", daemon=True)
            self._thread.start()
        return self

    def stop(self, timeout_s: float = 10.0) -> None:
        """Stop acquiring; a recording in progress is closed cleanly first."""
        self._stop.set()
        if self._thread is not None:
            self._thread.join(timeout_s)

    @property
    def running(self) -> bool:
        """True while the thread is alive."""
        return self._thread is not None and self._thread.is_alive()

    def status(self) -> WorkerStatus:
        """The latest snapshot (cheap; safe from any thread)."""
        with self._lock:
            return self._status

    def start_recording(self, note: str = "", tags: tuple[str, ...] = ()) -> None:
        """Queue: begin a recording under `runs_root`."""
        self._commands.put(("record", (note, tags)))

    def stop_recording(self) -> None:
        """Queue: seal the recording."""
        self._commands.put(("stop-record", ()))

    def mark(self, text: str = "") -> None:
        """Queue: mark the run at the latest sample."""
        self._commands.put(("mark", (text,)))

    def tare(self) -> None:
        """Queue: zero on the latest samples (the caller has confirmed: cell unloaded)."""
        self._commands.put(("tare", (time.monotonic(),)))  # the samples' host clock

    def acknowledge(self, alarm_id: str) -> None:
        """Queue: acknowledge an active alarm (it stays until its condition clears)."""
        self._commands.put(("ack", (alarm_id,)))

    # -------------------------------------------------------------- thread
    def _say(self, text: str) -> None:
        stamp = time.strftime("%H:%M:%S")
        self._messages.append(f"{stamp} {text}")
        self._message_total += 1

    def _run(self) -> None:
        cell = None
        try:
            port = self.port
            if port is None:
                cell = self._make_cell()
                port = cell.port_name
            self._loop(port, cell)
        except Exception as exc:  # shown in the window; the thread must not die silently
            self._say(f"acquisition stopped: {exc}")
            self._publish(state="failed", error=str(exc))
        finally:
            if cell is not None:
                cell.stop()

    def _make_cell(self) -> Any:
        from daq.programme import demo_programme, parse_programme
        from daq.simulator import PtyCell
        from ui.wiring import parse_faults, simulated_cell_for

        sim = self.simulated
        programme = parse_programme(sim.programme) if sim.programme else demo_programme()
        model = simulated_cell_for(self.profile, seed=sim.seed)
        return PtyCell(
            model.generate(programme),
            speed=sim.speed,
            loop=sim.loop,
            regenerate=lambda rep: model.generate(programme, seed=sim.seed + rep),
            framing=self.profile.acquisition.framing,
            faults=parse_faults(sim.faults),
        )

    def _loop(self, port: str, cell: Any) -> None:
        from ui.session import LiveSession

        session = LiveSession(self.profile, port)
        self.session = session
        session.start()
        started_cell = False
        try:
            while not self._stop.is_set():
                started = time.monotonic()
                got = session.poll()
                if cell is not None and not started_cell and session.connected_once:
                    cell.start()
                    started_cell = True
                for ev in got.events:
                    self._say(f"{ev.kind}: {ev.message}")
                for change in got.changes:
                    if getattr(change, "alarm_id", None):
                        self._say(f"alarm {change.event}: {change.message}")
                self._run_commands(session)
                if got.samples.size:
                    self._push(got.samples, got.estimates, session)
                self._publish_session(session)
                # Poll about 50 times a second: bigger blocks cost less per sample and
                # leave the interpreter to the window more often (2 cores, one GIL).
                self._stop.wait(max(0.0, _POLL_S - (time.monotonic() - started)))
        finally:
            if session.recording is not None:
                summary = session.stop_recording(reason="window closed")
                self._say(f"recording closed: {summary['samples']} samples")
            session.close()
            self._publish_session(session, state="stopped")

    def _run_commands(self, session: Any) -> None:
        while True:
            try:
                name, args = self._commands.get_nowait()
            except queue.Empty:
                return
            try:
                if name == "record":
                    rec = session.start_recording(self.runs_root, note=args[0], tags=args[1])
                    self._say(f"recording to {rec.folder}")
                elif name == "stop-record":
                    summary = session.stop_recording(reason="stopped by the operator")
                    self._say(
                        f"recording closed: {summary['samples']} samples, "
                        f"lost {summary['samples_lost']}"
                    )
                elif name == "mark":
                    seq = session.mark(args[0])
                    self._say(f"mark at seq {seq}" if seq is not None else "mark (no data yet)")
                elif name == "ack":
                    alarms = session.pipeline.alarms
                    if alarms is not None and alarms.acknowledge(args[0]):
                        self._say(f"alarm {args[0]} acknowledged")
                elif name == "tare":
                    tare = session.tare(requested_s=args[0])
                    self._say(f"zero set: {tare.offset_m * 1e3:.6f} mm ({tare.n_samples} samples)")
            except ValueError as exc:
                self._say(f"{name} refused: {exc}")

    def _push(self, samples: np.ndarray, est: np.ndarray, session: Any) -> None:
        t = est["time_s"].astype(float)
        # Keep the plotted time increasing across device restarts (clock going back).
        step = 1.0 / self.profile.acquisition.sample_rate_hz
        prev = np.empty_like(t)
        prev[0] = t[0] - step if self._t_last is None else self._t_last - self._t_offset
        prev[1:] = t[:-1]
        jump = np.where(t <= prev, prev - t + step, 0.0)
        t = t + self._t_offset + np.cumsum(jump)
        self._t_offset += float(jump.sum())
        self._t_last = float(t[-1])
        k = self.profile.plant.stiffness_n_per_m
        static = k * (samples["displacement_m"] - session.pipeline.offset_m)
        self.buffer.append(
            np.vstack([t, est["displacement_m"], est["force_n"], self._u_combined(est), static])
        )

    def _rule_text(self, monitor: Any) -> str:
        """The settling rule in words (fixed for a session: worded once)."""
        if monitor is None:
            return ""
        if getattr(self, "_rule", None) is None:
            self._rule = monitor.describe()
        return self._rule

    def _u_combined(self, est: np.ndarray) -> np.ndarray:
        """Combined standard uncertainty (GUM: observer, calibration, resolution), N."""
        from estimator.uncertainty import ForceUncertainty

        if getattr(self, "_budget", None) is None:
            self._budget = ForceUncertainty.from_profile(self.profile)
        return self._budget.combined_n(est["force_n"], est["force_u_n"])

    def _publish_session(self, session: Any, state: str | None = None) -> None:
        st = session.reader.stats()
        last = self.buffer.latest(1)
        rec = session.recording
        monitor, alarms = session.pipeline.monitor, session.pipeline.alarms
        self._publish(
            settling=monitor.state if monitor is not None else "",
            settling_rule=self._rule_text(monitor),
            valid_since_s=monitor.valid_since_s if monitor is not None else None,
            alarms=tuple(
                (a.alarm_id, a.severity, a.message, a.acknowledged) for a in alarms.active()
            )
            if alarms is not None
            else (),
            state=state or session.reader.state,
            rate_hz=st.rate_hz,
            drift_ppm=st.drift_ppm,
            samples=self.buffer.total,
            lost=st.decoder.samples_lost,
            rejected=st.decoder.rejected,
            recording=rec.run_id if rec is not None else "",
            recording_folder=str(rec.folder) if rec is not None else "",
            time_s=float(last[0, -1]) if last.shape[1] else float("nan"),
            force_n=float(last[2, -1]) if last.shape[1] else float("nan"),
            force_u_n=float(last[3, -1]) if last.shape[1] else float("nan"),
            displacement_m=float(last[1, -1]) if last.shape[1] else float("nan"),
        )

    def _publish(self, **changes: Any) -> None:
        with self._lock:
            values = {
                **self._status.__dict__,
                **changes,
                "messages": tuple(self._messages),
                "message_total": self._message_total,
            }
            self._status = WorkerStatus(**values)
