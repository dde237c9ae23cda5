"""``forcelens live``: headless live estimation with a status line and optional recording.

Reads the serial port named by ``--port`` or by the profile; with neither, the built-in
simulated cell (invented data) is started on a pseudo-terminal and read through pyserial
exactly like a device. Samples pass through the same `ui.pipeline.EstimationPipeline` a
replay uses, so a recorded run replays to bit-identical estimates.
"""

from __future__ import annotations

import argparse
import contextlib
import signal
import sys
import time
from pathlib import Path
from typing import Any

from ui.safety import CAUTION
from ui.sim_help import FAULTS_HELP, PROGRAMME_HELP, SPEED_HELP

__all__ = ["register", "run_live"]

DEFAULT_RUNS_ROOT = "recordings"


def register(subparsers: Any) -> None:
    """Add the ``live`` sub-command to `subparsers`."""
    p = subparsers.add_parser(
        "live",
        help="estimate force live from a serial port (or the built-in simulated cell)",
        description=(
            "Read samples from a serial port, estimate force with its expanded uncertainty "
            "U (k = 2) live and show a status line; optionally record the run. Without "
            "--port and without a port in the profile, the built-in simulated cell "
            "(invented data) is used. "
            "On a terminal, type m [note] to mark the run, z to zero (with the cell "
            "unloaded, after a confirmation) and q to stop. Ctrl-C also stops; the run is "
            "closed cleanly."
        ),
    )
    p.add_argument("--profile", metavar="FILE.toml", help="cell profile (default: the demo cell)")
    p.add_argument(
        "--port",
        metavar="PORT",
        help="serial port, e.g. /dev/ttyUSB0 or COM3 (default: the profile's port; none: "
        "the built-in simulated cell)",
    )
    p.add_argument(
        "--record",
        metavar="DIR",
        nargs="?",
        const=DEFAULT_RUNS_ROOT,
        help=f"record the run in a new folder under DIR (default DIR: {DEFAULT_RUNS_ROOT})",
    )
    p.add_argument(
        "--note",
        default="",
        metavar="TEXT",
        help="operator note stored with the run (default: none)",
    )
    p.add_argument(
        "--tag",
        action="append",
        default=[],
        metavar="TEXT",
        help="tag stored with the run; repeat for more (default: none)",
    )
    p.add_argument(
        "--duration",
        type=float,
        metavar="S",
        help="stop after S seconds of wall-clock time (default: run until q or Ctrl-C)",
    )
    p.add_argument("--quiet", action="store_true", help="no status line")
    sim = p.add_argument_group("built-in simulated cell (used when no port is given)")
    sim.add_argument(
        "--sim-programme",
        metavar="SPEC",
        help=PROGRAMME_HELP + " (default: the demo programme)",
    )
    sim.add_argument(
        "--sim-speed",
        type=float,
        default=1.0,
        metavar="X",
        help=SPEED_HELP + " (default 1)",
    )
    sim.add_argument(
        "--sim-seed",
        type=int,
        default=0,
        metavar="N",
        help="seed of the simulated noise, an integer ≥ 0 (default 0)",
    )
    sim.add_argument("--sim-once", action="store_true", help="play the programme once, then stop")
    sim.add_argument(
        "--sim-faults",
        metavar="SPEC",
        default="",
        help=FAULTS_HELP + " (default: none)",
    )
    p.set_defaults(run=run_live)


class _Stop:
    """Turns Ctrl-C and SIGTERM into a clean stop between two polls.

    A signal only sets a flag, so a block already drained from the reader is always
    estimated and recorded before the run is closed. A second Ctrl-C interrupts at once.
    """

    def __init__(self) -> None:
        self.requested = False
        self._old: dict[int, Any] = {}

    def __enter__(self) -> _Stop:
        for sig in (signal.SIGINT, signal.SIGTERM):
            # Outside the main thread (tests) signals cannot be caught: keep the defaults.
            with contextlib.suppress(ValueError):
                self._old[sig] = signal.signal(sig, self._handle)
        return self

    def _handle(self, signum: int, frame: Any) -> None:
        if self.requested and signum == signal.SIGINT:
            raise KeyboardInterrupt
        self.requested = True

    def __exit__(self, *exc: object) -> None:
        for sig, old in self._old.items():
            signal.signal(sig, old)


