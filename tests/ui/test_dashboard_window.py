"""The dashboard window, offscreen (pytest-qt): live data, the reading, record and replay."""

from __future__ import annotations

from pathlib import Path

import pytest

from daq.runs import read_run
from estimator.profile import default_demo_profile
from ui.cli import main
from ui.dashboard.window import DashboardWindow
from ui.dashboard.worker import SimulatedSource

# Invented programme: unloaded 1 s, then 40 N; simulated cell 2x faster than real time, so
# the zero asked for after 0.2 s has 0.4 s of real time before the load arrives, even on a
# busy machine.
SIM = SimulatedSource(programme="hold 1 0; hold 3 40", speed=2.0, loop=False)


def test_window_reads_the_simulated_cell_records_and_the_run_replays(
    qtbot, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    window = DashboardWindow(default_demo_profile(), runs_root=tmp_path, simulated=SIM)
    qtbot.addWidget(window)
    window.show()
    window.connect_source()
    worker = window.worker
    assert worker is not None
    qtbot.waitUntil(lambda: worker.status().samples > 400, timeout=20_000)
    window.zero_now()  # unloaded and at rest during the first 1 s (simulated)
    window.note_edit.setText("dashboard test (invented data)")
    window.record_button.click()
    qtbot.waitUntil(lambda: worker.status().recording != "", timeout=10_000)
    window.mark_button.click()
    # After the 40 N step settles the readout shows it within 2 % (common practice band).
    qtbot.waitUntil(lambda: worker.status().time_s > 2.0, timeout=20_000)
    window.redraw()  # the readout as of now (the timer may not have ticked yet)
    text = window.force_label.text()
    assert text.endswith(" N") and float(text.split()[0]) == pytest.approx(40.0, rel=0.02)
    assert "(U, k = 2" in window.u_label.text()
    assert window.frames > 0
    # The live curve (running per-column envelope) shows every extreme of the window:
    # the 40 N step and the ringing of k·x, nothing beyond the samples it was given.
    window.timer.stop()
    window.redraw()
    t1 = window._running.t_last
    data = window.buffer.window(window.window_s, end_s=t1)
    w = window._running.column_s
    wider = window.buffer.window(window.window_s + w, end_s=t1)  # the oldest partial column
    for curve, row in ((window.c_force, 2), (window.c_static, 4)):
        y = curve.getData()[1]
        assert y.max() >= data[row].max() and y.min() <= data[row].min()
        assert y.max() <= wider[row].max() and y.min() >= wider[row].min()
    window.record_button.click()  # stop recording
    qtbot.waitUntil(lambda: worker.status().recording == "", timeout=10_000)
    window.close()  # stops the worker
    assert window.worker is None
    (folder,) = [p.parent for p in tmp_path.glob("*/run.json")]
    data = read_run(folder)
    assert data.closed and data.description["operator_note"] == "dashboard test (invented data)"
    assert {"tare", "mark"} <= {e["kind"] for e in data.events}
    # The zero came from the unloaded cell (40 N would be 1e-4 m on the demo cell).
    (tare,) = [e for e in data.events if e["kind"] == "tare"]
    assert abs(tare["offset_m"]) < 1e-6
    capsys.readouterr()
    assert main(["replay", str(folder)]) == 0
    assert "identical to the" in capsys.readouterr().out
    # The same run in the window's replay mode shows the numbers computed live.
    again = DashboardWindow(default_demo_profile(), runs_root=tmp_path)
    qtbot.addWidget(again)
    again.open_run(folder)
    live = data.streams["estimates"]
    again.seek(float(live["time_s"][-200]))
    again.redraw()
    i = again.playback.cursor
    # Digits from U (k = 2) as on screen (JCGM 100:2008 7.2.6; tests/ui/test_display_units.py).
    expanded = 2.0 * again.playback.force_u_n[i]
    assert again.force_label.text() == again.units.force_text(live["force_n"][i], expanded)
    assert "identical to live" in again.state_label.text()
    again.close()


def test_closing_the_window_while_recording_closes_the_run(qtbot, tmp_path: Path) -> None:
    window = DashboardWindow(default_demo_profile(), runs_root=tmp_path, simulated=SIM)
    qtbot.addWidget(window)
    window.show()
    window.connect_source()
    worker = window.worker
    qtbot.waitUntil(lambda: worker.status().samples > 100, timeout=20_000)
    window.record_button.click()
    qtbot.waitUntil(lambda: worker.status().recording != "", timeout=10_000)
    window.close()
    (folder,) = [p.parent for p in tmp_path.glob("*/run.json")]
    data = read_run(folder)
    assert data.closed and data.closing["summary"]["reason"] == "window closed"


def test_replay_mode_shows_the_recorded_numbers(qtbot, tmp_path: Path) -> None:
    recordings = Path(__file__).resolve().parents[2] / "recordings"
    folder = sorted(recordings.glob("*/run.json"))[0].parent  # the invented demo run
    data = read_run(folder)
    live = data.streams["estimates"]
    window = DashboardWindow(default_demo_profile(), runs_root=tmp_path)
    qtbot.addWidget(window)
    window.show()
    window.open_run(folder)
    assert window.playback is not None and window.replay_bar.isVisible()
    window.seek(0.9)  # inside the 50 N hold of the invented demo run
    window.redraw()
    i = window.playback.cursor
    # The readout is the estimate recorded live at that sample, to the digits shown.
    expanded = 2.0 * window.playback.force_u_n[i]
    assert window.force_label.text() == window.units.force_text(live["force_n"][i], expanded)
    assert "identical to live" in window.state_label.text()
    assert window.step_table.rowCount() == 2
    assert window.step_table.item(0, 2).text() == "50.00"
    # Jumping to an event puts it in the middle of the view.
    assert window.event_combo.count() > 1
    window._jump_to_event(1)
    t_event = window.event_combo.itemData(1)
    assert window.playback.time_s[window.playback.cursor] <= t_event + 0.5 * window.window_s
    window.close_run()
    assert window.playback is None and not window.replay_bar.isVisible()
    window.close()


def test_a_stalled_simulated_cell_raises_an_alarm_that_can_be_acknowledged(
    qtbot, tmp_path: Path
) -> None:
    # Invented programme; the simulated cell stops sending for 0.8 s (simulated time) at
    # 0.5 s; the stall alarm's limit is 0.5 s of silence.
    sim = SimulatedSource(programme="hold 3 10", speed=1.0, loop=False, faults="stall@0.5:0.8")
    window = DashboardWindow(default_demo_profile(), runs_root=tmp_path, simulated=sim)
    qtbot.addWidget(window)
    window.show()
    window.connect_source()

    def alarm_texts() -> list[str]:
        window.redraw()
        return [window.alarm_list.item(i).text() for i in range(window.alarm_list.count())]

    qtbot.waitUntil(lambda: any("no sample received" in t for t in alarm_texts()), timeout=20_000)
    window.ack_button.click()
    qtbot.waitUntil(lambda: any("(acknowledged)" in t for t in alarm_texts()), timeout=10_000)
    # The samples lost in the stall are counted and raise the loss alarm too (the
    # message log keeps every transition, the list only the active ones).
    qtbot.waitUntil(lambda: window.worker.status().lost >= 1500, timeout=20_000)
    qtbot.waitUntil(
        lambda: "alarm raised: 1600 of the last" in window.log.toPlainText(), timeout=10_000
    )
    window.close()


def test_a_worker_that_dies_holding_the_buffer_lock_leaves_the_window_responsive(
    qtbot, tmp_path: Path
) -> None:
    # The worst case for the window: the acquisition process is killed while it holds
    # the trace buffer's lock. The window must say so and keep running its timer without
    # waiting on that lock (a frame then skips the plots).
    sim = SimulatedSource(programme="hold 30 0", loop=False)  # invented: unloaded cell
    window = DashboardWindow(default_demo_profile(), runs_root=tmp_path, simulated=sim)
    qtbot.addWidget(window)
    window.show()
    window.connect_source()
    worker = window.worker
    qtbot.waitUntil(lambda: worker.status().samples > 200, timeout=20_000)
    frames = window.frames
    qtbot.waitUntil(lambda: window.frames > frames, timeout=10_000)
    window.buffer._lock.acquire()  # as the worker would hold it mid-append...
    worker._process.kill()  # ...when it is killed
    qtbot.waitUntil(lambda: "failed" in window.state_label.text(), timeout=10_000)
    assert "ended unexpectedly" in window.state_label.text()
    reads: list[str] = []
    window.buffer.since = lambda *a, **k: reads.append("since")  # type: ignore[method-assign]
    window.buffer.window = lambda *a, **k: reads.append("window")  # type: ignore[method-assign]
    for _ in range(5):
        window.redraw()  # no buffer read while the worker is failed
    assert reads == []
    window.close()  # disconnecting does not touch the buffer's lock either
    assert window.worker is None
