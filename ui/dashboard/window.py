"""The dashboard window (PySide6 + pyqtgraph): live plots, readout, controls.

Layout, left to right: the plots (displacement, then force with its ±U band and, on
request, the static k·x), and a side panel with the force reading in large type, the
connection figures, the recording and zero controls and a message log. The source
(simulated cell or a serial port) and the profile are chosen in the top row.

The window draws on a timer: each tick reads the worker's status snapshot and the
samples inside the time window from the shared buffer, reduces them to min/max
envelopes one column per pixel, and hands those to pyqtgraph. Acquisition never runs on
this thread.
"""

from __future__ import annotations

import itertools
import math
from pathlib import Path
from typing import Any

import numpy as np
import pyqtgraph as pg
from pyqtgraph.Qt import QtCore, QtGui, QtWidgets

from ui.dashboard.buffer import TraceBuffer
from ui.dashboard.envelope import RunningEnvelope, band_envelope, line_envelope
from ui.dashboard.worker import AcquisitionWorker, SimulatedSource, WorkerStatus
from ui.safety import CAUTION

__all__ = ["SIMULATED_LABEL", "BandItem", "DashboardWindow", "TickGrid"]

SIMULATED_LABEL = "built-in simulated cell (invented data)"

# Our own palette (shared in spirit with ui/plots.py): deep teal estimate, slate static
# conversion, indigo displacement; the band is the estimate's colour, translucent.
_ESTIMATE = (0, 110, 120)
_BAND = (0, 110, 120, 55)
_STATIC = (120, 128, 140)
_DISPLACEMENT = (60, 60, 150)
_GRID = (212, 216, 222)
# The settling tile: our own words, symbols and colours, readable from across the room.
_TILES = {
    "waiting": ("…  WAITING", "#78909c"),
    "changing": ("▲▼  CHANGING", "#37474f"),
    "settling": ("◧  SETTLING", "#a86b00"),
    "settled": ("■  SETTLED — read now", "#00695c"),
    "out-of-range": ("✕  OUT OF RANGE", "#8e244d"),
}
# Columns of the replay step table: header, and how to get the text from a ChangeRow.
_STEP_COLUMNS: tuple[tuple[str, Any], ...] = (
    ("start (s)", lambda r: f"{r.change.t_start_s:.4f}"),
    ("from (N)", lambda r: f"{r.observer.initial:.4g}"),
    ("to (N)", lambda r: f"{r.observer.final:.4g}"),
    ("rise (ms)", lambda r: _ms(r.observer.rise_time_s)),
    ("overshoot (%)", lambda r: f"{r.observer.overshoot_pct:.2f}"),
    ("settle (ms)", lambda r: _ms(r.observer.settling_time_s)),
    ("k·x settle (ms)", lambda r: _ms(r.static.settling_time_s) if r.static else "—"),
    ("k·x / estimate", lambda r: f"{r.settling_ratio:.1f}" if r.static else "—"),
)


def _ms(seconds: float) -> str:
    return f"{seconds * 1e3:.2f}" if math.isfinite(seconds) else "—"


_SEVERITY_COLOURS = {"critical": "#8e244d", "warning": "#a86b00", "advisory": "#37474f"}
_PANEL_BG = "#f4f6f7"
_MAX_WINDOW_S = 120.0
_AXIS_WIDTH_PX = 64


