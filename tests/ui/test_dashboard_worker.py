"""The dashboard's acquisition worker without Qt: data flows, commands run, runs close."""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
from collections.abc import Callable
from pathlib import Path

import numpy as np
import pytest

from daq.runs import read_run
from estimator.profile import default_demo_profile
from ui.dashboard.buffer import TraceBuffer
from ui.dashboard.worker import AcquisitionWorker, SimulatedSource


def _wait(cond: Callable[[], bool], timeout_s: float = 20.0) -> None:
    deadline = time.monotonic() + timeout_s
    while not cond():
        if time.monotonic() > deadline:
            raise AssertionError("condition not met in time")
        time.sleep(0.01)


def test_worker_streams_records_and_closes_the_run_on_stop(tmp_path: Path) -> None:
    profile = default_demo_profile()
    buffer = TraceBuffer(20_000)
    # Invented programme: 0 N, then 30 N; simulated cell 4x faster than real time.
    sim = SimulatedSource(programme="hold 0.5 0; hold 3 30", speed=4.0, loop=False)
    worker = AcquisitionWorker(profile, None, buffer, runs_root=tmp_path, simulated=sim)
    worker.start()
    try:
        _wait(lambda: buffer.total > 300)
        worker.tare()
        worker.start_recording(note="worker test (invented data)")
        _wait(lambda: worker.status().recording != "")
        worker.mark("loaded")
        _wait(lambda: buffer.total > 4000)
        status = worker.status()
        assert status.state == "connected" and status.lost == 0
        # 0.5 s after the step at 0.5 s the estimate sits on the applied 30 N (2 % band,
        # common practice).
        assert status.force_n == pytest.approx(30.0, rel=0.02)
        t = buffer.latest(buffer.capacity)[0]
        assert np.all(np.diff(t) > 0)
    finally:
        worker.stop()
    assert not worker.running
    final = worker.status()
    assert final.state == "stopped"
    assert any("recording closed" in m for m in final.messages)
    (folder,) = [p.parent for p in tmp_path.glob("*/run.json")]
    data = read_run(folder)
    assert data.closed and data.closing["summary"]["reason"] == "window closed"
    kinds = [e["kind"] for e in data.events]
    assert "mark" in kinds and "tare" in kinds


def test_a_worker_process_that_dies_is_reported_failed_with_its_exit_code(tmp_path: Path) -> None:
    buffer = TraceBuffer(20_000)
    sim = SimulatedSource(programme="hold 30 0", loop=False)  # invented: unloaded cell
    worker = AcquisitionWorker(
        default_demo_profile(), None, buffer, runs_root=tmp_path, simulated=sim
    ).start()
    try:
        _wait(lambda: buffer.total > 100)
        status = worker.status()
        assert status.state == "connected"
        (said,) = [m for m in status.messages if "streaming from" in m]
        cell_port = said.split("streaming from ")[1]
        assert os.path.exists(cell_port)
        worker._process.kill()  # as a crash would end it
        _wait(lambda: not worker.running)
        status = worker.status()
        assert status.state == "failed"
        assert "ended unexpectedly" in status.error and "-9" in status.error
        # The cell's process sees its input end and stops, removing its port: a crash
        # leaves no simulated device running.
        _wait(lambda: not os.path.exists(cell_port))
    finally:
        worker.stop()


_ORPHAN_PARENT = """
import sys, time
from pathlib import Path
from estimator.profile import default_demo_profile
from ui.dashboard.buffer import TraceBuffer
from ui.dashboard.worker import AcquisitionWorker, SimulatedSource

if __name__ == "__main__":
    buffer = TraceBuffer(20_000)
    sim = SimulatedSource(programme="hold 60 0", loop=False)  # invented: unloaded cell
    worker = AcquisitionWorker(default_demo_profile(), None, buffer, runs_root=Path(sys.argv[1]),
                               simulated=sim).start()
    worker.start_recording(note="orphan test (invented data)")
    while worker.status().recording == "":
        time.sleep(0.02)
    print(worker._process.pid, flush=True)
    time.sleep(600)
"""


def test_the_worker_closes_its_recording_when_the_window_process_is_killed(
    tmp_path: Path,
) -> None:
    # A window killed outright must not leave its worker holding the port forever, nor
    # leave the run unsealed: the worker notices its parent is gone and closes the run.
    # The killed parent's resource tracker warns of the locks it leaves: kept in a file.
    log = tmp_path / "parent-stderr.txt"
    with log.open("w") as err:
        parent = subprocess.Popen(
            [sys.executable, "-c", _ORPHAN_PARENT, str(tmp_path / "runs")],
            stdout=subprocess.PIPE,
            stderr=err,
            text=True,
        )
    try:
        line = parent.stdout.readline()
        assert line.strip().isdigit(), log.read_text()
        worker_pid = int(line)
    finally:
        parent.send_signal(signal.SIGKILL)
        parent.wait(10)

    def gone() -> bool:
        try:
            os.kill(worker_pid, 0)
        except ProcessLookupError:
            return True
        # A zombie (reparented, not yet reaped) counts as gone.
        with open(f"/proc/{worker_pid}/stat") as f:
            return f.read().split(")")[-1].split()[0] == "Z"

    _wait(gone)
    (folder,) = [p.parent for p in (tmp_path / "runs").glob("*/run.json")]
    data = read_run(folder)
    assert data.closed and data.closing["summary"]["reason"] == "the window's process ended"


def test_the_built_in_cell_process_sends_nothing_before_go_then_every_sample() -> None:
    from daq.lines import LineDecoder
    from daq.samples import concat_blocks
    from daq.scaling import Scaling
    from daq.serial_source import SerialSource
    from ui.dashboard.worker import CellProcess

    profile = default_demo_profile()
    # Invented programme: 0.25 s at 10 N, played twice as fast, once.
    cell = CellProcess(profile, SimulatedSource(programme="hold 0.25 10", speed=2.0, loop=False))
    try:
        tr = profile.transducer
        scaling = Scaling(tr.volts_per_count, tr.metres_per_volt, tr.zero_volts)
        with SerialSource(cell.port_name, 921600, LineDecoder(scaling)) as src:
            early = src.read_block(0.5)  # the port is open, no go yet
            cell.start()
            blocks = []
            deadline = time.monotonic() + 10.0
            while time.monotonic() < deadline and sum(b.size for b in blocks) < 500:
                blocks.append(src.read_block(0.05))
    finally:
        cell.stop()
    assert early.size == 0
    # 0.25 s at the demo profile's 2 kHz: 500 samples, all of them, in order.
    np.testing.assert_array_equal(concat_blocks(blocks)["seq"], np.arange(500))
    assert not os.path.exists(cell.port_name)  # stopped as Ctrl-C stops it: port removed


def test_a_simulated_cell_that_cannot_start_is_reported_with_its_reason(tmp_path: Path) -> None:
    sim = SimulatedSource(faults="melt@1")  # no such fault kind
    worker = AcquisitionWorker(
        default_demo_profile(), None, TraceBuffer(1000), runs_root=tmp_path, simulated=sim
    ).start()
    try:
        _wait(lambda: worker.status().state == "failed")
    finally:
        worker.stop()
    error = worker.status().error
    assert "simulated cell did not start" in error and "melt" in error
