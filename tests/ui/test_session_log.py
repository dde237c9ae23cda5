"""The session's log file (issue 12, item 7): where it goes, what it holds, that it stays
out of the per-sample path and out of the run's seal. Sessions read the simulated cell
through a pseudo-terminal (invented data)."""

from __future__ import annotations

import os
import re
import sys
import time
from datetime import UTC, datetime
from pathlib import Path

import numpy as np
import platformdirs
import pytest

from daq.programme import parse_programme
from daq.runs import read_run, verify_run
from daq.samples import empty_block
from daq.simulator import PtyCell
from estimator.profile import default_demo_profile
from ui.cli import main
from ui.session import LiveSession
from ui.session_log import LOG_DIR_ENV, SessionLog, session_logger, user_log_folder
from ui.wiring import simulated_cell_for

PROFILE = default_demo_profile()


def _lines(path: Path) -> list[str]:
    return path.read_text(encoding="utf-8").splitlines()


def _times(lines: list[str]) -> list[datetime]:
    # reference: ISO 8601 as Python's datetime.fromisoformat reads it (UTC, "Z")
    return [datetime.fromisoformat(line.split(" ", 1)[0]) for line in lines]


def _poll_for(session: LiveSession, samples: int, timeout_s: float = 20.0) -> tuple[int, int]:
    """Poll until `samples` more samples came; (samples, reader events + alarm changes)."""
    n = events = 0
    deadline = time.monotonic() + timeout_s
    while n < samples and time.monotonic() < deadline:
        got = session.poll()
        n += got.samples.size
        events += len(got.events) + sum(1 for c in got.changes if getattr(c, "alarm_id", ""))
        if not got.samples.size:
            time.sleep(0.005)
    return n, events


class _Count:
    """Counts the records reaching the session logger (a second handler beside the file)."""

    def __init__(self) -> None:
        import logging

        self.records: list[logging.LogRecord] = []
        self.handler = logging.Handler()
        self.handler.emit = self.records.append  # type: ignore[method-assign]