class TickGrid(pg.GraphicsObject):
    """A light grid at the major ticks of the plot's axes, in one opaque colour.

    pyqtgraph's own grid draws three levels of translucent lines and rebuilds them
    whenever the view moves; under live load that took ~12 ms of the GUI thread per plot
    and frame. This one asks the axes for their major tick values and draws at most a few
    dozen opaque one-pixel lines in a single call.
    """

    def __init__(self, plot: Any, colour: tuple[int, int, int]) -> None:
        super().__init__()
        self._plot = plot
        self._pen = pg.mkPen(colour, width=1, cosmetic=True)
        self._rect = QtCore.QRectF()
        self._lines: list[QtCore.QLineF] = []
        self._lines_key: tuple[float, ...] | None = None
        self.setZValue(-100)  # under the data
        plot.getViewBox().sigRangeChanged.connect(self._range_changed)

    def _range_changed(self, *args: Any) -> None:
        (x0, x1), (y0, y1) = self._plot.getViewBox().viewRange()
        self.prepareGeometryChange()
        self._rect = QtCore.QRectF(x0, y0, x1 - x0, y1 - y0)
        self.update()

    def boundingRect(self) -> QtCore.QRectF:  # noqa: N802 - Qt's name
        return self._rect

    def _major_ticks(self, axis: str, lo: float, hi: float, pixels: float) -> list[float]:
        levels = self._plot.getAxis(axis).tickValues(lo, hi, max(pixels, 1.0))
        return [float(v) for v in levels[0][1] if lo <= v <= hi] if levels else []

    def paint(self, painter: QtGui.QPainter, *args: Any) -> None:
        r = self._rect
        if r.isEmpty():
            return
        vb = self._plot.getViewBox()
        key = (r.left(), r.top(), r.width(), r.height(), vb.width(), vb.height())
        if key != self._lines_key:  # the ticks change only with the view: ask once per view
            xs = self._major_ticks("bottom", r.left(), r.right(), vb.width())
            ys = self._major_ticks("left", r.top(), r.bottom(), vb.height())
            self._lines = [QtCore.QLineF(x, r.top(), x, r.bottom()) for x in xs]
            self._lines += [QtCore.QLineF(r.left(), y, r.right(), y) for y in ys]
            self._lines_key = key
        painter.setPen(self._pen)
        painter.drawLines(self._lines)


def _add_grid(plot: Any) -> None:
    """A light opaque grid at the axes' major ticks (see `TickGrid`)."""
    plot.addItem(TickGrid(plot, _GRID), ignoreBounds=True)


