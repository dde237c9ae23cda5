"""Acquisition and estimation in their own process, for the dashboard.

`AcquisitionWorker` runs a `ui.session.LiveSession` (and, when no port is given, the
built-in simulated cell) in a worker process. The window never calls the session
directly: it queues commands (record, mark, zero, acknowledge) that the worker carries
out between two polls, reads the latest `WorkerStatus` from a shared `StatusBox`, and
draws from the shared-memory `TraceBuffer`.

Why a process and not a thread: with one interpreter lock, estimation at 10 kHz kept
the window's thread waiting for the lock in the middle of its paints (gaps of ~100 ms
on 2 cores). In its own process the session competes only for a core, and a slow paint
never delays a poll. Nothing here imports Qt.
"""

from __future__ import annotations

import contextlib
import multiprocessing
import os
import pickle
import queue
import time
from collections import deque
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from ui.dashboard.buffer import PROCESS_CONTEXT, TraceBuffer, holding

if TYPE_CHECKING:
    from estimator.profile import CellProfile

__all__ = [
    "AcquisitionWorker",
    "CellProcess",
    "SimulatedSource",
    "StatusBox",
    "WorkerStatus",
    "rule_numbers",
]

_POLL_S = 0.02  # time between two polls of the session, s
_ENDED = ("stopped", "failed")
_CELL_NICENESS = 5  # the built-in simulated cell's process runs this much nicer


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
    settling_rule: str = ""  # the rule, in words (the estimator's, in N)
    # The rule's numbers (band_fraction, band_floor_n, hold_s, k, release_factor: the
    # fields of estimator.monitor.SettlingRule) for our own words. Plain numbers, not the
    # rule: unpickling that would import the estimator into the window's process (~1.4 s).
    rule: dict[str, float] | None = None
    hold_samples: int = 0  # the rule's hold window, in sample steps
    valid_since_s: float | None = None  # when the current reading became valid (plotted time)
    # (id, severity, message, acknowledged, raised at: plotted time, s)
    alarms: tuple[tuple[str, str, str, bool, float], ...] = ()
    # The observer's model probabilities (p_hold, p_rate, p_jump) at the latest estimate.
    model: tuple[float, float, float] = (float("nan"), float("nan"), float("nan"))
    messages: tuple[str, ...] = field(default_factory=tuple)  # the latest ones, oldest first
    message_total: int = 0  # messages said since the start (the window shows the new ones)
    error: str = ""


def rule_numbers(rule: Any) -> dict[str, float]:
    """The numbers of a settling rule (`estimator.monitor.SettlingRule`), as plain floats."""
    names = ("band_fraction", "band_floor_n", "hold_s", "k", "release_factor")
    return {name: float(getattr(rule, name)) for name in names}


class CellProcess:
    """The built-in simulated cell, run as ``forcelens simulate`` in a process of its own.

    A real device costs our processes nothing. The simulated one, run on threads beside
    the session, competed with it for the interpreter lock and, with the window, for 2
    cores; in its own process it is what it stands for: a device at the end of a port.
    Its samples start when `start` is called (once the session has opened the port),
    so nothing is sent before anyone listens. It stops when its standard input ends, so
    a worker that dies does not leave it running. Invented data.
    """

    def __init__(self, profile: CellProfile, simulated: SimulatedSource) -> None:
        import re
        import subprocess
        import sys
        import tempfile

        from daq.errors import SourceError
        from estimator.profile import save_profile

        self._folder = tempfile.TemporaryDirectory(prefix="forcelens-cell-profile-")
        path = Path(self._folder.name) / "cell.toml"
        save_profile(profile, path)
        sim = simulated
        cmd = [sys.executable, "-m", "ui.cli", "simulate", "--profile", str(path)]
        cmd += ["--seed", str(sim.seed), "--speed", repr(float(sim.speed))]
        cmd += ["--start-on-input"]
        cmd += ["--programme", sim.programme] if sim.programme else []
        cmd += ["--faults", sim.faults] if sim.faults else []
        cmd += ["--loop"] if sim.loop else []
        self._process = subprocess.Popen(
            cmd, stdin=subprocess.PIPE, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True
        )
        assert self._process.stdout is not None and self._process.stderr is not None
        assert self._process.stdin is not None
        # A stand-in for a device, it yields the cores to the acquisition and the window
        # when they are short (it only sends later then; nothing is lost).
        with contextlib.suppress(OSError, AttributeError):  # not on every platform
            os.setpriority(os.PRIO_PROCESS, self._process.pid, _CELL_NICENESS)
        first = self._process.stdout.readline()  # "simulated cell on PORT — ..."
        found = re.search(r" on (\S+) ", first)
        if found is None:
            self._process.wait(10)
            said = (self._process.stderr.read() or first).strip()
            self._folder.cleanup()
            raise SourceError(f"the simulated cell did not start: {said}")
        self.port_name = found.group(1)

    def start(self) -> None:
        """Tell the cell to start streaming (the port is open by now)."""
        assert self._process.stdin is not None
        self._process.stdin.write("go\n")
        self._process.stdin.flush()

    def stop(self) -> None:
        """Stop the cell as Ctrl-C would (it removes its port), killing it if it lingers."""
        import signal
        import subprocess

        if self._process.poll() is None:
            self._process.send_signal(signal.SIGINT)
            try:
                self._process.wait(5)
            except subprocess.TimeoutExpired:
                self._process.kill()
                self._process.wait(5)
        for stream in (self._process.stdin, self._process.stdout, self._process.stderr):
            if stream is not None:
                stream.close()
        self._folder.cleanup()


