"""The dashboard window (PySide6 + pyqtgraph): live plots, readout, controls, replay.

Layout, left to right: three plots on one device-time axis (displacement; force with its
±U band and, on request, the static k·x; and a close-up strip of the force minus the
current reading, where the ±U band at the working point is read), and the side panel
(`ui.dashboard.panel`). The source (simulated cell, a serial port, or in replay the
recorded run) and the profile are in the top row; in replay a bar under the plots holds
play, speed, the slider, the events and the table of load changes.

Every quantity is shown in one unit chosen for the cell (`ui.display_units.CellUnits`),
on the axes as in the readouts, and every time in text is device time, the plots' axis.

The window draws on a timer: each tick reads the worker's status snapshot and the
samples inside the time window from the shared buffer, reduces them to min/max
envelopes one column per pixel, and hands those to pyqtgraph. Acquisition never runs on
this thread.
"""

from __future__ import annotations

import math
from pathlib import Path
from typing import Any

import numpy as np
import pyqtgraph as pg
from pyqtgraph.Qt import QtCore, QtGui, QtWidgets

from ui.dashboard import palette
from ui.dashboard.buffer import TraceBuffer
from ui.dashboard.envelope import RunningEnvelope, band_envelope, line_envelope
from ui.dashboard.panel import SidePanel
from ui.dashboard.plot_items import BandItem, TickGrid, add_grid, fit_y, set_line, set_text
from ui.dashboard.step_table import step_cells, step_headers
from ui.dashboard.wording import LIVE_ONLY_REASON, event_text
from ui.dashboard.worker import AcquisitionWorker, SimulatedSource, WorkerStatus
from ui.display_units import CellUnits, Unit, fixed
from ui.safety import CAUTION

__all__ = ["SIMULATED_LABEL", "BandItem", "DashboardWindow", "TickGrid", "show_caution"]

SIMULATED_LABEL = "built-in simulated cell (invented data)"

_MAX_WINDOW_S = 120.0
_AXIS_WIDTH_PX = 64
# The close-up strip spans ±_ZOOM_SPAN_U × U around the reading, re-zoomed only when U
# moves by more than a factor _ZOOM_HYSTERESIS (a steady range keeps the axis still).
_ZOOM_SPAN_U = 2.5
_ZOOM_HYSTERESIS = 1.5
# Where U exceeds this share of the cell's calibrated span (the first milliseconds, and
# the moment of a sudden change while the observer decides), the band is not drawn: it
# would fill the plot. The readout still shows that U.
_BAND_LIMIT_OF_SPAN = 0.5
# Live, the view steps on by this share of its width when the newest sample reaches its
# right edge (see DashboardWindow._live_view).
_LIVE_STEP_OF_WINDOW = 0.05
# Span over which the U of a held level is taken for the step table, s.
_LEVEL_SPAN_S = 0.1
# In replay, when the run is longer than the window, the cursor sits at this share of
# the view's width.
_CURSOR_AT = 0.8


def _set_axis_unit(plot: Any, side: str, name: str, unit: Unit) -> None:
    """Label an axis with one fixed unit (no automatic prefix) and scale its ticks."""
    axis = plot.getAxis(side)
    _no_auto_prefix(axis)
    axis.setScale(1.0 / unit.size)
    plot.setLabel(side, name, units=unit.symbol)


def _no_auto_prefix(axis: Any) -> None:
    """Turn off pyqtgraph's automatic SI prefix. Its `enableAutoSIPrefix(False)` still
    computes a prefix from the current range (pyqtgraph 0.14), which then scales the
    tick labels: reset that prefix to none."""
    axis.enableAutoSIPrefix(False)
    axis.autoSIPrefixScale = 1.0
    axis.labelUnitPrefix = ""


def _vertical_line(colour: tuple[int, ...], width: int, dashed: bool = False) -> Any:
    style = QtCore.Qt.PenStyle.DashLine if dashed else QtCore.Qt.PenStyle.SolidLine
    line = pg.InfiniteLine(angle=90, movable=False, pen=pg.mkPen(colour, width=width, style=style))
    line.hide()
    return line