def run_live(args: argparse.Namespace) -> int:
    """Run the ``live`` sub-command; returns the exit status."""
    from estimator.profile import default_demo_profile, load_profile
    from ui.wiring import refuse_demo_model_on_a_real_port

    refuse_demo_model_on_a_real_port(args.port, args.profile)
    profile = load_profile(args.profile) if args.profile else default_demo_profile()
    if args.duration is not None and not args.duration > 0:
        raise ValueError(f"--duration = {args.duration}: must be > 0 seconds")
    from ui.pipe_safe import stdout_may_close
    from ui.pipeline import prepare_estimator

    with stdout_may_close():  # a console piped into `head` must not end a recording
        print(CAUTION)
        prepare_estimator(profile)  # before the run's clock starts and any port opens
        port = args.port if args.port is not None else profile.acquisition.port
        if port:
            return _acquire(args, profile, port, cell=None)
        cell = _simulated_cell(args, profile)
        with cell:
            print(f"built-in simulated cell (invented data) on {cell.port_name}", flush=True)
            return _acquire(args, profile, cell.port_name, cell=cell)


def _simulated_cell(args: argparse.Namespace, profile: Any) -> Any:
    from daq.programme import demo_programme, parse_programme
    from daq.simulator import PtyCell
    from ui.wiring import parse_faults, simulated_cell_for

    if not args.sim_speed > 0:
        raise ValueError(f"--sim-speed = {args.sim_speed}: must be > 0")
    programme = parse_programme(args.sim_programme) if args.sim_programme else demo_programme()
    cell = simulated_cell_for(profile, seed=args.sim_seed)
    run = cell.generate(programme)

    def regenerate(rep: int) -> Any:
        return cell.generate(programme, seed=args.sim_seed + rep)

    return PtyCell(
        run,
        speed=args.sim_speed,
        loop=not args.sim_once,
        regenerate=regenerate,
        framing=profile.acquisition.framing,
        faults=parse_faults(args.sim_faults, option="--sim-faults"),
    )


def _acquire(args: argparse.Namespace, profile: Any, port: str, cell: Any) -> int:
    """Open the recording and the session's log (in the run folder when recording, else
    in the per-user log folder), then run the session; an error is logged before it goes
    on to the terminal."""
    import shlex

    from ui.recording import open_recording
    from ui.session_log import SessionLog, log_start, session_logger

    recording = None
    if args.record:
        recording = open_recording(
            Path(args.record),
            profile,
            note=args.note,
            tags=args.tag,
            acquisition={"port": port, "simulated": cell is not None},
        )
        print(f"recording to {recording.folder}", flush=True)
    with SessionLog("live", run_folder=recording.folder if recording else None) as log:
        if log.path is not None:
            print(f"session log: {log.path}", flush=True)
        source = port
        if cell is not None:
            source = f"the built-in simulated cell (invented data) on {port}"
        command = "forcelens " + shlex.join(getattr(args, "argv", None) or ["live"])
        log_start(command, source, profile, args.profile)
        if getattr(sys.stdout, "broken", False):  # before this log was open
            session_logger().warning("standard output closed by its reader; the session goes on")
        try:
            return _run(args, profile, port, cell, recording)
        except BaseException as exc:
            session_logger().error("ended by %s: %s", type(exc).__name__, exc)
            if recording is not None:  # sealed already if the session began (idempotent)
                recording.close("failed", {"reason": f"error: {type(exc).__name__}: {exc}"})
            raise


