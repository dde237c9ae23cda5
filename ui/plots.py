"""Static plots rendered offscreen with pyqtgraph (no window is shown)."""

from __future__ import annotations

import os
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ui.outputs import replacing

__all__ = ["RunTraces", "render_run_png"]

# Our own palette: estimate in deep teal, its band pale teal, k·x in slate grey,
# the simulated truth in amber, displacement in indigo.
_ESTIMATE = (0, 110, 120)
_BAND = (0, 110, 120, 60)
_STATIC = (120, 128, 140)
_TRUTH = (215, 140, 0)
_DISPLACEMENT = (60, 60, 150)


@dataclass(frozen=True)
class RunTraces:
    """What a run plot shows; arrays of shape (n,), SI units."""

    time_s: np.ndarray
    displacement_m: np.ndarray
    force_n: np.ndarray
    force_expanded_u_n: np.ndarray  # U = 2u
    static_force_n: np.ndarray  # k·x
    truth_time_s: np.ndarray | None = None
    truth_force_n: np.ndarray | None = None
    title: str = ""
    zoom_s: tuple[float, float] | None = None  # a third panel: force over this time span


def _qt_app():
    if not os.environ.get("DISPLAY") and not os.environ.get("WAYLAND_DISPLAY"):
        os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")
    from pyqtgraph.Qt import QtWidgets

    app = QtWidgets.QApplication.instance()
    return app or QtWidgets.QApplication([])


def render_run_png(traces: RunTraces, path: str | os.PathLike[str], size=(1400, 1200)) -> Path:
    """Draw displacement (mm) and force (N) with its ±U band, k·x and truth; save PNG."""
    app = _qt_app()
    import pyqtgraph as pg

    pg.setConfigOptions(antialias=True, background="w", foreground=(30, 30, 30))
    win = pg.GraphicsLayoutWidget()
    win.resize(*size)
    if traces.title:
        win.addLabel(traces.title, row=0, col=0, size="12pt")
    p1 = win.addPlot(row=1, col=0)
    p1.setLabel("left", "displacement", units="m")  # pyqtgraph adds the SI prefix
    p1.showGrid(x=True, y=True, alpha=0.25)
    p1.plot(traces.time_s, traces.displacement_m, pen=pg.mkPen(_DISPLACEMENT, width=1))
    p2 = win.addPlot(row=2, col=0)
    p2.setXLink(p1)
    _draw_force(pg, p2, traces)
    if traces.zoom_s is not None:
        p3 = win.addPlot(row=3, col=0)
        _draw_force(pg, p3, traces)
        p3.setXRange(*traces.zoom_s, padding=0)
        p3.setTitle(f"detail: {traces.zoom_s[0]:.3f} s to {traces.zoom_s[1]:.3f} s")
    win.show()
    app.processEvents()
    out = Path(path)
    with replacing(out) as tmp:
        if not win.grab().save(str(tmp), "PNG"):
            raise OSError(f"{out}: could not write the PNG")
    win.close()
    return out


def _draw_force(pg, plot, traces: RunTraces) -> None:
    plot.setLabel("left", "force", units="N")
    plot.setLabel("bottom", "time", units="s")
    plot.showGrid(x=True, y=True, alpha=0.25)
    p2 = plot
    p2.addLegend(offset=(10, 10))
    from ui.dashboard.envelope import band_envelope
    from ui.dashboard.window import BandItem

    f, U, t = traces.force_n, traces.force_expanded_u_n, traces.time_s
    band = BandItem(_BAND)
    band.set_band(*band_envelope(t, f - U, f + U, float(t[0]), float(t[-1]), 4000))
    p2.addItem(band, ignoreBounds=True)  # the start-up band (±2·range) would set the scale
    p2.plot(
        traces.time_s, traces.static_force_n, pen=pg.mkPen(_STATIC, width=1), name="k·x (static)"
    )
    if traces.truth_time_s is not None and traces.truth_force_n is not None:
        p2.plot(
            traces.truth_time_s,
            traces.truth_force_n,
            pen=pg.mkPen(_TRUTH, width=2, style=pg.QtCore.Qt.PenStyle.DashLine),
            name="applied (simulated)",
        )
    p2.plot(traces.time_s, f, pen=pg.mkPen(_ESTIMATE, width=2), name="observer ± U (k = 2)")