class StatusBox:
    """The latest `WorkerStatus`, shared between processes (a mailbox of one letter).

    The worker overwrites it at every poll; the window reads it when it likes. Nothing
    queues up, so a window that stops reading (a dialog open, a slow paint) never makes
    the worker wait or grow. Like the trace buffer, neither side waits for the lock more
    than `ui.dashboard.buffer.LOCK_TIMEOUT_S` (the other side may have died holding it):
    a put is then dropped and a get finds nothing new.
    """

    def __init__(self, size_bytes: int = 1 << 17) -> None:
        self.size_bytes = int(size_bytes)
        self._raw = PROCESS_CONTEXT.RawArray("B", self.size_bytes)
        self._head = PROCESS_CONTEXT.RawArray("q", 2)  # version, length in bytes
        self._lock = PROCESS_CONTEXT.Lock()

    def put(self, status: WorkerStatus) -> None:
        """Replace the letter. A status too large to fit sheds its oldest messages."""
        data = pickle.dumps(status, protocol=pickle.HIGHEST_PROTOCOL)
        while len(data) > self.size_bytes and status.messages:
            keep = status.messages[len(status.messages) // 2 + 1 :]
            status = WorkerStatus(**{**status.__dict__, "messages": keep})
            data = pickle.dumps(status, protocol=pickle.HIGHEST_PROTOCOL)
        if len(data) > self.size_bytes:
            raise ValueError(f"StatusBox: a status of {len(data)} bytes does not fit")
        with holding(self._lock) as got:
            if not got:
                return
            memoryview(self._raw).cast("B")[: len(data)] = data
            self._head[1] = len(data)
            self._head[0] += 1

    def get(self, since: int = -1) -> tuple[int, WorkerStatus | None]:
        """(version, status); status is None when nothing newer than `since` was put."""
        with holding(self._lock) as got:
            version, length = int(self._head[0]), int(self._head[1])
            if not got or version == since or length == 0:
                return version, None
            data = bytes(memoryview(self._raw).cast("B")[:length])
        return version, pickle.loads(data)  # our own worker process wrote it


class AcquisitionWorker:
    """A live session in a worker process, fed by a port or the simulated cell.

    Args:
        profile: cell profile.
        port: serial port; None for the built-in simulated cell.
        buffer: where the traces go (time is kept increasing across device restarts).
        runs_root: folder that recordings are created under.
        simulated: options of the simulated cell (used when `port` is None).
        profile_path: the profile's file, for the session's log ("" for the demo cell).

    The worker process keeps the session's log (`ui.session_log`): in the run folder while
    recording, in the per-user log folder otherwise.
    """

    def __init__(
        self,
        profile: CellProfile,
        port: str | None,
        buffer: TraceBuffer,
        *,
        runs_root: Path = Path("recordings"),
        simulated: SimulatedSource | None = None,
        profile_path: str = "",
    ) -> None:
        self.profile = profile
        self.port = port
        self.buffer = buffer
        self.runs_root = Path(runs_root)
        self.simulated = simulated or SimulatedSource()
        self.profile_path = profile_path
        self._commands: Any = PROCESS_CONTEXT.Queue()
        # A plain shared flag, not an Event: an Event's lock could be left held by a
        # worker that died, and setting it would then hang the window.
        self._stop = PROCESS_CONTEXT.RawValue("b", 0)
        self._box = StatusBox()
        self._version = -1
        self._status = WorkerStatus(port=port or "built-in simulated cell")
        self._process: Any = None

    # ------------------------------------------------------------- control
    def start(self) -> AcquisitionWorker:
        """Start the worker process (once); returns self."""
        if self._process is None:
            acquisition = _Acquisition(
                self.profile, self.port, self.buffer, self.runs_root, self.simulated,
                self._commands, self._stop, self._box, self.profile_path,
            )  # fmt: skip
            # The bound method is pickled to the new process with what it holds: the
            # shared buffer, box, flag and queue, not copies of them.
            self._process = PROCESS_CONTEXT.Process(
                target=acquisition.run, name="forcelens-acquisition", daemon=True
            )
            self._process.start()
        return self

    def stop(self, timeout_s: float = 10.0) -> None:
        """Stop acquiring; a recording in progress is closed cleanly first.

        A worker that does not end within `timeout_s` is terminated (its recording then
        reads back up to its last flush, as after a crash).
        """
        self._stop.value = 1
        if self._process is not None:
            self._process.join(timeout_s)
            if self._process.is_alive():
                self._process.terminate()
                self._process.join(2.0)
        self._commands.close()

    @property
    def running(self) -> bool:
        """True while the worker process is alive."""
        return self._process is not None and self._process.is_alive()

    def status(self) -> WorkerStatus:
        """The latest snapshot (cheap; call it from the window's thread)."""
        self._version, latest = self._box.get(self._version)
        if latest is not None:
            self._status = latest
        process = self._process
        if (
            process is not None
            and process.exitcode is not None
            and self._status.state not in _ENDED
        ):
            error = f"the acquisition process ended unexpectedly (exit code {process.exitcode})"
            self._status = WorkerStatus(
                **{**self._status.__dict__, "state": "failed", "error": error}
            )
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
        """Queue: zero on the latest samples (the caller has confirmed: cell unloaded).

        The request carries the host's monotonic clock, which the worker process shares.
        """
        self._commands.put(("tare", (time.monotonic(),)))

    def acknowledge(self, alarm_id: str) -> None:
        """Queue: acknowledge an active alarm (it stays until its condition clears)."""
        self._commands.put(("ack", (alarm_id,)))


class _Acquisition:
    """The worker process's side: the session, its commands and its published status."""

    def __init__(
        self,
        profile: CellProfile,
        port: str | None,
        buffer: TraceBuffer,
        runs_root: Path,
        simulated: SimulatedSource,
        commands: Any,
        stop: Any,
        box: StatusBox,
        profile_path: str = "",
    ) -> None:
        self.profile = profile
        self.profile_path = profile_path
        self._log: Any = None  # ui.session_log.SessionLog, in the worker process
        self.port = port
        self.buffer = buffer
        self.runs_root = runs_root
        self.simulated = simulated
        self._commands = commands
        self._stop = stop
        self._box = box
        self._status = WorkerStatus(port=port or "built-in simulated cell")
        self._messages: deque[str] = deque(maxlen=50)
        self._message_total = 0
        self._t_offset = 0.0
        self._t_last: float | None = None
        self._rule: str | None = None
        self._budget: Any = None
        self._model = (float("nan"), float("nan"), float("nan"))
        self._alarm_since: dict[str, float] = {}  # alarm id -> raised at (plotted time, s)
        self._units: Any = None  # ui.display_units.CellUnits, made when first needed

    # ------------------------------------------------------------ process
    @property
    def units(self) -> Any:
        """The cell's display units (`ui.display_units.CellUnits`)."""
        if self._units is None:
            from ui.display_units import CellUnits

            self._units = CellUnits.for_profile(self.profile)
        return self._units

    def _say(self, text: str) -> None:
        """A message for the window's log, stamped with the plotted device time of the
        latest sample (the one clock on the screen); "t = —" before the first one."""
        stamp = self.units.time_text(self._t_last) if self._t_last is not None else "t = —"
        self._messages.append(f"{stamp}  {text}")
        self._message_total += 1

    def run(self) -> None:
        """The worker process: acquire until stopped or until the window's process is
        gone (a recording in progress is closed cleanly either way); every failure ends
        as a published "failed" state, logged in the session's log."""
        from ui.session_log import SessionLog, log_start, session_logger

        cell = None
        with SessionLog("dashboard") as self._log:
            if self._log.path is not None:
                self._say(f"session log: {self._log.path}")
            try:
                port = self.port
                if port is None:
                    cell = CellProcess(self.profile, self.simulated)
                    port = cell.port_name
                source = (
                    port
                    if cell is None
                    else f"the built-in simulated cell (invented data) on {port}"
                )
                command = f"forcelens dashboard (window process {os.getppid()})"
                log_start(command, source, self.profile, self.profile_path)
                self._loop(port, cell)
            except Exception as exc:  # shown in the window; the worker must not die silently
                session_logger().error("acquisition stopped by %s: %s", type(exc).__name__, exc)
                self._say(f"acquisition stopped: {exc}")
                self._publish(state="failed", error=str(exc))
            finally:
                if cell is not None:
                    cell.stop()

    def _loop(self, port: str, cell: Any) -> None:
        from ui.session import LiveSession

        session = LiveSession(self.profile, port, log=self._log)
        session.start()
        started_cell = False
        parent = multiprocessing.parent_process()
        reason = "acquisition failed"  # until the loop ends normally
        try:
            while not self._stop.value:
                if parent is not None and not parent.is_alive():
                    self._say("the window's process has ended: stopping")
                    break
                started = time.monotonic()
                got = session.poll()
                for ev in got.events:
                    self._say(f"{ev.kind}: {ev.message}")
                if cell is not None and not started_cell and session.connected_once:
                    cell.start()
                    started_cell = True
                    self._say(f"simulated cell (invented data) streaming from {port}")
                for change in got.changes:
                    if getattr(change, "alarm_id", None):
                        self._say(f"alarm {change.event}: {change.message}")
                self._run_commands(session)
                if got.samples.size:
                    self._push(got.samples, got.estimates, session)
                self._publish_session(session)
                # Poll about 50 times a second: bigger blocks cost less per sample.
                time.sleep(max(0.0, _POLL_S - (time.monotonic() - started)))
            reason = "window closed" if self._stop.value else "the window's process ended"
        finally:
            if session.recording is not None:
                summary = session.stop_recording(reason=reason)
                self._say(f"recording closed: {summary['samples']} samples")
            session.close(reason=reason)
            self._publish_session(session, state="stopped")

    def _run_commands(self, session: Any) -> None:
        from ui.session_log import session_logger

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
                        session_logger().info("alarm %s acknowledged", args[0])
                elif name == "tare":
                    tare = session.tare(requested_s=args[0])
                    offset = self.units.displacement_text(tare.offset_m)
                    self._say(f"zero set: {offset} subtracted ({tare.n_samples} samples)")
            except ValueError as exc:
                self._say(f"{name} refused: {exc}")
                if name != "tare":  # the session logs a refused zero itself
                    session_logger().warning("%s refused: %s", name, exc)

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
        last = est[-1]
        self._model = (float(last["p_hold"]), float(last["p_rate"]), float(last["p_jump"]))
        k = self.profile.plant.stiffness_n_per_m
        static = k * (samples["displacement_m"] - session.pipeline.offset_m)
        self.buffer.append(
            np.vstack([t, est["displacement_m"], est["force_n"], self._u_combined(est), static])
        )

    def _rule_text(self, monitor: Any) -> str:
        """The settling rule in words (fixed for a session: worded once)."""
        if monitor is None:
            return ""
        if self._rule is None:
            self._rule = monitor.describe(self.units.force_unit)
        return self._rule

    def _u_combined(self, est: np.ndarray) -> np.ndarray:
        """Combined standard uncertainty (GUM: observer, calibration, resolution), N."""
        from estimator.uncertainty import ForceUncertainty

        if self._budget is None:
            self._budget = ForceUncertainty.from_profile(self.profile)
        return self._budget.combined_n(est["force_n"], est["force_u_n"])

    def _publish_session(self, session: Any, state: str | None = None) -> None:
        st = session.reader.stats()
        last = self.buffer.latest(1)
        rec = session.recording
        monitor, alarms = session.pipeline.monitor, session.pipeline.alarms
        valid_since = monitor.valid_since_s if monitor is not None else None
        self._publish(
            settling=monitor.state if monitor is not None else "",
            settling_rule=self._rule_text(monitor),
            rule=rule_numbers(monitor.rule) if monitor is not None else None,
            hold_samples=monitor.hold_samples if monitor is not None else 0,
            # The monitor's device time, on the plotted clock (kept increasing across
            # device restarts: see _push).
            valid_since_s=None if valid_since is None else valid_since + self._t_offset,
            alarms=self._active_alarms(alarms.active() if alarms is not None else []),
            model=self._model,
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

    def _active_alarms(self, active: list[Any]) -> tuple[tuple[str, str, str, bool, float], ...]:
        """The active alarms with when each was raised, on the plotted clock: a device-
        clock alarm at its sample's time; a host-clock one (the stalled stream) at the
        last sample before the silence, the newest sample when it was first seen."""
        ids = {a.alarm_id for a in active}
        self._alarm_since = {k: v for k, v in self._alarm_since.items() if k in ids}
        rows = []
        for a in active:
            if a.alarm_id not in self._alarm_since:
                if a.clock == "device":
                    since = a.raised_time_s + self._t_offset
                else:
                    since = self._t_last if self._t_last is not None else float("nan")
                self._alarm_since[a.alarm_id] = float(since)
            since_s = self._alarm_since[a.alarm_id]
            rows.append((a.alarm_id, a.severity, a.message, a.acknowledged, since_s))
        return tuple(rows)

    def _publish(self, **changes: Any) -> None:
        values = {
            **self._status.__dict__,
            **changes,
            "messages": tuple(self._messages),
            "message_total": self._message_total,
        }
        self._status = WorkerStatus(**values)
        self._box.put(self._status)
