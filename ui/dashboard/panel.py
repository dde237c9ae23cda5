"""The dashboard's side panel: the reading, the settling tile, the model in force, the
connection figures, the controls, the alarms, the messages and the caution.

It shows a `WorkerStatus` (live, or the replay's at its cursor) in the cell's units
(`ui.display_units.CellUnits`) and words (`ui.dashboard.wording`), in the colours of
`ui.dashboard.palette`. The window wires its buttons; the panel only says which of them
may be used now, and why not.

Nothing here re-lays out the window in a frame: the labels that change every frame
have fixed sizes, texts are set only when they change, and the tile's style only when
its state does.
"""

from __future__ import annotations

import math
from typing import Any

from pyqtgraph.Qt import QtCore, QtGui, QtWidgets

from ui.dashboard import palette
from ui.dashboard.plot_items import fixed_size, set_text
from ui.dashboard.wording import (
    LIVE_ONLY_REASON,
    NO_ALARMS,
    alarm_text,
    rejected_word,
    rule_words,
    tile_text,
)
from ui.display_units import CellUnits
from ui.model_in_force import model_in_force
from ui.safety import CAUTION

__all__ = ["SidePanel"]

_WIDTH_PX = 380
_NOT_CONNECTED_REASON = "Connect to a cell first."
_USER_ROLE = QtCore.Qt.ItemDataRole.UserRole


def _label(text: str = "", style: str = "") -> QtWidgets.QLabel:
    label = QtWidgets.QLabel(text)
    if style:
        label.setStyleSheet(style)
    return label


