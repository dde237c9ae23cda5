"""A live session through a pseudo-terminal: recording started and stopped mid-stream."""

from __future__ import annotations

import time
from pathlib import Path

import pytest

from daq.programme import parse_programme
from daq.runs import read_run
from daq.simulator import PtyCell
from estimator.profile import default_demo_profile
from ui.cli import main
from ui.session import LiveSession
from ui.wiring import simulated_cell_for

PROFILE = default_demo_profile()


def _poll_for(session: LiveSession, samples: int, timeout_s: float = 20.0) -> int:
    """Poll until at least `samples` more samples arrived (however loaded the machine)."""
    n = 0
    deadline = time.monotonic() + timeout_s
    while n < samples and time.monotonic() < deadline:
        got = session.poll()
        n += got.samples.size
        if not got.samples.size:
            time.sleep(0.005)
    return n


def test_recording_started_mid_stream_replays_bit_identically(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    # Invented programme; 2 kHz demo cell played 4x faster than real time.
    run = simulated_cell_for(PROFILE, seed=8).generate(parse_programme("hold 1 0; hold 2 40"))
    with PtyCell(run, speed=4.0) as cell:
        session = LiveSession(PROFILE, cell.port_name)
        session.start()
        while not session.connected_once:
            session.poll()
            time.sleep(0.005)
        cell.start()
        assert _poll_for(session, 400) >= 400  # 0.2 s unloaded, at rest: zero, then record
        tare = session.tare()
        _poll_for(session, 100)
        recording = session.start_recording(tmp_path, note="mid-stream (invented data)")
        with pytest.raises(ValueError, match="already recording"):
            session.start_recording(tmp_path)
        _poll_for(session, 3000)  # through the load step at 1 s
        summary = session.stop_recording(reason="test")
        after = _poll_for(session, 200)  # estimation goes on without a recording
        session.close()
    assert after > 0 and summary["samples"] > 0 and summary["samples_lost"] == 0
    data = read_run(recording.folder)
    assert data.closed and data.samples.size == summary["samples"]
    # The zero set before the recording is carried over at the run's first sample.
    tares = [e for e in data.events if e["kind"] == "tare"]
    assert len(tares) == 1 and tares[0]["index"] == 0
    assert tares[0]["offset_m"] == tare.offset_m
    capsys.readouterr()
    assert main(["replay", str(recording.folder)]) == 0
    assert f"identical to the {data.samples.size} estimates" in capsys.readouterr().out


def test_no_stall_is_judged_while_received_samples_wait_in_the_reader() -> None:
    import dataclasses

    import numpy as np

    from daq.samples import empty_block

    session = LiveSession(PROFILE, "loop://")  # a pyserial URL; the reader is not started
    block = empty_block(400)
    block["seq"] = np.arange(400)
    block["device_time_s"] = np.arange(400) / 2000.0
    block["host_time_s"] = 100.0 + np.arange(400) / 2000.0
    session.pipeline.process(block)
    session._clock = lambda: 105.0  # 4.8 s after the last sample, by the host clock
    real_stats = session.reader.stats

    def waiting() -> object:
        return dataclasses.replace(real_stats(), samples_unread=50)

    session.reader.stats = waiting  # the consumer lags: samples are waiting
    assert not any(getattr(c, "alarm_id", "") == "stalled-stream" for c in session.poll().changes)
    session.reader.stats = real_stats  # nothing waits: the silence is real
    assert any(getattr(c, "alarm_id", "") == "stalled-stream" for c in session.poll().changes)
