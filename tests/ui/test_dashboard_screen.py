"""What the window shows, offscreen (pytest-qt): labels, units, times and enabled states,
live (a stand-in worker over invented traces) and in replay (the invented demo run).

Numbers on screen are checked against JCGM 100:2008 (GUM) 7.2.6 (U to two significant
digits, the value rounded where U is) and SI prefixes (BIPM SI Brochure, 9th ed.);
colours against WCAG 2.1 (tests/ui/test_contrast.py checks the palette itself).
"""

from __future__ import annotations

import dataclasses
from pathlib import Path
from typing import Any

import numpy as np
import pytest

from estimator.monitor import SettlingRule
from estimator.profile import default_demo_profile
from ui.dashboard import palette
from ui.dashboard.buffer import TraceBuffer
from ui.dashboard.window import SIMULATED_LABEL, DashboardWindow
from ui.dashboard.wording import LIVE_ONLY_REASON, NO_ALARMS, event_text
from ui.dashboard.worker import WorkerStatus, rule_numbers
from ui.display_units import CellUnits
from ui.safety import CAUTION

RATE = 2000.0  # the demo profile's sample rate, Hz
RECORDINGS = Path(__file__).resolve().parents[2] / "recordings"


class StandIn:
    """Stands in for the acquisition worker: a fixed status, commands recorded."""

    def __init__(self, status: WorkerStatus) -> None:
        self.status_now = status
        self.commands: list[tuple[str, Any]] = []

    def status(self) -> WorkerStatus:
        return self.status_now

    def acknowledge(self, alarm_id: str) -> None:
        self.commands.append(("ack", alarm_id))

    def stop(self) -> None:
        self.commands.append(("stop", None))


def _invented_traces(seconds: float = 6.0) -> np.ndarray:
    """Invented traces at 2 kHz: 0 N, then 50 N from 2 s. The first three samples carry
    the observer's start-up U (σ 130 N, as it starts); then σ 0.1 N on the load and
    0.004 N unloaded, and the estimate wanders by much less than that."""
    t = np.arange(int(seconds * RATE)) / RATE
    rng = np.random.default_rng(7)
    f = np.where(t >= 2.0, 50.0, 0.0) + rng.normal(0.0, 0.002, t.size)
    u = np.where(t >= 2.0, 0.1, 0.004)
    u[:3] = 130.0
    return np.vstack([t, f / 4e5, f, u, f + 0.0])


def _live_window(
    qtbot: Any, profile: Any, status: WorkerStatus
) -> tuple[DashboardWindow, StandIn]:
    window = DashboardWindow(profile)
    qtbot.addWidget(window)
    window.timer.stop()  # frames drawn by the test, not by a timer
    window.show()
    data = _invented_traces()
    buffer = TraceBuffer(data.shape[1] + 10)
    buffer.append(data)
    worker = StandIn(status)
    window.attach(worker, buffer)
    window.redraw()
    return window, worker


SETTLED = WorkerStatus(
    state="connected",
    rate_hz=2000.3,
    drift_ppm=150.0,
    samples=12000,
    lost=0,
    rejected=2,
    time_s=5.9995,
    force_n=50.01234,
    force_u_n=0.1,  # U = 0.20 N
    displacement_m=125.0312e-6,
    settling="settled",
    valid_since_s=2.0215,
    rule=rule_numbers(SettlingRule.for_range(-10.0, 120.0)),
    hold_samples=40,
    model=(0.97, 0.03, 0.0),
)


