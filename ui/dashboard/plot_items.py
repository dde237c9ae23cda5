"""The dashboard's own plot items and drawing helpers (pyqtgraph).

`TickGrid`, a cheap opaque grid; `BandItem`, a filled band drawn as one polygon; and
the helpers that set curves with gaps left open and fit a y range without redrawing
the axes every frame. Used by `ui.dashboard.window` (and `ui.plots`, for the band).
"""

from __future__ import annotations

import itertools
from typing import Any

import numpy as np
import pyqtgraph as pg
from pyqtgraph.Qt import QtCore, QtGui, QtWidgets

from ui.dashboard import palette

__all__ = [
    "BandItem",
    "TickGrid",
    "add_grid",
    "fit_y",
    "fixed_size",
    "gap_runs",
    "set_line",
    "set_text",
]


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


def add_grid(plot: Any) -> None:
    """A light opaque grid at the axes' major ticks (see `TickGrid`)."""
    plot.addItem(TickGrid(plot, palette.GRID), ignoreBounds=True)


def gap_runs(x: np.ndarray) -> list[tuple[int, int]]:
    """Index ranges [a, b) of `x` (increasing, (m,)) without a gap of > 3 typical steps."""
    dx = np.diff(x)
    steps = dx[dx > 0]  # envelope points come in pairs at one x
    # The (upper) median step; np.partition, as np.median's first call imports numpy.ma
    # (~30 ms) in the middle of a frame.
    typical = float(np.partition(steps, steps.size // 2)[steps.size // 2]) if steps.size else 0.0
    cuts = np.flatnonzero(dx > 3.0 * typical) + 1 if typical > 0 else np.zeros(0, int)
    bounds = [0, *cuts.tolist(), x.size]
    return list(itertools.pairwise(bounds))


def fit_y(plot: Any, curves: list[np.ndarray]) -> None:
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


def set_text(label: QtWidgets.QLabel, text: str) -> None:
    """Set a label's text only when it changes (a change may re-lay out the panel)."""
    if label.text() != text:
        label.setText(text)


def fixed_size(label: QtWidgets.QLabel, width: int) -> None:
    """Give a label that changes every frame a fixed size: a label whose minimum and
    maximum sizes agree does not re-lay out the panel when its text changes."""
    label.ensurePolished()  # the style sheet's font counts in the height
    label.setFixedSize(width, label.sizeHint().height())


def set_line(curve: Any, x: np.ndarray, y: np.ndarray) -> None:
    """Set a curve, leaving gaps in the data unconnected."""
    connect = np.ones(x.size, dtype=bool)
    for _, b in gap_runs(x)[:-1]:
        connect[b - 1] = False
    curve.setData(x, y, connect=connect)


class BandItem(pg.GraphicsObject):
    """A filled band between two curves, drawn as one polygon (cheap for ~1000 points)."""

    def __init__(self, brush: Any) -> None:
        super().__init__()
        self._brush = pg.mkBrush(brush)
        self.data: tuple[np.ndarray, ...] = (np.zeros(0),) * 3  # the last band set
        self._path = QtGui.QPainterPath()
        self._rect = QtCore.QRectF()

    def set_band(self, x: np.ndarray, low: np.ndarray, high: np.ndarray) -> None:
        """Set the band: for each x, the interval [low, high]; arrays of shape (m,).

        Where x jumps by more than three typical steps (a gap in the data) the band is
        broken instead of being drawn across the gap.
        """
        self.prepareGeometryChange()
        self.data = (x, low, high)
        path = QtGui.QPainterPath()
        if x.size >= 2:
            for a, b in gap_runs(x):
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