def _run(args: argparse.Namespace, profile: Any, port: str, cell: Any, recording: Any) -> int:
    """The session itself: status line, typed commands, until stopped."""
    from estimator.uncertainty import ForceUncertainty
    from ui.console import HELP, Console, start_line_reader
    from ui.dashboard.wording import rejected_word
    from ui.display_units import CellUnits
    from ui.session import POLL_PERIOD_S, LiveSession
    from ui.status import StatusLine, format_status

    session = LiveSession(profile, port, recording=recording)
    if session.pipeline.monitor is not None:
        force_unit = CellUnits.for_profile(profile).force_unit
        print(f"reading rule: {session.pipeline.monitor.describe(force_unit)}", flush=True)
    status = StatusLine(enabled=not args.quiet)
    budget = ForceUncertainty.from_profile(profile)
    units = CellUnits.for_profile(profile)  # the status line in the cell's units, as on screen
    console = Console(session)
    typed = None
    if sys.stdin.isatty() and not args.quiet:
        typed = start_line_reader()
        print(HELP, flush=True)
    last_est = None
    reason = "stopped by the operator"
    outcome = "complete"
    t_start = time.monotonic()
    # the simulated programme is over once its last bytes are in: a short silence after
    # the writer finished, well inside the stalled-stream timeout (the end of a programme
    # is not a stall)
    alarms = session.pipeline.alarms
    stall_s = alarms.settings.stall_timeout_s if alarms is not None else 0.5
    programme_end_s = min(0.2, 0.4 * stall_s)
    with _Stop() as stop:
        try:
            session.start()
            while True:
                polled = time.monotonic()
                was_connected = session.connected_once
                got = session.poll()
                if session.connected_once and not was_connected:
                    print(f"connected to {port}", flush=True)
                    if cell is not None:
                        cell.start()
                for ev in got.events:
                    if ev.kind != "connected":
                        status.finish()
                        print(f"{ev.utc} {ev.kind}: {ev.message}", flush=True)
                for change in got.changes:
                    if getattr(change, "alarm_id", None):  # settling states: on the status line
                        status.finish()
                        print(f"alarm {change.event}: {change.message}", flush=True)
                if got.estimates.size:
                    last_est = got.estimates
                if last_est is not None and status.due():
                    st = session.reader.stats()
                    monitor = session.pipeline.monitor
                    status.show(
                        format_status(
                            last_est,
                            state=session.reader.state,
                            settling=monitor.state if monitor is not None else "",
                            rate_hz=st.rate_hz,
                            drift_ppm=st.drift_ppm,
                            lost=st.decoder.samples_lost,
                            rejected=st.decoder.rejected,
                            recording=recording.run_id if recording else "",
                            budget=budget,
                            units=units,
                            framing=profile.acquisition.framing,
                        )
                    )
                while typed is not None and not typed.empty():
                    reply = console.handle(typed.get_nowait())
                    if reply:
                        status.finish()
                        print(reply, flush=True)
                if stop.requested or console.stop_requested:
                    break
                if args.duration is not None and time.monotonic() - t_start >= args.duration:
                    reason = f"--duration {args.duration:g} s reached"
                    break
                if cell is not None and cell.error is not None:
                    raise OSError(f"simulated cell stopped: {cell.error}")
                if (
                    cell is not None
                    and cell.finished
                    and session.reader.stats().seconds_since_data > programme_end_s
                ):
                    reason = "simulated programme finished"
                    break
                time.sleep(max(0.0, POLL_PERIOD_S - (time.monotonic() - polled)))
        except KeyboardInterrupt:  # a second Ctrl-C: the block being handled is lost
            outcome, reason = "aborted", "interrupted twice"
        except BaseException:
            status.finish()
            session.close("failed", reason="error")
            raise
        status.finish()
        summary = session.close(outcome, reason=reason)
    bad = rejected_word(profile.acquisition.framing)  # lines or frames, as on the status line
    print(
        f"{reason}: {summary['samples']} samples, lost {summary['samples_lost']}, "
        f"{bad} {summary['rejected_frames']}, reconnects {summary['reconnects']}"
    )
    if recording is not None:
        print(f"run {recording.run_id} closed in {recording.folder}")
    return 0