def test_live_window_one_unit_one_clock_and_a_visible_u(qtbot) -> None:
    window, _ = _live_window(qtbot, default_demo_profile(), SETTLED)
    # One unit per quantity, in the readout and on the axes (the invented demo cell:
    # up to 120 N, 0.5 mm of travel: N and µm), digits from U (GUM 7.2.6).
    assert window.force_label.text() == "50.01 N"
    assert window.u_label.text().startswith("± 0.20 N")
    assert "U, k = 2" in window.u_label.text()
    assert window.x_label.text() == "displacement 125.03 µm"
    assert "(µm)" in window.p_x.getAxis("left").labelString()
    assert "force (N)" in window.p_f.getAxis("left").labelString()
    assert "force − reading (N)" in window.p_z.getAxis("left").labelString()
    axis = window.p_x.getAxis("left")  # the ticks read in µm, not in m
    assert axis.tickStrings([1e-4, 2e-4], axis.autoSIPrefixScale * axis.scale, 1e-4) == [
        "100",
        "200",
    ]
    # One clock: device time on the one time axis, and the times in text on it.
    assert "device time (s)" in window.p_z.getAxis("bottom").labelString()
    assert not window.p_x.getAxis("bottom").isVisible()
    x0, x1 = window.p_f.getViewBox().viewRange()[0]
    assert x0 <= 2.0215 <= x1 and x0 <= 5.9995 <= x1
    tile = window.tile.text()
    assert "SETTLED — read now" in tile and "valid since t = 2.0215 s" in tile
    assert all(line.isVisible() and line.value() == 2.0215 for line in window.valid_lines)
    assert not any(line.isVisible() for line in window.cursors)  # live: no cursor
    # A visible ±U at the working point: the close-up strip spans ±2.5 U around the
    # reading, so the band at the newest sample fills 2/5 of its height.
    lo, hi = window.p_z.getViewBox().viewRange()[1]
    assert (lo, hi) == pytest.approx((-0.5, 0.5))
    _, band_lo, band_hi = window.zoom_band.data
    assert band_hi[-1] - band_lo[-1] == pytest.approx(0.4, abs=0.01)
    # No start-up artefact: the first samples' U (260 N) is not drawn as a band.
    rect = window.band.boundingRect()
    assert rect.top() > -1.0 and rect.bottom() < 51.0
    # The model in force, in words.
    assert window.model_label.text() == "steady load (97 %)"
    # One word per thing: an ASCII source rejects lines; "no active alarms" said.
    assert window.lost_label.text() == "0 lost, 2 bad lines"
    assert window.panel.lost_name.text() == "lost / bad lines"
    assert window.alarm_list.item(0).text() == NO_ALARMS
    # Enabled states live: the cell's controls on, the source fixed while connected.
    for w in (window.note_edit, window.record_button, window.mark_button, window.zero_button):
        assert w.isVisible() and w.isEnabled()
    assert not window.ack_button.isEnabled()  # nothing to acknowledge
    assert window.connect_button.text() == "Disconnect" and not window.source.isEnabled()
    assert window.source.currentText() == SIMULATED_LABEL
    # The rule in the cell's unit, readable, and the caution kept, in the palette's colours.
    assert window.rule_label.text().startswith("Settled when every estimate")
    assert "0.13 N" in window.rule_label.text()  # 0.1 % of the invented 130 N span
    assert palette.SECONDARY_TEXT in window.rule_label.styleSheet()
    caution = window.panel.caution
    assert caution.text() == CAUTION and caution.isVisible()
    assert palette.CAUTION_TEXT in caution.styleSheet()
    assert palette.CAUTION_BG in caution.styleSheet()
    assert palette.TILE_BG["settled"] in window.tile.styleSheet()
    window.worker = None  # nothing to stop
    window.close()


def test_live_alarms_are_listed_with_their_time_and_can_be_acknowledged(qtbot) -> None:
    profile = default_demo_profile()
    binary = profile.with_updates(
        acquisition=dataclasses.replace(profile.acquisition, framing="binary-24")
    )
    alarm = ("stall", "critical", "no sample received for 0.6 s", False, 3.25)
    status = dataclasses.replace(SETTLED, alarms=(alarm,))
    window, worker = _live_window(qtbot, binary, status)
    assert window.alarm_list.item(0).text() == (
        "CRITICAL since t = 3.2500 s: no sample received for 0.6 s"
    )
    colour = window.alarm_list.item(0).foreground().color().name()
    assert colour == palette.ALARM_TEXT["critical"]
    assert window.lost_label.text() == "0 lost, 2 bad frames"  # a binary source: frames
    assert window.ack_button.isEnabled()
    window.ack_button.click()
    assert ("ack", "stall") in worker.commands
    window.worker = None
    window.close()