def _runs(x: np.ndarray) -> list[tuple[int, int]]:
    """Index ranges [a, b) of `x` (increasing, (m,)) without a gap of > 3 typical steps."""
    dx = np.diff(x)
    steps = dx[dx > 0]  # envelope points come in pairs at one x
    # The (upper) median step; np.partition, as np.median's first call imports numpy.ma
    # (~30 ms) in the middle of a frame.
    typical = float(np.partition(steps, steps.size // 2)[steps.size // 2]) if steps.size else 0.0
    cuts = np.flatnonzero(dx > 3.0 * typical) + 1 if typical > 0 else np.zeros(0, int)
    bounds = [0, *cuts.tolist(), x.size]
    return list(itertools.pairwise(bounds))


def _fit_y(plot: Any, curves: list[np.ndarray]) -> None:
    """Fit the y range to the curves, changing it only when they leave it or use less
    than half of it: a steady range keeps the axis (and its costly labels) unchanged."""
    values = [c[np.isfinite(c)] for c in curves]
    values = [v for v in values if v.size]
    if not values:
        return
    lo = min(float(v.min()) for v in values)
    hi = max(float(v.max()) for v in values)
    span = max(hi - lo, 1e-12 * max(1.0, abs(hi)), 1e-15)
    (cur_lo, cur_hi) = plot.getViewBox().viewRange()[1]
    inside = cur_lo <= lo and hi <= cur_hi
    if inside and (hi - lo) >= 0.5 * (cur_hi - cur_lo):
        return
    pad = 0.08 * span
    plot.setYRange(lo - pad, hi + pad, padding=0.0)


def _set_text(label: QtWidgets.QLabel, text: str) -> None:
    """Set a label's text only when it changes (a change may re-lay out the panel)."""
    if label.text() != text:
        label.setText(text)


def _fixed_size(label: QtWidgets.QLabel, width: int) -> None:
    """Give a label that changes every frame a fixed size: a label whose minimum and
    maximum sizes agree does not re-lay out the panel when its text changes."""
    label.ensurePolished()  # the style sheet's font counts in the height
    label.setFixedSize(width, label.sizeHint().height())


def _line(curve: Any, x: np.ndarray, y: np.ndarray) -> None:
    """Set a curve, leaving gaps in the data unconnected."""
    connect = np.ones(x.size, dtype=bool)
    for _, b in _runs(x)[:-1]:
        connect[b - 1] = False
    curve.setData(x, y, connect=connect)


class BandItem(pg.GraphicsObject):
    """A filled band between two curves, drawn as one polygon (cheap for ~1000 points)."""

    def __init__(self, brush: Any) -> None:
        super().__init__()
        self._brush = pg.mkBrush(brush)
        self._path = QtGui.QPainterPath()
        self._rect = QtCore.QRectF()

    def set_band(self, x: np.ndarray, low: np.ndarray, high: np.ndarray) -> None:
        """Set the band: for each x, the interval [low, high]; arrays of shape (m,).

        Where x jumps by more than three typical steps (a gap in the data) the band is
        broken instead of being drawn across the gap.
        """
        self.prepareGeometryChange()
        path = QtGui.QPainterPath()
        if x.size >= 2:
            for a, b in _runs(x):
                if b - a < 2:
                    continue
                xs = np.concatenate([x[a:b], x[a:b][::-1]])
                ys = np.concatenate([high[a:b], low[a:b][::-1]])
                sub = pg.arrayToQPath(xs, ys, connect="all")
                sub.closeSubpath()
                path.addPath(sub)
        self._path = path
        self._rect = path.boundingRect()
        self.update()

    def boundingRect(self) -> QtCore.QRectF:  # noqa: N802 - Qt's name
        return self._rect

    def paint(self, painter: QtGui.QPainter, *args: Any) -> None:
        painter.setPen(QtCore.Qt.PenStyle.NoPen)
        painter.setBrush(self._brush)
        painter.drawPath(self._path)


class DashboardWindow(QtWidgets.QMainWindow):
    """The live dashboard.

    Args:
        profile: the cell profile to start with.
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
        self._relative_axis: bool | None = None
        self._x_range: tuple[float, float] | None = None
        self._running: RunningEnvelope | None = None  # live envelopes, updated per frame
        self._running_key: tuple[Any, float, int] | None = None
        self._running_total = 0
        self._tile_shown: tuple[str, float | None] | None = None
        self.setWindowTitle("forcelens — live force")
        self.resize(1500, 900)
        pg.setConfigOptions(antialias=False, background="w", foreground=(35, 35, 35))
        self._build()
        self._refresh_ports(select=port)
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
        self.p_x = self.plots.addPlot(row=0, col=0)
        self.p_x.setLabel("left", "displacement", units="m")
        _add_grid(self.p_x)
        self.p_f = self.plots.addPlot(row=1, col=0)
        self.p_f.setLabel("left", "force", units="N")
        self.p_f.setLabel("bottom", "device time", units="s")
        _add_grid(self.p_f)
        self.p_f.setXLink(self.p_x)
        for plot in (self.p_x, self.p_f):
            # A fixed axis width: wider tick labels after a load change would otherwise
            # re-lay out both plots in the middle of a frame (and the plots stay aligned).
            plot.getAxis("left").setWidth(_AXIS_WIDTH_PX)
        self.plots.ci.layout.setRowStretchFactor(1, 2)
        legend = self.p_f.addLegend(offset=(10, 10))
        self.band = BandItem(_BAND)
        self.p_f.addItem(self.band, ignoreBounds=True)  # the start-up band would dwarf the rest
        legend.addItem(pg.PlotDataItem(pen=None, fillLevel=0, brush=_BAND), "±U (k = 2)")
        self.c_static = self.p_f.plot(pen=pg.mkPen(_STATIC, width=1), name="k·x (static)")
        self.c_force = self.p_f.plot(pen=pg.mkPen(_ESTIMATE, width=2), name="estimated force")
        self.c_x = self.p_x.plot(pen=pg.mkPen(_DISPLACEMENT, width=1))
        for c in (self.c_static, self.c_force, self.c_x):
            c.setSkipFiniteCheck(True)
        body.addWidget(self._build_panel())

    def _build_source_row(self) -> QtWidgets.QHBoxLayout:
        row = QtWidgets.QHBoxLayout()
        row.addWidget(QtWidgets.QLabel("Source:"))
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
        self.cursor_label.setMinimumWidth(150)
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
        self.step_table = QtWidgets.QTableWidget(0, len(_STEP_COLUMNS))
        self.step_table.setHorizontalHeaderLabels([c[0] for c in _STEP_COLUMNS])
        self.step_table.verticalHeader().setVisible(False)
        self.step_table.setMaximumHeight(150)
        self.step_table.setEditTriggers(QtWidgets.QAbstractItemView.EditTrigger.NoEditTriggers)
        self.step_table.horizontalHeader().setSectionResizeMode(
            QtWidgets.QHeaderView.ResizeMode.Stretch
        )
        lay.addWidget(self.step_table)
        return bar

    def _build_panel(self) -> QtWidgets.QWidget:
        panel = QtWidgets.QFrame()
        panel.setFixedWidth(380)
        panel.setStyleSheet(f"QFrame#panel {{ background: {_PANEL_BG}; }}")
        panel.setObjectName("panel")
        lay = QtWidgets.QVBoxLayout(panel)
        title = QtWidgets.QLabel("Force (estimated)")
        title.setStyleSheet("color: #37474f; font-size: 11pt;")
        lay.addWidget(title)
        self.force_label = QtWidgets.QLabel("—")
        self.force_label.setStyleSheet("font-size: 40pt; font-weight: 600; color: #00353a;")
        self.force_label.setAlignment(QtCore.Qt.AlignmentFlag.AlignRight)
        lay.addWidget(self.force_label)
        self.u_label = QtWidgets.QLabel("± — N   (U, k = 2, ≈95 %)")
        self.u_label.setStyleSheet("font-size: 14pt; color: #00535a;")
        self.u_label.setAlignment(QtCore.Qt.AlignmentFlag.AlignRight)
        lay.addWidget(self.u_label)
        self.x_label = QtWidgets.QLabel("displacement — mm")
        self.x_label.setAlignment(QtCore.Qt.AlignmentFlag.AlignRight)
        lay.addWidget(self.x_label)
        self.tile = QtWidgets.QLabel()
        self.tile.setAlignment(QtCore.Qt.AlignmentFlag.AlignCenter)
        lay.addWidget(self.tile)
        self.rule_label = QtWidgets.QLabel()
        self.rule_label.setWordWrap(True)
        self.rule_label.setStyleSheet("color: #455a64; font-size: 8pt;")
        lay.addWidget(self.rule_label)
        lay.addSpacing(6)
        grid = QtWidgets.QGridLayout()
        self.state_label = QtWidgets.QLabel("not connected")
        self.rate_label = QtWidgets.QLabel("—")
        self.lost_label = QtWidgets.QLabel("0")
        self.rec_label = QtWidgets.QLabel("not recording")
        for i, (name, widget) in enumerate(
            (
                ("connection", self.state_label),
                ("sample rate", self.rate_label),
                ("lost / bad", self.lost_label),
                ("recording", self.rec_label),
            )
        ):
            grid.addWidget(QtWidgets.QLabel(name), i, 0)
            widget.setTextInteractionFlags(QtCore.Qt.TextInteractionFlag.TextSelectableByMouse)
            grid.addWidget(widget, i, 1)
        lay.addLayout(grid)
        margins = lay.contentsMargins()
        inner = panel.maximumWidth() - margins.left() - margins.right()
        for label in (self.force_label, self.u_label, self.x_label):
            _fixed_size(label, inner)
        _fixed_size(self.rate_label, 200)
        # The tile: each state drawn once now, so that its style and large glyphs are
        # cached before the first load change, and a fixed size (the tallest state's).
        tallest = 0
        for state in _TILES:
            self._show_tile(state, 0.0)
            self.tile.ensurePolished()
            self.tile.grab()
            tallest = max(tallest, self.tile.sizeHint().height())
        self._show_tile("waiting", None)
        self.tile.setFixedSize(inner, tallest)
        lay.addSpacing(8)
        self.note_edit = QtWidgets.QLineEdit()
        self.note_edit.setPlaceholderText("note for the recording")
        lay.addWidget(self.note_edit)
        buttons = QtWidgets.QGridLayout()
        self.record_button = QtWidgets.QPushButton("Start recording")
        self.record_button.setCheckable(True)
        self.record_button.clicked.connect(self._toggle_recording)
        self.mark_button = QtWidgets.QPushButton("Mark")
        self.mark_button.clicked.connect(self._mark)
        self.zero_button = QtWidgets.QPushButton("Zero…")
        self.zero_button.clicked.connect(self._zero)
        self.freeze_button = QtWidgets.QPushButton("Freeze view")
        self.freeze_button.setCheckable(True)
        self.freeze_button.toggled.connect(self._freeze)
        buttons.addWidget(self.record_button, 0, 0, 1, 2)
        buttons.addWidget(self.mark_button, 1, 0)
        buttons.addWidget(self.zero_button, 1, 1)
        buttons.addWidget(self.freeze_button, 2, 0)
        self.static_check = QtWidgets.QCheckBox("show k·x")
        self.static_check.setChecked(True)
        self.static_check.toggled.connect(self.c_static.setVisible)
        buttons.addWidget(self.static_check, 2, 1)
        lay.addLayout(buttons)
        span = QtWidgets.QHBoxLayout()
        span.addWidget(QtWidgets.QLabel("time window"))
        self.window_spin = QtWidgets.QDoubleSpinBox()
        self.window_spin.setRange(0.1, _MAX_WINDOW_S)
        self.window_spin.setDecimals(1)
        self.window_spin.setSuffix(" s")
        self.window_spin.setValue(self.window_s)
        self.window_spin.valueChanged.connect(self._set_window)
        span.addWidget(self.window_spin)
        lay.addLayout(span)
        lay.addSpacing(6)
        alarm_row = QtWidgets.QHBoxLayout()
        alarm_row.addWidget(QtWidgets.QLabel("alarms"))
        self.ack_button = QtWidgets.QPushButton("Acknowledge")
        self.ack_button.clicked.connect(self._acknowledge)
        alarm_row.addStretch(1)
        alarm_row.addWidget(self.ack_button)
        lay.addLayout(alarm_row)
        self.alarm_list = QtWidgets.QListWidget()
        self.alarm_list.setMaximumHeight(110)
        self.alarm_list.setWordWrap(True)
        lay.addWidget(self.alarm_list)
        lay.addWidget(QtWidgets.QLabel("messages"))
        self.log = QtWidgets.QPlainTextEdit()
        self.log.setReadOnly(True)
        self.log.setMaximumBlockCount(200)
        lay.addWidget(self.log, stretch=1)
        caution = QtWidgets.QLabel(CAUTION)
        caution.setWordWrap(True)
        caution.setStyleSheet("color: #6d4c00; font-size: 8pt;")
        lay.addWidget(caution)
        self._controls_enabled(False)
        return panel

    # --------------------------------------------------------------- sources
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
        self.worker = AcquisitionWorker(
            self.profile, port, self.buffer, runs_root=self.runs_root, simulated=self.simulated
        )
        self.worker.start()
        self.connect_button.setText("Disconnect")
        self.source.setEnabled(False)
        self.profile_button.setEnabled(False)
        self._controls_enabled(True)
        self._say(f"connecting to {port or SIMULATED_LABEL}")

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
        self.source.setEnabled(True)
        self.profile_button.setEnabled(True)
        self._controls_enabled(False)

    def _controls_enabled(self, on: bool) -> None:
        for w in (self.record_button, self.mark_button, self.zero_button, self.ack_button):
            w.setEnabled(on)

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
        items = self.alarm_list.selectedItems() or [
            self.alarm_list.item(i) for i in range(self.alarm_list.count())
        ]
        for item in items:
            self.worker.acknowledge(item.data(QtCore.Qt.ItemDataRole.UserRole))

    def _show_tile(self, state: str, valid_since_s: float | None) -> None:
        if (state, valid_since_s) == self._tile_shown:
            return  # a new style sheet re-polishes and re-lays out the panel: only on change
        self._tile_shown = (state, valid_since_s)
        text, colour = _TILES.get(state, (state.upper(), "#37474f"))
        html_text = f"<span style='font-size: 19pt; font-weight: 700;'>{text}</span>"
        if state == "settled" and valid_since_s is not None:
            html_text += (
                "<br><span style='font-size: 10pt;'>"
                f"valid since device time {valid_since_s:.3f} s</span>"
            )
        self.tile.setText(html_text)
        self.tile.setStyleSheet(
            f"background: {colour}; color: white; border-radius: 6px; padding: 6px;"
        )

    def _show_alarms(self, alarms: tuple[tuple[str, str, str, bool], ...]) -> None:
        shown = [
            (
                self.alarm_list.item(i).data(QtCore.Qt.ItemDataRole.UserRole),
                self.alarm_list.item(i).text(),
            )
            for i in range(self.alarm_list.count())
        ]
        wanted = [
            (a, f"{sev.upper()}: {msg}" + ("  (acknowledged)" if ack else ""))
            for a, sev, msg, ack in alarms
        ]
        if shown == wanted:
            return
        self.alarm_list.clear()
        for (alarm_id, text), (_, severity, _, ack) in zip(wanted, alarms, strict=True):
            item = QtWidgets.QListWidgetItem(text)
            item.setData(QtCore.Qt.ItemDataRole.UserRole, alarm_id)
            colour = "#90a4ae" if ack else _SEVERITY_COLOURS.get(severity, "#37474f")
            item.setForeground(QtGui.QColor(colour))
            font = item.font()
            font.setBold(not ack)
            item.setFont(font)
            self.alarm_list.addItem(item)

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
        self.setWindowTitle(f"forcelens — replay of {playback.run.description['run_id']}")
        self.event_combo.clear()
        self.event_combo.addItem(f"jump to an event ({len(playback.events)})", None)
        for ev in playback.events:
            self.event_combo.addItem(ev.label(), ev.time_s)
        self.step_table.setRowCount(len(playback.changes))
        for i, row in enumerate(playback.changes):
            for j, (_, text) in enumerate(_STEP_COLUMNS):
                self.step_table.setItem(i, j, QtWidgets.QTableWidgetItem(text(row)))
        self.replay_bar.show()
        duration = playback.end_s - playback.start_s
        self.window_spin.setValue(min(_MAX_WINDOW_S, max(0.1, round(duration, 1))))
        cell = playback.profile.cell.name
        self.profile_label.setText(
            f"{cell} — profile recorded with the run; "
            f"{playback.profile.acquisition.sample_rate_hz:g} Hz"
        )
        for w in (self.connect_button, self.source, self.profile_button):
            w.setEnabled(False)
        self._controls_enabled(False)
        self.seek(playback.start_s + min(self.window_s, playback.end_s - playback.start_s))
        self._say(
            f"replaying {folder}: {playback.time_s.size} samples, {len(playback.changes)} "
            f"load change(s); estimates {playback.status().state.split('— ')[-1]}"
        )

    def close_run(self) -> None:
        """Leave replay mode."""
        self.play_button.setChecked(False)
        self.playback = self.buffer = None
        self.replay_bar.hide()
        self._show_profile()
        self.setWindowTitle("forcelens — live force")
        for w in (self.connect_button, self.source, self.profile_button):
            w.setEnabled(True)

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
        self.cursor_label.setText(f"t = {t:.3f} s of {p.end_s:.3f} s")

    def _scrub(self, value: int) -> None:
        p = self.playback
        if p is not None:
            self.seek(p.start_s + (p.end_s - p.start_s) * value / 10_000)

    def _jump_to_event(self, index: int) -> None:
        t = self.event_combo.itemData(index)
        if t is not None:
            self.seek(float(t) + 0.5 * self.window_s)  # the event in the middle of the view

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

    def _freeze(self, on: bool) -> None:
        self.frozen = on
        self.freeze_button.setText("Follow live" if on else "Freeze view")

    def _set_window(self, value: float) -> None:
        self.window_s = float(value)

    def _say(self, text: str) -> None:
        self.log.appendPlainText(text)

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
        # Live, the time axis is relative to the newest sample: its range and ticks stay
        # put, so the axes and grid are not redrawn every frame. Replay keeps device time.
        live = self.playback is None
        rate = self.profile.acquisition.sample_rate_hz
        if live and self.window_s * rate >= 4 * bins:
            traces = self._running_traces(bins)  # dense: only the new samples are reduced
        else:
            traces = self._window_traces(bins)
        if traces is None:
            return
        t_first, t1, xs, fs, ks, band = traces
        t0 = t1 - self.window_s
        shift = t1 if live else 0.0
        _line(self.c_x, xs[0] - shift, xs[1])
        _line(self.c_force, fs[0] - shift, fs[1])
        shown = [fs[1]]
        if ks is not None:
            _line(self.c_static, ks[0] - shift, ks[1])
            shown.append(ks[1])
        self.band.set_band(band[0] - shift, band[1], band[2])
        _fit_y(self.p_x, [xs[1]])
        _fit_y(self.p_f, shown)
        self._set_time_axis(live)
        if live:
            x_range = (-self.window_s, 0.0)
        else:  # until the window is full the trace grows from the left edge
            left = max(t0, t_first)
            x_range = (left, left + self.window_s)
        if x_range != self._x_range:
            self.p_f.setXRange(*x_range, padding=0.0)
            self._x_range = x_range
        self.frames += 1

    def _window_traces(self, bins: int) -> Any:
        """Envelopes of the samples in the time window, read whole (replay, sparse data)."""
        data = self.buffer.window(self.window_s)
        if data.shape[1] < 2:
            return None
        t, x, f, u, kx = data
        t1 = float(t[-1])
        t0 = t1 - self.window_s
        ks = line_envelope(t, kx, t0, t1, bins) if self.c_static.isVisible() else None
        return (
            float(t[0]),
            t1,
            line_envelope(t, x, t0, t1, bins),
            line_envelope(t, f, t0, t1, bins),
            ks,
            band_envelope(t, f - 2.0 * u, f + 2.0 * u, t0, t1, bins),
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
                return self._window_traces(bins)
            self._running.add(t, np.vstack([x, f, kx, f - 2.0 * u, f + 2.0 * u]))
        mid, lo, hi = self._running.columns()
        if mid.size < 2:
            return None

        def line(row: int) -> tuple[np.ndarray, np.ndarray]:
            keep = np.isfinite(lo[row]) & np.isfinite(hi[row])
            return np.repeat(mid[keep], 2), np.column_stack([lo[row, keep], hi[row, keep]]).ravel()

        keep = np.isfinite(lo[3]) & np.isfinite(hi[4])
        t1 = self._running.t_last
        return (
            float(mid[0]),
            t1,
            line(0),
            line(1),
            line(2) if self.c_static.isVisible() else None,
            (mid[keep], lo[3, keep], hi[4, keep]),
        )

    def _set_time_axis(self, live: bool) -> None:
        if live != self._relative_axis:
            label = "time before the newest sample" if live else "device time"
            self.p_f.setLabel("bottom", label, units="s")
            self._relative_axis = live
            self._x_range = None

    def _show_status(self, s: WorkerStatus) -> None:
        if math.isfinite(s.force_n):
            _set_text(self.force_label, f"{s.force_n:.3f} N")
            _set_text(self.u_label, f"± {2.0 * s.force_u_n:.3f} N   (U, k = 2, ≈95 %)")
            _set_text(self.x_label, f"displacement {s.displacement_m * 1e3:.6f} mm")
        _set_text(self.state_label, s.state + (f" — {s.error}" if s.error else ""))
        if s.rate_hz is not None:
            drift = f" ({s.drift_ppm:+.0f} ppm)" if s.drift_ppm is not None else ""
            _set_text(self.rate_label, f"{s.rate_hz:.1f} S/s{drift}")
        elif self.playback is not None:
            rate = self.playback.profile.acquisition.sample_rate_hz
            _set_text(self.rate_label, f"{rate:g} S/s (nominal, recorded run)")
        else:
            _set_text(self.rate_label, "measuring…")
        _set_text(self.lost_label, f"{s.lost} lost, {s.rejected} bad frames")
        _set_text(self.rec_label, s.recording or "not recording")
        self._show_tile(s.settling or "waiting", s.valid_since_s)
        _set_text(self.rule_label, s.settling_rule)
        self._show_alarms(s.alarms)
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
