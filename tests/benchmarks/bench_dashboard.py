"""Benchmark: dashboard redraw with a 10 s window at 10 kHz (100 k points per curve + band).

Two ways of drawing the same data, measured in this run on the same window size:

* envelope (what the dashboard does): min/max per pixel column, the band as one polygon;
* baseline: every sample handed to pyqtgraph, the band as a FillBetweenItem.

Each frame is a full redraw: buffer read, reduction, setData, and the paint that
``processEvents`` performs (offscreen as on screen). It prints frames per second and
the longest frame of each, and their ratio.
Not a test; run it by hand:

    QT_QPA_PLATFORM=offscreen python tests/benchmarks/bench_dashboard.py [frames]
"""

from __future__ import annotations

import os
import sys
import time

import numpy as np

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")

import pyqtgraph as pg
from pyqtgraph.Qt import QtWidgets

from estimator.profile import default_demo_profile
from ui.dashboard.buffer import TraceBuffer
from ui.dashboard.window import DashboardWindow

RATE_HZ = 10_000.0
SPAN_S = 10.0


class _FakeWorker:
    """Stands in for the acquisition thread: the buffer is filled up front."""

    def __init__(self) -> None:
        from ui.dashboard.worker import WorkerStatus

        self._status = WorkerStatus(state="connected", force_n=50.0, force_u_n=0.005)

    def status(self):
        return self._status

    def stop(self) -> None:
        pass


def fill(buffer: TraceBuffer, n: int) -> None:
    """Invented traces: noisy steps with ringing, 10 kHz."""
    rng = np.random.default_rng(1)
    t = np.arange(n) / RATE_HZ
    f = 50.0 * (t > 3.0) + 30.0 * (t > 7.0) + rng.normal(0, 0.01, n)
    kx = f + 5.0 * np.exp(-30 * ((t - 3.0) % 4.0)) * np.sin(1000 * t)
    buffer.append(np.vstack([t, f / 4e5, f, 0.005 + 0 * t, kx]))


def time_frames(draw, widget, frames: int, app) -> tuple[float, float]:
    times = []
    for _ in range(frames):
        t0 = time.perf_counter()
        draw()
        app.processEvents()  # paints the changed items (offscreen too)
        times.append(time.perf_counter() - t0)
    times = np.array(times[2:])  # the first frames build caches
    return 1.0 / float(np.median(times)), float(times.max())


def main(argv: list[str]) -> int:
    frames = int(argv[1]) if len(argv) > 1 else 60
    app = QtWidgets.QApplication.instance() or QtWidgets.QApplication([])
    n = int(SPAN_S * RATE_HZ)
    window = DashboardWindow(default_demo_profile())
    window.resize(1500, 900)
    window.timer.stop()
    window.buffer = TraceBuffer(n + 10)
    fill(window.buffer, n)
    window.worker = _FakeWorker()
    window.window_s = SPAN_S
    window.show()
    app.processEvents()
    fps_env, worst_env = time_frames(window.redraw, window.plots, frames, app)

    # Baseline on the same widget: all points, FillBetweenItem band.
    plot = window.p_f
    lo_c = plot.plot(pen=None)
    hi_c = plot.plot(pen=None)
    fill_item = pg.FillBetweenItem(lo_c, hi_c, brush=pg.mkBrush(0, 110, 120, 55))
    plot.addItem(fill_item)
    window.band.setVisible(False)

    def draw_all() -> None:
        t, x, f, u, kx = window.buffer.window(SPAN_S)
        window.c_x.setData(t, x)
        window.c_force.setData(t, f)
        window.c_static.setData(t, kx)
        lo_c.setData(t, f - 2 * u)
        hi_c.setData(t, f + 2 * u)

    fps_all, worst_all = time_frames(draw_all, window.plots, max(5, frames // 6), app)
    print(f"{n} points per curve (10 s at 10 kHz), window 1500x900, offscreen")
    for name, fps, worst in (
        ("envelope + polygon band ", fps_env, worst_env),
        ("all points + FillBetween", fps_all, worst_all),
    ):
        print(f"{name}: {fps:7.1f} frames/s, longest frame {worst * 1e3:6.1f} ms")
    print(f"ratio: {fps_env / fps_all:.1f}x faster; target >= 30 frames/s and <= 50 ms per frame")
    window.worker = None
    window.close()
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv))