def test_replay_looks_like_replay(qtbot) -> None:
    folder = sorted(RECORDINGS.glob("*/run.json"))[0].parent  # the invented demo run
    window = DashboardWindow(default_demo_profile())
    qtbot.addWidget(window)
    window.timer.stop()
    window.show()
    window.open_run(folder)
    p = window.playback
    window.seek(0.9)  # inside the 50 N hold of the invented demo run
    window.redraw()
    units = window.units
    i = p.cursor
    # The source box shows the run; live-only controls hidden, with the reason shown.
    run_id = p.run.description["run_id"]
    assert window.source.currentText().startswith(f"recorded run {run_id}")
    for w in (window.source, window.connect_button, window.profile_button):
        assert not w.isEnabled() and w.toolTip() == LIVE_ONLY_REASON
    for w in (window.note_edit, window.record_button, window.mark_button, window.zero_button):
        assert not w.isVisible() and not w.isEnabled()
    assert window.panel.reason_label.isVisible()
    assert window.panel.reason_label.text() == LIVE_ONLY_REASON
    assert not window.ack_button.isEnabled() and window.ack_button.toolTip() == LIVE_ONLY_REASON
    assert window.panel.title.text() == "Force at the cursor (recorded run)"
    # The tile speaks of a past run, with its time on the axis.
    since = window.playback.status().valid_since_s
    tile = window.tile.text()
    assert "read now" not in tile and f"settled at {units.time_text(since)}" in tile
    # The readout at the cursor in the run's units, digits from U.
    expanded = 2.0 * p.force_u_n[i]
    assert window.force_label.text() == units.force_text(p.force_n[i], expanded)
    assert window.force_label.text().endswith(" N")
    # A playback cursor on every plot, at the cursor's time, inside the view.
    t = float(p.time_s[i])
    x0, x1 = window.p_f.getViewBox().viewRange()[0]
    assert x0 <= t <= x1
    assert all(line.isVisible() and line.value() == t for line in window.cursors)
    assert window.cursor_label.text().startswith(f"cursor {units.time_text(t)}")
    # Events on the same clock; the step table with units in its headings.
    assert window.event_combo.itemText(1).startswith("t = ")
    headers = [window.step_table.horizontalHeaderItem(j).text() for j in range(8)]
    assert headers[1:3] == ["from (N)", "to (N)"]
    assert "÷" in headers[7] and "settling time" in headers[7]
    assert window.step_table.item(0, 2).text() == "50.00"  # U of the held 50 N: 0.20 N
    assert window.model_label.text().startswith("steady load")
    window.close_run()
    assert window.source.currentText() == SIMULATED_LABEL and window.source.isEnabled()
    assert window.record_button.isVisible() and not window.record_button.isEnabled()
    assert window.record_button.toolTip() == "Connect to a cell first."
    assert not any(line.isVisible() for line in window.cursors)
    window.close()


def test_one_word_for_the_zero_in_the_button_and_the_run_log() -> None:
    # The run log stores a zero under the kind "tare" (docs/run-format.md); the window
    # calls it by the button's word everywhere.
    units = CellUnits.for_profile(default_demo_profile())
    fields = {"index": 1000, "seq": 1000, "offset_m": 1.234e-6, "n_samples": 200}
    text = event_text("tare", "zero set to 1.234000e-06 m from 200 samples", fields, 0.5, units)
    assert text == "t = 0.5000 s  zero: set, 1.23 µm subtracted"
    assert "tare" not in text
    settling = {"old": "settled", "new": "changing"}
    assert event_text("settling", "…", settling, 0.3005, units) == (
        "t = 0.3005 s  settling: settled → changing"
    )