def test_the_per_user_folder_is_the_platforms_and_can_be_overridden(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    monkeypatch.setenv(LOG_DIR_ENV, str(tmp_path / "chosen"))
    assert user_log_folder() == tmp_path / "chosen"
    monkeypatch.delenv(LOG_DIR_ENV)
    monkeypatch.setenv("XDG_STATE_HOME", str(tmp_path / "state"))
    # reference: platformdirs, the library that knows each platform's convention
    assert user_log_folder() == Path(platformdirs.user_log_dir("forcelens", appauthor=False))
    if sys.platform.startswith("linux"):
        # XDG Base Directory Specification 0.8: user state data (logs) in $XDG_STATE_HOME
        assert user_log_folder() == tmp_path / "state" / "forcelens" / "log"


def test_a_session_logs_its_events_in_the_user_folder_and_the_recording_in_its_run(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    monkeypatch.setenv(LOG_DIR_ENV, str(tmp_path / "logs"))
    run = simulated_cell_for(PROFILE, seed=3).generate(parse_programme("hold 1 0; hold 2 30"))
    counter = _Count()
    session_logger().addHandler(counter.handler)
    wall_start = datetime.now(UTC)
    try:
        with PtyCell(run, speed=4.0) as cell, SessionLog("dashboard") as log:
            user_file = log.path
            assert user_file is not None and user_file.parent == tmp_path / "logs"
            session = LiveSession(PROFILE, cell.port_name, log=log)
            session.start()
            while not session.connected_once:
                session.poll()
                time.sleep(0.005)
            cell.start()
            _poll_for(session, 400)
            session.tare()
            # Samples alone log nothing: only the reader's events and alarm transitions
            # seen in these polls may reach the logger while 2000 samples pass.
            before = len(counter.records)
            got, events = _poll_for(session, 2000)
            assert got >= 2000 and len(counter.records) - before == events
            recording = session.start_recording(tmp_path / "runs", note="invented data")
            assert log.path == recording.folder / "session.log"
            _poll_for(session, 400)
            session.mark("while recording")
            session.stop_recording(reason="test")
            assert log.path == user_file
            _poll_for(session, 100)
            session.close()
    finally:
        session_logger().removeHandler(counter.handler)
    wall_end = datetime.now(UTC)

    user = _lines(user_file)
    inside = _lines(recording.folder / "session.log")
    for lines in (user, inside):
        assert all(wall_start <= t <= wall_end for t in _times(lines))
        assert _times(lines) == sorted(_times(lines))
        # the header: versions as the interpreter itself reports them (sys.version_info)
        python = ".".join(map(str, sys.version_info[:3]))
        header = rf"^\S+Z INFO    forcelens \S+ dashboard, pid {os.getpid()}, session started "
        assert re.match(
            header + rf"\S+Z; Python {python} on .+; numpy {np.__version__}, ", lines[0]
        )
    text = "\n".join(user)
    assert f"reading {cell.port_name}: cell {PROFILE.cell.name!r}" in text
    assert "INFO    connected:" in text and "INFO    zero set: offset" in text
    assert f"log continues in {recording.folder / 'session.log'}" in text
    assert f"continued from {recording.folder / 'session.log'}" in text
    assert "INFO    stopped (complete" in user[-1]
    inside_text = "\n".join(inside)
    assert f"continued from {user_file}" in inside_text
    assert f"recording run {recording.run_id}" in inside_text
    assert "mark at seq" in inside_text and "while recording" in inside_text
    assert f"run {recording.run_id} closed, status complete" in inside_text
    # the run reads and verifies with the log in its folder; the log is outside the seal
    report = verify_run(recording.folder)
    assert report.ok, report.problems
    assert any("session.log" in n and "outside the seal" in n for n in report.notes)
    assert read_run(recording.folder).closed


def test_alarms_raised_and_cleared_are_logged(tmp_path: Path) -> None:
    session = LiveSession(PROFILE, "loop://")  # a pyserial URL; the reader is not started
    block = empty_block(400)
    block["seq"] = np.arange(400)
    block["device_time_s"] = np.arange(400) / 2000.0
    block["host_time_s"] = 100.0 + np.arange(400) / 2000.0
    block["displacement_m"] = 0.0
    session.pipeline.process(block)
    with SessionLog("live", run_folder=tmp_path) as log:  # any folder will do here
        session._clock = lambda: 105.0  # 4.8 s of silence by the host clock: a stall
        session.poll()
        later = empty_block(6000)  # 3 s of samples again: the stall clears
        later["seq"] = 400 + np.arange(6000)
        later["device_time_s"] = (400 + np.arange(6000)) / 2000.0
        later["host_time_s"] = 105.0 + np.arange(6000) / 2000.0
        real_drain = session.reader.drain
        session.reader.drain = lambda: later
        session.poll()
        session.reader.drain = real_drain
        path = log.path
    text = path.read_text(encoding="utf-8")
    assert "WARNING alarm stalled-stream raised" in text
    assert "INFO    alarm stalled-stream cleared" in text


def test_a_log_that_cannot_be_written_is_said_once_and_the_session_goes_on(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch, capsys: pytest.CaptureFixture[str]
) -> None:
    blocker = tmp_path / "not-a-folder"
    blocker.write_text("a file where the log folder should be\n", encoding="utf-8")
    monkeypatch.setenv(LOG_DIR_ENV, str(blocker / "logs"))
    with SessionLog("live") as log:
        session_logger().info("goes nowhere")
        session_logger().info("nor this")
        assert log.path is None and "cannot open" in log.problem
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "session log: cannot open" in err and "Traceback" not in err


def test_a_log_stops_growing_at_its_cap(tmp_path: Path) -> None:
    with SessionLog("live", run_folder=tmp_path, max_bytes=4096) as log:
        for i in range(500):
            session_logger().info("line %d of an invented flood", i)
        path = log.path
    assert path is not None
    assert path.stat().st_size <= 4096 + 200  # the cap plus its one closing line
    assert "log full (4096 bytes)" in _lines(path)[-1]


def test_old_user_logs_are_pruned_and_others_files_kept(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    import ui.session_log

    monkeypatch.setenv(LOG_DIR_ENV, str(tmp_path))
    monkeypatch.setattr(ui.session_log, "KEEP_USER_LOGS", 3)
    old = [tmp_path / f"forcelens-2026010{i}T000000Z-live-1.log" for i in range(1, 5)]
    for p in old:
        p.write_text("invented\n", encoding="utf-8")
    foreign = tmp_path / "notes.log"
    foreign.write_text("someone else's\n", encoding="utf-8")
    with SessionLog("live") as log:
        new = log.path
    kept = sorted(p.name for p in tmp_path.iterdir())
    assert kept == sorted([old[2].name, old[3].name, new.name, foreign.name])


def test_verify_never_opens_the_log(tmp_path: Path) -> None:
    from tests.ui.test_run_commands import _record

    folder = _record(tmp_path / "runs", tare=False)
    os.mkfifo(folder / "session.log")  # opening a FIFO would block
    report = verify_run(folder)
    assert report.ok and any("session.log" in n for n in report.notes)
    assert main(["verify", str(folder)]) == 0


def _worker_log(folder: Path) -> Path:
    (found,) = sorted(folder.glob("forcelens-*-dashboard-*.log"))
    return found


def test_the_dashboards_worker_logs_its_session_and_its_recording(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    from tests.ui.test_dashboard_worker import _wait
    from ui.dashboard.buffer import TraceBuffer
    from ui.dashboard.worker import AcquisitionWorker, SimulatedSource

    monkeypatch.setenv(LOG_DIR_ENV, str(tmp_path / "logs"))  # the spawned worker inherits it
    buffer = TraceBuffer(20_000)
    sim = SimulatedSource(programme="hold 0.5 0; hold 3 30", speed=4.0, loop=False)
    worker = AcquisitionWorker(PROFILE, None, buffer, runs_root=tmp_path / "runs", simulated=sim)
    worker.start()
    try:
        _wait(lambda: buffer.total > 300)
        worker.tare()
        worker.start_recording(note="worker log test (invented data)")
        _wait(lambda: worker.status().recording != "")
        worker.mark("loaded")
        _wait(lambda: buffer.total > 2000)
        worker.stop_recording()
        _wait(lambda: worker.status().recording == "")
    finally:
        worker.stop()
    user = _worker_log(tmp_path / "logs")
    assert any(m.endswith(f"session log: {user}") for m in worker.status().messages)
    text = user.read_text(encoding="utf-8")
    assert "INFO    source: the built-in simulated cell (invented data) on " in text
    assert "INFO    profile: the built-in demo profile (invented cell)" in text
    assert "INFO    zero set: offset" in text
    (folder,) = [p.parent for p in (tmp_path / "runs").glob("*/run.json")]
    inside = (folder / "session.log").read_text(encoding="utf-8")
    assert f"continued from {user}" in inside and "mark at seq" in inside
    assert f"run {folder.name} closed, status complete" in inside
    assert "INFO    stopped (complete, window closed)" in _lines(user)[-1]
    assert verify_run(folder).ok


def test_the_dashboards_worker_logs_why_it_failed(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    from tests.ui.test_dashboard_worker import _wait
    from ui.dashboard.buffer import TraceBuffer
    from ui.dashboard.worker import AcquisitionWorker, SimulatedSource

    monkeypatch.setenv(LOG_DIR_ENV, str(tmp_path / "logs"))
    sim = SimulatedSource(faults="melt@1")  # no such fault kind (invented)
    worker = AcquisitionWorker(PROFILE, None, TraceBuffer(1000), simulated=sim).start()
    try:
        _wait(lambda: worker.status().state == "failed")
    finally:
        worker.stop()
    last = _lines(_worker_log(tmp_path / "logs"))[-1]
    assert "ERROR   acquisition stopped by SourceError: the simulated cell did not start" in last
    assert "melt" in last


def test_live_logs_into_the_run_it_records_and_otherwise_into_the_user_folder(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    from tests.fuzz.harness import run_cli

    monkeypatch.setenv(LOG_DIR_ENV, str(tmp_path / "logs"))
    # invented programme; the simulated cell's port goes away for 0.3 s at 0.6 s
    argv = ["live", "--sim-once", "--sim-programme", "hold 0.5 0; hold 0.8 40",
            "--sim-faults", "disconnect@0.6:0.3", "--quiet"]  # fmt: skip
    outcome = run_cli([*argv, "--record", str(tmp_path / "runs")])
    assert outcome.status == 0, outcome.stderr
    (folder,) = [p.parent for p in (tmp_path / "runs").glob("*/run.json")]
    path = folder / "session.log"
    assert f"session log: {path}\n" in outcome.stdout
    assert not (tmp_path / "logs").exists()  # recording from the start: all in the run
    lines = _lines(path)
    text = "\n".join(lines)
    assert "INFO    command: forcelens live --sim-once --sim-programme 'hold 0.5 0; hold" in text
    assert "INFO    source: the built-in simulated cell (invented data) on /" in text
    assert "INFO    profile: the built-in demo profile (invented cell), cell" in text
    assert "WARNING disconnected: " in text and "INFO    reconnected: " in text
    assert f"INFO    run {folder.name} closed, status complete" in text
    assert "INFO    stopped (complete, simulated programme finished): samples " in lines[-1]
    assert verify_run(folder).ok

    outcome = run_cli(["live", "--sim-once", "--sim-programme", "hold 0.3 0", "--quiet"])
    assert outcome.status == 0, outcome.stderr
    (user,) = (tmp_path / "logs").glob("forcelens-*-live-*.log")
    assert f"session log: {user}\n" in outcome.stdout
    assert "INFO    stopped (complete, simulated programme finished)" in _lines(user)[-1]


def test_live_into_a_closed_pipe_goes_on_with_its_run_and_logs_it(tmp_path: Path) -> None:
    import subprocess

    # ``forcelens live --record DIR | head``, the reader leaving while the session
    # acquires: the recording goes on to its own end (here the simulated programme's) and
    # is sealed complete; one line on stderr and one in the session's log say why the
    # console went quiet. (It used to stop there and seal the run as failed; a reader of
    # the console is not a reason to end a recording.) See also tests/ui/test_pipe_safe.py.
    repo = Path(__file__).resolve().parents[2]
    cmd = [sys.executable, "-m", "ui.cli", "live", "--sim-once", "--sim-programme",
           "hold 1.5 0; hold 1.5 20", "--record", str(tmp_path / "runs")]  # fmt: skip
    env = dict(os.environ, PYTHONPATH=str(repo), **{LOG_DIR_ENV: str(tmp_path / "logs")})
    proc = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, env=env)
    assert proc.stdout is not None and proc.stderr is not None
    while b"recording to" not in proc.stdout.readline():
        pass
    time.sleep(1.0)  # the session is acquiring
    proc.stdout.close()
    err = proc.stderr.read().decode()
    assert proc.wait(timeout=60) == 0, err
    assert err.count("\n") == 1 and "standard output closed by its reader" in err, err
    (folder,) = [p.parent for p in (tmp_path / "runs").glob("*/run.json")]
    report = verify_run(folder)
    assert report.ok and report.status == "complete"
    log = (folder / "session.log").read_text()
    assert "standard output closed by its reader" in log
    assert "simulated programme finished" in _lines(folder / "session.log")[-1]
