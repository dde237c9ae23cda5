"""The dashboard's acquisition worker without Qt: data flows, commands run, runs close."""

from __future__ import annotations

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