class SidePanel(QtWidgets.QFrame):
    """The panel right of the plots (fixed width).

    Args:
        units: the cell's display units.
        framing: the profile's framing (it names what a rejected piece is called).
    """

    def __init__(self, units: CellUnits, framing: str) -> None:
        super().__init__()
        self.units = units
        self.framing = framing
        self.replay = False
        self.connected = False
        self._tile_shown: tuple[str, float | None, bool] | None = None
        self._has_alarms = False
        self.setObjectName("panel")
        self.setFixedWidth(_WIDTH_PX)
        self.setStyleSheet(
            f"QFrame#panel {{ background: {palette.PANEL_BG}; }}"
            f"QFrame#panel QLabel {{ color: {palette.PANEL_TEXT}; }}"
        )
        self._build()

    # ------------------------------------------------------------------ layout
    def _build(self) -> None:
        lay = QtWidgets.QVBoxLayout(self)
        secondary = f"color: {palette.SECONDARY_TEXT};"
        self.title = _label("Force (estimated)", secondary + " font-size: 11pt;")
        lay.addWidget(self.title)
        right = QtCore.Qt.AlignmentFlag.AlignRight
        self.force_label = _label(
            "—", f"font-size: 40pt; font-weight: 600; color: {palette.READING_TEXT};"
        )
        self.u_label = _label(
            "± —   (U, k = 2, ≈95 %)", f"font-size: 14pt; color: {palette.U_TEXT};"
        )
        self.x_label = _label("displacement —")
        for label in (self.force_label, self.u_label, self.x_label):
            label.setAlignment(right)
            lay.addWidget(label)
        self.tile = QtWidgets.QLabel()
        self.tile.setAlignment(QtCore.Qt.AlignmentFlag.AlignCenter)
        lay.addWidget(self.tile)
        self.rule_label = _label("", secondary + " font-size: 10pt;")
        self.rule_label.setWordWrap(True)
        lay.addWidget(self.rule_label)
        model_row = QtWidgets.QHBoxLayout()
        model_row.addWidget(_label("the data fit", secondary))
        self.model_label = _label("—", "font-size: 12pt; font-weight: 600;")
        self.model_label.setAlignment(right)
        model_row.addWidget(self.model_label, stretch=1)
        lay.addLayout(model_row)
        self.model_detail = _label("", secondary + " font-size: 10pt;")
        self.model_detail.setAlignment(right)
        lay.addWidget(self.model_detail)
        lay.addSpacing(4)
        lay.addLayout(self._build_figures())
        margins = lay.contentsMargins()
        inner = _WIDTH_PX - margins.left() - margins.right()
        for label in (self.force_label, self.u_label, self.x_label, self.model_detail):
            fixed_size(label, inner)
        fixed_size(self.model_label, 250)
        fixed_size(self.rate_label, 200)
        # The tile: each state drawn once now, so that its style and large glyphs are
        # cached before the first load change, and a fixed size (the tallest state's).
        tallest = 0
        for state in palette.TILE_BG:
            for replay in (False, True):
                self.show_tile(state, 0.0, replay)
                self.tile.ensurePolished()
                self.tile.grab()
                tallest = max(tallest, self.tile.sizeHint().height())
        self.show_tile("waiting", None, False)
        self.tile.setFixedSize(inner, tallest)
        lay.addSpacing(6)
        lay.addLayout(self._build_controls())
        lay.addSpacing(4)
        lay.addLayout(self._build_alarms())
        lay.addWidget(_label("messages (device time)"))
        self.log = QtWidgets.QPlainTextEdit()
        self.log.setReadOnly(True)
        self.log.setMaximumBlockCount(200)
        lay.addWidget(self.log, stretch=1)
        self.caution = _label(
            CAUTION,
            f"color: {palette.CAUTION_TEXT}; background: {palette.CAUTION_BG}; "
            f"border: 1px solid {palette.CAUTION_BORDER}; border-left: 5px solid "
            f"{palette.CAUTION_BORDER}; padding: 5px; font-size: 10pt;",
        )
        self.caution.setWordWrap(True)
        lay.addWidget(self.caution)

    def _build_figures(self) -> QtWidgets.QGridLayout:
        grid = QtWidgets.QGridLayout()
        self.state_name = _label("connection")
        self.state_label = _label("not connected")
        self.rate_label = _label("—")
        self.lost_name = _label(f"lost / {rejected_word(self.framing)}")
        self.lost_label = _label("—")
        self.rec_name = _label("recording")
        self.rec_label = _label("not recording")
        rows = (
            (self.state_name, self.state_label),
            (_label("sample rate"), self.rate_label),
            (self.lost_name, self.lost_label),
            (self.rec_name, self.rec_label),
        )
        for i, (name, widget) in enumerate(rows):
            grid.addWidget(name, i, 0)
            widget.setTextInteractionFlags(QtCore.Qt.TextInteractionFlag.TextSelectableByMouse)
            grid.addWidget(widget, i, 1)
        return grid

    def _build_controls(self) -> QtWidgets.QVBoxLayout:
        lay = QtWidgets.QVBoxLayout()
        self.note_edit = QtWidgets.QLineEdit()
        self.note_edit.setPlaceholderText("note for the recording")
        lay.addWidget(self.note_edit)
        buttons = QtWidgets.QGridLayout()
        self.record_button = QtWidgets.QPushButton("Start recording")
        self.record_button.setCheckable(True)
        self.mark_button = QtWidgets.QPushButton("Mark")
        self.zero_button = QtWidgets.QPushButton("Zero…")
        self.freeze_button = QtWidgets.QPushButton("Freeze view")
        self.freeze_button.setCheckable(True)
        self.static_check = QtWidgets.QCheckBox("show k·x")
        self.static_check.setChecked(True)
        buttons.addWidget(self.record_button, 0, 0, 1, 2)
        buttons.addWidget(self.mark_button, 1, 0)
        buttons.addWidget(self.zero_button, 1, 1)
        buttons.addWidget(self.freeze_button, 2, 0)
        buttons.addWidget(self.static_check, 2, 1)
        lay.addLayout(buttons)
        self.reason_label = _label(
            LIVE_ONLY_REASON, f"color: {palette.SECONDARY_TEXT}; font-size: 10pt;"
        )
        self.reason_label.setWordWrap(True)
        self.reason_label.hide()
        lay.addWidget(self.reason_label)
        span = QtWidgets.QHBoxLayout()
        span.addWidget(_label("time window"))
        self.window_spin = QtWidgets.QDoubleSpinBox()
        self.window_spin.setDecimals(1)
        self.window_spin.setSuffix(" s")
        span.addWidget(self.window_spin)
        lay.addLayout(span)
        return lay

    def _build_alarms(self) -> QtWidgets.QVBoxLayout:
        lay = QtWidgets.QVBoxLayout()
        row = QtWidgets.QHBoxLayout()
        row.addWidget(_label("alarms"))
        row.addStretch(1)
        self.ack_button = QtWidgets.QPushButton("Acknowledge")
        row.addWidget(self.ack_button)
        lay.addLayout(row)
        self.alarm_list = QtWidgets.QListWidget()
        self.alarm_list.setMaximumHeight(96)
        self.alarm_list.setWordWrap(True)
        self.alarm_list.setStyleSheet(f"QListWidget {{ background: {palette.ALARM_LIST_BG}; }}")
        lay.addWidget(self.alarm_list)
        self._show_no_alarms()
        return lay

    # ------------------------------------------------------------------- modes
    @property
    def live_controls(self) -> tuple[QtWidgets.QWidget, ...]:
        """The controls that act on a live cell."""
        return (self.note_edit, self.record_button, self.mark_button, self.zero_button)

    def set_mode(self, *, replay: bool, connected: bool) -> None:
        """Enable what can be used now; say why the rest cannot."""
        self.replay, self.connected = replay, connected
        usable = connected and not replay
        reason = LIVE_ONLY_REASON if replay else ("" if connected else _NOT_CONNECTED_REASON)
        # In replay the controls that act on a cell are hidden and the reason shown in
        # their place; live they are disabled, with the reason as a tip, until connected.
        for w in (*self.live_controls, self.freeze_button):
            w.setVisible(not replay)
        for w in self.live_controls:
            w.setEnabled(usable)
            w.setToolTip(reason)
        self._update_ack()
        self.reason_label.setVisible(replay)
        self.title.setText("Force at the cursor (recorded run)" if replay else "Force (estimated)")
        self.state_name.setText("replay" if replay else "connection")
        self.rec_name.setText("run" if replay else "recording")
        self._tile_shown = None

    def set_units(self, units: CellUnits, framing: str) -> None:
        """Use another cell's units and framing (a profile chosen, a run opened)."""
        self.units, self.framing = units, framing
        self.lost_name.setText(f"lost / {rejected_word(framing)}")
        self._tile_shown = None

    def _update_ack(self) -> None:
        usable = self.connected and not self.replay and self._has_alarms
        self.ack_button.setEnabled(usable)
        if self.replay:
            self.ack_button.setToolTip(LIVE_ONLY_REASON)
        elif not self._has_alarms:
            self.ack_button.setToolTip(NO_ALARMS)
        else:
            self.ack_button.setToolTip("" if self.connected else _NOT_CONNECTED_REASON)

    # ----------------------------------------------------------------- showing
    def show_status(self, s: Any) -> None:
        """Show a `WorkerStatus` (live, or the replay's at its cursor)."""
        u = self.units
        if math.isfinite(s.force_n):
            expanded = 2.0 * s.force_u_n
            set_text(self.force_label, u.force_text(s.force_n, expanded))
            set_text(self.u_label, f"± {u.u_text(expanded)}   (U, k = 2, ≈95 %)")
            set_text(self.x_label, f"displacement {u.displacement_text(s.displacement_m)}")
        set_text(self.state_label, s.state + (f" — {s.error}" if s.error else ""))
        if s.rate_hz is not None:
            drift = f" ({s.drift_ppm:+.0f} ppm)" if s.drift_ppm is not None else ""
            set_text(self.rate_label, f"{s.rate_hz:.1f} S/s{drift}")
        elif not self.replay:
            set_text(self.rate_label, "measuring…")
        set_text(self.lost_label, f"{s.lost} lost, {s.rejected} {rejected_word(self.framing)}")
        set_text(self.rec_label, s.recording or "not recording")
        self.show_tile(s.settling or "waiting", s.valid_since_s, self.replay)
        set_text(self.rule_label, rule_words(s.rule, s.hold_samples, u) or s.settling_rule)
        model = model_in_force(*s.model)
        set_text(self.model_label, model.headline())
        set_text(self.model_detail, model.detail())
        self.show_alarms(s.alarms)

    def show_tile(self, state: str, since_s: float | None, replay: bool) -> None:
        """The settling tile (style and text set only when they change)."""
        if (state, since_s, replay) == self._tile_shown:
            return  # a new style sheet re-polishes and re-lays out the panel: only on change
        self._tile_shown = (state, since_s, replay)
        words = tile_text(state, since_s, self.units, replay=replay)
        html = f"<span style='font-size: 19pt; font-weight: 700;'>{words.headline}</span>"
        if words.detail:
            html += f"<br><span style='font-size: 10pt;'>{words.detail}</span>"
        self.tile.setText(html)
        self.tile.setStyleSheet(
            f"background: {palette.TILE_BG[words.state]}; color: {palette.TILE_TEXT}; "
            "border-radius: 6px; padding: 6px;"
        )

    def _show_no_alarms(self) -> None:
        self.alarm_list.clear()
        item = QtWidgets.QListWidgetItem(NO_ALARMS)
        item.setFlags(QtCore.Qt.ItemFlag.ItemIsEnabled)  # not selectable: nothing to acknowledge
        item.setForeground(QtGui.QColor(palette.ALARM_TEXT["none"]))
        self.alarm_list.addItem(item)
        self._has_alarms = False
        self._update_ack()

    def show_alarms(self, alarms: tuple[tuple[Any, ...], ...]) -> None:
        """The active alarms, or "no active alarms"; each with since when it is raised."""
        shown = [
            (self.alarm_list.item(i).data(_USER_ROLE), self.alarm_list.item(i).text())
            for i in range(self.alarm_list.count())
        ]
        wanted = [
            (a[0], alarm_text(a[1], a[2], a[4] if len(a) > 4 else math.nan, self.units, a[3]))
            for a in alarms
        ]
        if not wanted:
            if shown != [(None, NO_ALARMS)]:
                self._show_no_alarms()
            return
        if shown == wanted:
            return
        self.alarm_list.clear()
        for (alarm_id, text), alarm in zip(wanted, alarms, strict=True):
            severity, ack = alarm[1], alarm[3]
            item = QtWidgets.QListWidgetItem(text)
            item.setData(_USER_ROLE, alarm_id)
            kind = "acknowledged" if ack else severity
            item.setForeground(QtGui.QColor(palette.ALARM_TEXT.get(kind, palette.PANEL_TEXT)))
            font = item.font()
            font.setBold(not ack)
            item.setFont(font)
            self.alarm_list.addItem(item)
        self._has_alarms = True
        self._update_ack()

    def selected_alarm_ids(self) -> list[str]:
        """The selected alarms' ids, or every listed one when none is selected."""
        items = self.alarm_list.selectedItems() or [
            self.alarm_list.item(i) for i in range(self.alarm_list.count())
        ]
        ids = [item.data(_USER_ROLE) for item in items]
        return [i for i in ids if i]

    def say(self, text: str) -> None:
        """Add a line to the message log."""
        self.log.appendPlainText(text)