class DashboardWindow(QtWidgets.QMainWindow):
    """The live dashboard, and the replay of recorded runs.

    Args:
        profile: the cell profile to start with.
        profile_path: where it came from ("" for the built-in demo profile).
        runs_root: folder that recordings go to.
        simulated: options of the built-in simulated cell.
        connect: connect at once to the first source (the simulated cell by default).
        port: preselect this serial port instead of the simulated cell.
    """

    def __init__(
        self,
        profile: Any,
        *,
        profile_path: str = "",
        runs_root: Path = Path("recordings"),
        simulated: SimulatedSource | None = None,
        connect: bool = False,
        port: str | None = None,
    ) -> None:
        super().__init__()
        self.profile = profile
        self.profile_path = profile_path
        self.units = CellUnits.for_profile(profile)
        self.runs_root = Path(runs_root)
        self.simulated = simulated or SimulatedSource()
        self.worker: AcquisitionWorker | None = None
        self.buffer: Any = None  # TraceBuffer (live) or RunPlayback (replay)
        self.playback: Any = None
        self.frozen = False
        self.window_s = 10.0
        self.frames = 0
        self._messages_shown = 0
        self._last_tick: float | None = None
        self._x_range: tuple[float, float] | None = None
        self._zoom_u: float | None = None  # the U (k = 2, N) the close-up strip is zoomed to
        self._valid_since: float | None = None
        self._live_origin: tuple[Any, float] | None = None  # (buffer, its first time, s)
        self._running: RunningEnvelope | None = None  # live envelopes, updated per frame
        self._running_key: tuple[Any, float, int] | None = None
        self._running_total = 0
        self.setWindowTitle("forcelens — live force")
        self.resize(1500, 900)
        pg.setConfigOptions(
            antialias=False, background=palette.PLOT_BG, foreground=palette.PLOT_TEXT
        )
        self._build()
        self._refresh_ports(select=port)
        self._apply_units()
        self.timer = QtCore.QTimer(self)
        self.timer.setInterval(25)
        self.timer.timeout.connect(self.redraw)
        self.timer.start()
        if connect:
            self.connect_source()

    # ------------------------------------------------------------------ layout
    def _build(self) -> None:
        central = QtWidgets.QWidget()
        self.setCentralWidget(central)
        outer = QtWidgets.QVBoxLayout(central)
        outer.addLayout(self._build_source_row())
        body = QtWidgets.QHBoxLayout()
        outer.addLayout(body, stretch=1)
        left = QtWidgets.QVBoxLayout()
        body.addLayout(left, stretch=1)
        self.plots = pg.GraphicsLayoutWidget()
        left.addWidget(self.plots, stretch=1)
        self.replay_bar = self._build_replay_bar()
        left.addWidget(self.replay_bar)
        self.replay_bar.hide()
        self._build_plots()
        self.panel = SidePanel(self.units, self.profile.acquisition.framing)
        body.addWidget(self.panel)
        self._wire_panel()

    def _build_plots(self) -> None:
        self.p_x = self.plots.addPlot(row=0, col=0)
        self.p_f = self.plots.addPlot(row=1, col=0)
        self.p_z = self.plots.addPlot(row=2, col=0)
        for plot in (self.p_x, self.p_f, self.p_z):
            add_grid(plot)
            # A fixed axis width: wider tick labels after a load change would otherwise
            # re-lay out the plots in the middle of a frame (and the plots stay aligned).
            plot.getAxis("left").setWidth(_AXIS_WIDTH_PX)
            _no_auto_prefix(plot.getAxis("bottom"))
        for plot in (self.p_f, self.p_z):
            plot.setXLink(self.p_x)
        for plot in (self.p_x, self.p_f):  # one time axis, under the last plot
            plot.hideAxis("bottom")
        self.p_z.setLabel("bottom", "device time", units="s")
        layout = self.plots.ci.layout
        for row, stretch in ((0, 1), (1, 2), (2, 1)):
            layout.setRowStretchFactor(row, stretch)
        legend = self.p_f.addLegend(offset=(10, 10), brush=palette.LEGEND_BG)
        self.band = BandItem(palette.BAND)
        self.p_f.addItem(self.band, ignoreBounds=True)
        legend.addItem(pg.PlotDataItem(pen=None, fillLevel=0, brush=palette.BAND), "±U (k = 2)")
        self.c_static = self.p_f.plot(pen=pg.mkPen(palette.STATIC, width=1), name="k·x (static)")
        self.c_force = self.p_f.plot(
            pen=pg.mkPen(palette.ESTIMATE, width=2), name="estimated force"
        )
        self.c_x = self.p_x.plot(pen=pg.mkPen(palette.DISPLACEMENT, width=1))
        # The close-up: the estimate minus the current reading, and its ±U band.
        zoom_legend = self.p_z.addLegend(offset=(10, 5), brush=palette.LEGEND_BG)
        self.zoom_band = BandItem(palette.ZOOM_BAND)
        self.p_z.addItem(self.zoom_band, ignoreBounds=True)
        zoom_legend.addItem(
            pg.PlotDataItem(pen=None, fillLevel=0, brush=palette.ZOOM_BAND),
            "±U (k = 2), close-up at the reading",
        )
        self.c_zoom = self.p_z.plot(pen=pg.mkPen(palette.ESTIMATE, width=1))
        reading = pg.InfiniteLine(angle=0, pos=0.0, movable=False, pen=pg.mkPen(palette.STATIC))
        self.p_z.addItem(reading, ignoreBounds=True)
        self.p_z.setYRange(-1.0, 1.0, padding=0.0)
        for c in (self.c_static, self.c_force, self.c_x, self.c_zoom):
            c.setSkipFiniteCheck(True)
        # The replay cursor, and where the current reading became valid.
        self.cursors = [_vertical_line(palette.CURSOR, 2) for _ in range(3)]
        self.valid_lines = [_vertical_line(palette.VALID_SINCE, 1, dashed=True) for _ in range(2)]
        for plot, line in zip((self.p_x, self.p_f, self.p_z), self.cursors, strict=True):
            plot.addItem(line, ignoreBounds=True)
        for plot, line in zip((self.p_f, self.p_z), self.valid_lines, strict=True):
            plot.addItem(line, ignoreBounds=True)

    def _apply_units(self) -> None:
        """Put the current cell's units on the axes and in the panel."""
        u = self.units
        _set_axis_unit(self.p_x, "left", "displacement", u.displacement)
        _set_axis_unit(self.p_f, "left", "force", u.force)
        _set_axis_unit(self.p_z, "left", "force − reading", u.force)
        self.panel.set_units(u, self._active_profile().acquisition.framing)
        self._zoom_u = None
        if self.playback is not None:
            self.step_table.setHorizontalHeaderLabels(step_headers(u))

    def _wire_panel(self) -> None:
        p = self.panel
        # The panel's widgets under their usual names.
        for name in (
            "force_label", "u_label", "x_label", "tile", "rule_label", "model_label",
            "state_label", "rate_label", "lost_label", "rec_label", "note_edit",
            "record_button", "mark_button", "zero_button", "freeze_button", "static_check",
            "window_spin", "ack_button", "alarm_list", "log",
        ):  # fmt: skip
            setattr(self, name, getattr(p, name))
        p.record_button.clicked.connect(self._toggle_recording)
        p.mark_button.clicked.connect(self._mark)
        p.zero_button.clicked.connect(self._zero)
        p.freeze_button.toggled.connect(self._freeze)
        p.static_check.toggled.connect(self.c_static.setVisible)
        p.window_spin.setRange(0.1, _MAX_WINDOW_S)
        p.window_spin.setValue(self.window_s)
        p.window_spin.valueChanged.connect(self._set_window)
        p.ack_button.clicked.connect(self._acknowledge)
        p.set_mode(replay=False, connected=False)

    def _build_source_row(self) -> QtWidgets.QHBoxLayout:
        row = QtWidgets.QHBoxLayout()
        self.source_name = QtWidgets.QLabel("Source:")
        row.addWidget(self.source_name)
        self.source = QtWidgets.QComboBox()
        self.source.setMinimumWidth(320)
        row.addWidget(self.source)
        self.refresh_button = QtWidgets.QPushButton("Refresh ports")
        self.refresh_button.clicked.connect(lambda: self._refresh_ports())
        row.addWidget(self.refresh_button)
        self.profile_button = QtWidgets.QPushButton("Cell profile…")
        self.profile_button.clicked.connect(self._choose_profile)
        row.addWidget(self.profile_button)
        self.profile_label = QtWidgets.QLabel()
        row.addWidget(self.profile_label, stretch=1)
        self.connect_button = QtWidgets.QPushButton("Connect")
        self.connect_button.clicked.connect(self._toggle_connection)
        row.addWidget(self.connect_button)
        self.open_button = QtWidgets.QPushButton("Open run…")
        self.open_button.clicked.connect(self._choose_run)
        row.addWidget(self.open_button)
        self._show_profile()
        return row

    def _build_replay_bar(self) -> QtWidgets.QWidget:
        bar = QtWidgets.QFrame()
        lay = QtWidgets.QVBoxLayout(bar)
        lay.setContentsMargins(0, 0, 0, 0)
        row = QtWidgets.QHBoxLayout()
        self.play_button = QtWidgets.QPushButton("Play")
        self.play_button.setCheckable(True)
        self.play_button.toggled.connect(self._play)
        row.addWidget(self.play_button)
        row.addWidget(QtWidgets.QLabel("speed"))
        self.speed_combo = QtWidgets.QComboBox()
        for factor in (0.1, 0.25, 0.5, 1.0, 2.0, 5.0, 10.0):
            self.speed_combo.addItem(f"×{factor:g}", factor)
        self.speed_combo.setCurrentIndex(3)
        row.addWidget(self.speed_combo)
        self.slider = QtWidgets.QSlider(QtCore.Qt.Orientation.Horizontal)
        self.slider.setRange(0, 10_000)
        self.slider.sliderMoved.connect(self._scrub)
        row.addWidget(self.slider, stretch=1)
        self.cursor_label = QtWidgets.QLabel("—")
        self.cursor_label.setMinimumWidth(220)
        row.addWidget(self.cursor_label)
        lay.addLayout(row)
        row2 = QtWidgets.QHBoxLayout()
        self.event_combo = QtWidgets.QComboBox()
        self.event_combo.activated.connect(self._jump_to_event)
        row2.addWidget(self.event_combo, stretch=1)
        self.close_run_button = QtWidgets.QPushButton("Back to live")
        self.close_run_button.clicked.connect(self.close_run)
        row2.addWidget(self.close_run_button)
        lay.addLayout(row2)
        self.step_table = QtWidgets.QTableWidget(0, len(step_headers(self.units)))
        self.step_table.setHorizontalHeaderLabels(step_headers(self.units))
        self.step_table.verticalHeader().setVisible(False)
        self.step_table.setMaximumHeight(120)
        self.step_table.setEditTriggers(QtWidgets.QAbstractItemView.EditTrigger.NoEditTriggers)
        self.step_table.horizontalHeader().setSectionResizeMode(
            QtWidgets.QHeaderView.ResizeMode.Stretch
        )
        lay.addWidget(self.step_table)
        return bar

    # --------------------------------------------------------------- sources
    def _active_profile(self) -> Any:
        """The profile in use: the recorded run's in replay, else the window's."""
        return self.playback.profile if self.playback is not None else self.profile

    def _refresh_ports(self, select: str | None = None) -> None:
        from daq.ports import list_ports

        current = select or self.source.currentText()
        self.source.clear()
        self.source.addItem(SIMULATED_LABEL, None)
        try:
            ports = list_ports()
        except OSError as exc:
            self._say(f"cannot list ports: {exc}")
            ports = []
        for p in ports:
            self.source.addItem(f"{p.device} — {p.description}", p.device)
        if select and self.source.findData(select) < 0:
            self.source.addItem(select, select)  # a port pyserial does not list (pty, URL)
        index = self.source.findData(select) if select else self.source.findText(current)
        self.source.setCurrentIndex(max(0, index))

    def _show_profile(self) -> None:
        where = self.profile_path or "built-in demo profile (invented cell)"
        acq = self.profile.acquisition
        self.profile_label.setText(
            f"{self.profile.cell.name} — {where}; {acq.sample_rate_hz:g} Hz, {acq.framing}"
        )

    def _choose_profile(self) -> None:
        from estimator.profile import load_profile

        path, _ = QtWidgets.QFileDialog.getOpenFileName(
            self, "Cell profile", "", "Cell profiles (*.toml)"
        )
        if not path:
            return
        try:
            self.profile = load_profile(path)
        except (ValueError, OSError) as exc:
            QtWidgets.QMessageBox.warning(self, "Cell profile", str(exc))
            return
        self.profile_path = path
        self.units = CellUnits.for_profile(self.profile)
        self._apply_units()
        self._show_profile()

    def _toggle_connection(self) -> None:
        if self.worker is None:
            self.connect_source()
        else:
            self.disconnect_source()

    def connect_source(self) -> None:
        """Start acquiring from the selected source."""
        port = self.source.currentData()
        rate = self.profile.acquisition.sample_rate_hz
        self.buffer = TraceBuffer(int(_MAX_WINDOW_S * rate) + 1)
        worker = AcquisitionWorker(
            self.profile,
            port,
            self.buffer,
            runs_root=self.runs_root,
            simulated=self.simulated,
            profile_path=str(self.profile_path or ""),
        )
        self.attach(worker.start(), self.buffer)
        self._say(f"connecting to {port or SIMULATED_LABEL}")

    def attach(self, worker: Any, buffer: Any) -> None:
        """Show a running acquisition: `worker` gives `status()` (a `WorkerStatus`) and
        takes the commands of `AcquisitionWorker`; `buffer` is its `TraceBuffer`."""
        if self.playback is not None:
            self.close_run()
        self.worker, self.buffer = worker, buffer
        self._running = None
        self._x_range = None
        self.connect_button.setText("Disconnect")
        for w in (self.source, self.profile_button, self.refresh_button):
            w.setEnabled(False)
            w.setToolTip("Disconnect first.")
        self.panel.set_mode(replay=False, connected=True)

    def disconnect_source(self) -> None:
        """Stop acquiring (a recording in progress is closed cleanly)."""
        if self.worker is not None:
            self.worker.stop()
            self._show_messages(self.worker.status())
            self.worker = None
            self._messages_shown = 0
        self.record_button.setChecked(False)
        self.record_button.setText("Start recording")
        self.connect_button.setText("Connect")
        for w in (self.source, self.profile_button, self.refresh_button):
            w.setEnabled(True)
            w.setToolTip("")
        self.panel.set_mode(replay=False, connected=False)

    # -------------------------------------------------------------- controls
    def _toggle_recording(self, checked: bool) -> None:
        if self.worker is None:
            return
        if checked:
            self.worker.start_recording(self.note_edit.text().strip())
            self.record_button.setText("Stop recording")
        else:
            self.worker.stop_recording()
            self.record_button.setText("Start recording")

    def _mark(self) -> None:
        if self.worker is not None:
            self.worker.mark(self.note_edit.text().strip())

    def _zero(self) -> None:
        if self.worker is None:
            return
        answer = QtWidgets.QMessageBox.question(
            self,
            "Zero the cell",
            "Zero now? The cell must be unloaded and at rest: the mean displacement of "
            "the last 0.1 s becomes the new zero.",
        )
        if answer == QtWidgets.QMessageBox.StandardButton.Yes:
            self.zero_now()

    def zero_now(self) -> None:
        """Zero without asking (the caller has confirmed the cell is unloaded)."""
        if self.worker is not None:
            self.worker.tare()

    def _acknowledge(self) -> None:
        """Acknowledge the selected alarm, or every active one when none is selected."""
        if self.worker is None:
            return
        for alarm_id in self.panel.selected_alarm_ids():
            self.worker.acknowledge(alarm_id)

    # ---------------------------------------------------------------- replay
    def _choose_run(self) -> None:
        folder = QtWidgets.QFileDialog.getExistingDirectory(
            self, "Run folder", str(self.runs_root)
        )
        if folder:
            self.open_run(folder)

    def open_run(self, folder: str | Path) -> None:
        """Replay a recorded run: the same plots, a cursor, the step table and events."""
        from ui.dashboard.replay import RunPlayback

        try:
            playback = RunPlayback(folder)
        except (ValueError, OSError) as exc:
            QtWidgets.QMessageBox.warning(self, "Open run", str(exc))
            return
        if self.worker is not None:
            self.disconnect_source()
        self.playback = self.buffer = playback
        self._last_tick = None
        self._x_range = None
        run_id = playback.run.description["run_id"]
        self.setWindowTitle(f"forcelens — replay of {run_id}")
        self.units = CellUnits.for_profile(playback.profile)
        self._apply_units()
        self.source_name.setText("Run:")
        self.source.clear()
        where = Path(folder) if Path(folder).name != run_id else Path(folder).parent
        self.source.addItem(f"recorded run {run_id} in {where}", None)
        for w in (self.connect_button, self.source, self.profile_button, self.refresh_button):
            w.setEnabled(False)
            w.setToolTip(LIVE_ONLY_REASON)
        self.panel.set_mode(replay=True, connected=False)
        self.event_combo.clear()
        self.event_combo.addItem(f"jump to an event ({len(playback.events)})", None)
        for ev in playback.events:
            self.event_combo.addItem(
                event_text(ev.kind, ev.message, ev.fields, ev.time_s, self.units), ev.time_s
            )
        self.step_table.setRowCount(len(playback.changes))
        for i, row in enumerate(playback.changes):
            # The U of each level: over the 0.1 s before the change, and after it has
            # settled (common practice: the held level, not the change itself).
            t = row.change.t_start_s
            settle = row.observer.settling_time_s
            settled = t + (settle if math.isfinite(settle) else 0.0)
            u_before = playback.expanded_u_over(t - _LEVEL_SPAN_S, t)
            u_after = playback.expanded_u_over(settled, settled + _LEVEL_SPAN_S)
            for j, text in enumerate(step_cells(row, u_before, u_after, self.units)):
                self.step_table.setItem(i, j, QtWidgets.QTableWidgetItem(text))
        self.replay_bar.show()
        for line in self.cursors:
            line.show()
        duration = playback.end_s - playback.start_s
        self.window_spin.setValue(min(_MAX_WINDOW_S, max(0.1, round(duration + 0.05, 1))))
        cell = playback.profile.cell.name
        self.profile_label.setText(
            f"{cell} — profile recorded with the run; "
            f"{playback.profile.acquisition.sample_rate_hz:g} Hz, "
            f"{playback.profile.acquisition.framing}"
        )
        self.seek(playback.start_s + min(self.window_s, duration))
        self._say(
            f"replaying {folder}: {playback.time_s.size} samples, {len(playback.changes)} "
            f"load change(s); {playback.status().state}"
        )

    def close_run(self) -> None:
        """Leave replay mode."""
        self.play_button.setChecked(False)
        self.playback = self.buffer = None
        self.replay_bar.hide()
        for line in self.cursors:
            line.hide()
        self._x_range = None
        self.units = CellUnits.for_profile(self.profile)
        self._apply_units()
        self._show_profile()
        self.source_name.setText("Source:")
        self._refresh_ports()
        self.setWindowTitle("forcelens — live force")
        for w in (self.connect_button, self.source, self.profile_button, self.refresh_button):
            w.setEnabled(True)
            w.setToolTip("")
        self.panel.set_mode(replay=False, connected=False)

    def seek(self, time_s: float) -> None:
        """Put the replay cursor at `time_s` (device time, s)."""
        if self.playback is None:
            return
        self.playback.seek(time_s)
        self._sync_slider()

    def _sync_slider(self) -> None:
        p = self.playback
        span = max(p.end_s - p.start_s, 1e-9)
        t = float(p.time_s[p.cursor])
        self.slider.blockSignals(True)
        self.slider.setValue(round(10_000 * (t - p.start_s) / span))
        self.slider.blockSignals(False)
        end = fixed(p.end_s, self.units.time_decimals)
        self.cursor_label.setText(f"cursor {self.units.time_text(t)} of {end} s")

    def _scrub(self, value: int) -> None:
        p = self.playback
        if p is not None:
            self.seek(p.start_s + (p.end_s - p.start_s) * value / 10_000)

    def _jump_to_event(self, index: int) -> None:
        t = self.event_combo.itemData(index)
        if t is not None:
            self.seek(float(t))

    def _play(self, on: bool) -> None:
        self.play_button.setText("Pause" if on else "Play")
        self._last_tick = None
        if (
            on
            and self.playback is not None
            and self.playback.cursor >= self.playback.time_s.size - 1
        ):
            self.seek(self.playback.start_s)  # at the end: play from the start

    def _advance_playback(self) -> None:
        import time

        now = time.monotonic()
        if not self.play_button.isChecked():
            self._last_tick = None
            return
        if self._last_tick is not None:
            p = self.playback
            step = (now - self._last_tick) * float(self.speed_combo.currentData())
            self.seek(float(p.time_s[p.cursor]) + step)
            if p.cursor >= p.time_s.size - 1:
                self.play_button.setChecked(False)
        self._last_tick = now

    def _replay_view(self) -> tuple[float, float]:
        """The replay's view: the whole run when it fits the window, else a window that
        keeps the cursor at `_CURSOR_AT` of its width (within the run)."""
        p = self.playback
        t = float(p.time_s[p.cursor])
        if p.end_s - p.start_s <= self.window_s:
            return p.start_s, p.start_s + self.window_s
        left = min(max(t - _CURSOR_AT * self.window_s, p.start_s), p.end_s - self.window_s)
        return left, left + self.window_s

    def _freeze(self, on: bool) -> None:
        self.frozen = on
        self.freeze_button.setText("Follow live" if on else "Freeze view")

    def _set_window(self, value: float) -> None:
        self.window_s = float(value)

    def _say(self, text: str) -> None:
        self.panel.say(text)

    # ---------------------------------------------------------------- redraw
    def redraw(self) -> None:
        """One timer tick: update the readout and, unless frozen, the plots."""
        if self.playback is not None:
            self._advance_playback()
            status = self.playback.status()
        elif self.worker is not None and self.buffer is not None:
            status = self.worker.status()
        else:
            return
        self._show_status(status)
        if self.frozen or status.state == "failed":
            return  # a failed worker may have died holding the buffer's lock: don't wait on it
        bins = max(100, int(self.p_f.getViewBox().width()))
        live = self.playback is None
        rate = self.profile.acquisition.sample_rate_hz
        view = None if live else self._replay_view()
        if live and self.window_s * rate >= 4 * bins:
            traces = self._running_traces(bins)  # dense: only the new samples are reduced
        else:
            traces = self._window_traces(bins, view)
        if traces is None:
            return
        t_first, t1, xs, fs, ks, band = traces
        set_line(self.c_x, *xs)
        set_line(self.c_force, *fs)
        shown = [fs[1]]
        if ks is not None:
            set_line(self.c_static, *ks)
            shown.append(ks[1])
        self.band.set_band(*band)
        fit_y(self.p_x, [xs[1]])
        fit_y(self.p_f, shown)
        self._draw_zoom(status, fs, band)
        x_range = self._live_view(t_first, t1) if live else view
        if x_range != self._x_range:
            self.p_f.setXRange(*x_range, padding=0.0)
            self._x_range = x_range
        if not live:
            t = float(self.playback.time_s[self.playback.cursor])
            for line in self.cursors:
                line.setValue(t)
        self.frames += 1

    def _live_view(self, t_first: float, t_last: float) -> tuple[float, float]:
        """The live view on device time. Until the window is full the trace grows from
        the left edge; then the view steps on by `_LIVE_STEP_OF_WINDOW` of its width
        whenever the newest sample reaches its right edge, so the time axis and its
        labels are redrawn a few times a second instead of at every frame."""
        if self._live_origin is None or self._live_origin[0] is not self.buffer:
            self._live_origin = (self.buffer, t_first)  # the first sample of this stream
        t0 = self._live_origin[1]
        if t_last <= t0 + self.window_s:
            return t0, t0 + self.window_s
        step = _LIVE_STEP_OF_WINDOW * self.window_s
        right = t0 + math.ceil((t_last - t0) / step) * step
        return right - self.window_s, right

    def _band_limit_n(self) -> float:
        lim = self._active_profile().limits
        return _BAND_LIMIT_OF_SPAN * (lim.force_max_n - lim.force_min_n)

    def _draw_zoom(
        self, status: WorkerStatus, fs: tuple[np.ndarray, np.ndarray], band: Any
    ) -> None:
        """The close-up strip: the estimate minus the current reading, with its ±U band,
        zoomed to a few U around 0 (re-zoomed only when U moves by a factor 1.5)."""
        reading = status.force_n
        if not math.isfinite(reading):
            return
        u_now = 2.0 * status.force_u_n
        usable = math.isfinite(u_now) and 0.0 < u_now <= self._band_limit_n()
        if usable and (
            self._zoom_u is None
            or not 1.0 / _ZOOM_HYSTERESIS <= u_now / self._zoom_u <= _ZOOM_HYSTERESIS
        ):
            half = _ZOOM_SPAN_U * u_now
            self.p_z.setYRange(-half, half, padding=0.0)
            self._zoom_u = u_now
        # Values far outside the strip are clipped just beyond its edges: drawn as they
        # are, lines thousands of pixels long cost the painter more than the rest.
        lo, hi = self.p_z.getViewBox().viewRange()[1]
        margin = 0.1 * (hi - lo)
        lo, hi = lo - margin, hi + margin
        set_line(self.c_zoom, fs[0], np.clip(fs[1] - reading, lo, hi))
        self.zoom_band.set_band(
            band[0], np.clip(band[1] - reading, lo, hi), np.clip(band[2] - reading, lo, hi)
        )

    def _masked_band(self, f: np.ndarray, u: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """f ∓ 2u, NaN where 2u is beyond the band limit (not drawn there)."""
        expanded = 2.0 * u
        wide = ~(expanded <= self._band_limit_n())
        lo, hi = f - expanded, f + expanded
        lo[wide] = np.nan
        hi[wide] = np.nan
        return lo, hi

    def _window_traces(self, bins: int, view: tuple[float, float] | None) -> Any:
        """Envelopes of the samples in the view (replay) or the time window up to the
        newest sample (live, sparse data), read whole."""
        if view is None:
            data = self.buffer.window(self.window_s)
        else:
            data = self.buffer.window(view[1] - view[0], end_s=view[1])
        if data.shape[1] < 2:
            return None
        t, x, f, u, kx = data
        t0, t1 = view if view is not None else (float(t[-1]) - self.window_s, float(t[-1]))
        ks = line_envelope(t, kx, t0, t1, bins) if self.c_static.isVisible() else None
        lo, hi = self._masked_band(f, u)
        return (
            float(t[0]),
            float(t[-1]),
            line_envelope(t, x, t0, t1, bins),
            line_envelope(t, f, t0, t1, bins),
            ks,
            band_envelope(t, lo, hi, t0, t1, bins),
        )

    def _running_traces(self, bins: int) -> Any:
        """The same envelopes, kept up to date from the samples that arrived since the
        last frame (columns fixed in device time, one per pixel of the window)."""
        key = (self.buffer, self.window_s, bins)  # the buffer by identity
        if self._running is None or self._running_key != key:
            self._running = RunningEnvelope(self.window_s / bins, self.window_s)
            self._running_key = key
            self._running_total = 0
        data, self._running_total = self.buffer.since(self._running_total, self.window_s)
        if data.shape[1]:
            t, x, f, u, kx = data
            if t[0] < self._running.t_last:  # cannot happen with the worker's clock; be safe
                self._running = None
                return self._window_traces(bins, None)
            lo, hi = self._masked_band(f, u)
            self._running.add(t, np.vstack([x, f, kx, lo, hi]))
        mid, lo, hi = self._running.columns()
        if mid.size < 2:
            return None

        def line(row: int) -> tuple[np.ndarray, np.ndarray]:
            keep = np.isfinite(lo[row]) & np.isfinite(hi[row])
            return np.repeat(mid[keep], 2), np.column_stack([lo[row, keep], hi[row, keep]]).ravel()

        keep = np.isfinite(lo[3]) & np.isfinite(hi[4])
        return (
            float(mid[0]),
            self._running.t_last,
            line(0),
            line(1),
            line(2) if self.c_static.isVisible() else None,
            (mid[keep], lo[3, keep], hi[4, keep]),
        )

    def _show_status(self, s: WorkerStatus) -> None:
        self.panel.show_status(s)
        if self.playback is not None:
            rate = self.playback.profile.acquisition.sample_rate_hz
            set_text(self.rate_label, f"{rate:g} S/s (nominal, recorded run)")
        since = s.valid_since_s if s.settling == "settled" else None
        if since != self._valid_since:
            self._valid_since = since
            for line in self.valid_lines:
                line.setVisible(since is not None)
                if since is not None:
                    line.setValue(since)
        self._show_messages(s)

    def _show_messages(self, s: WorkerStatus) -> None:
        new = s.message_total - self._messages_shown
        for m in s.messages[-new:] if new > 0 else ():
            self._say(m)
        self._messages_shown = s.message_total

    def closeEvent(self, event: QtGui.QCloseEvent) -> None:  # noqa: N802 - Qt's name
        """Closing the window closes a recording in progress cleanly."""
        self.timer.stop()
        self.disconnect_source()
        super().closeEvent(event)


def show_caution(parent: QtWidgets.QWidget | None = None) -> None:
    """The usual cautions, once per start (the operator acknowledges them)."""
    box = QtWidgets.QMessageBox(parent)
    box.setWindowTitle("forcelens — before you load the cell")
    box.setIcon(QtWidgets.QMessageBox.Icon.Warning)
    box.setText(CAUTION)
    box.exec()
