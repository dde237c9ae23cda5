"""Benchmark: dashboard redraw with a 10 s window at 10 kHz (100 k points per curve + band).

Ways of drawing the same data, measured in this run on the same window size:

* envelope, live (what the dashboard does while acquiring): 1/30 s of new samples per
  frame, reduced into the running min/max columns, one per pixel; the band one polygon;
* envelope, rebuilt: the running columns rebuilt from the whole 10 s window at every
  frame (what a resize or a new window length costs once);
* baseline: every sample handed to pyqtgraph, the band as a FillBetweenItem.

Each frame includes buffer read, reduction, setData, and the paint that
``processEvents`` performs (offscreen as on screen). It prints frames per second and
the longest frame of each, and their ratios to the baseline. Then the real thing: the
window on its timer with the acquisition worker and a 10 kHz simulated cell.
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
    """Stands in for the acquisition worker: the buffer is filled up front."""

    def __init__(self) -> None:
        from ui.dashboard.worker import WorkerStatus

        self._status = WorkerStatus(state="connected", force_n=50.0, force_u_n=0.005)

    def status(self):
        return self._status

    def stop(self) -> None:
        pass


def fill(buffer: TraceBuffer, n: int, start: int = 0) -> None:
    """Invented traces: noisy steps with ringing every 4 s, 10 kHz; samples start..start+n."""
    rng = np.random.default_rng(1 + start)
    t = np.arange(start, start + n) / RATE_HZ
    f = 50.0 * ((t % 8.0) > 3.0) + 30.0 * ((t % 8.0) > 7.0) + rng.normal(0, 0.01, n)
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


def live_pass(seconds: float, *, external: bool) -> tuple[float, float, float]:
    """The real thing: the window on its timer with the acquisition worker running.

    The simulated cell (invented data) runs at 10 kHz: started here and opened as a
    serial port (`external`), or the window's built-in one (the worker starts it, also
    in a process of its own). Returns frames per second, the longest gap between two
    5 ms probe ticks (the GUI thread blocked) and the share of samples received.
    """
    import dataclasses

    from pyqtgraph.Qt import QtCore

    from ui.dashboard.worker import SimulatedSource

    base = default_demo_profile()
    acq = dataclasses.replace(base.acquisition, sample_rate_hz=RATE_HZ, framing="binary-24")
    profile = base.with_updates(acquisition=acq)
    sim = None
    port = None
    if external:  # the cell in its own process, as a real device would be
        import re
        import subprocess
        import tempfile

        from estimator.profile import save_profile

        path = os.path.join(tempfile.mkdtemp(), "cell.toml")
        save_profile(profile, path)
        sim = subprocess.Popen(
            [sys.executable, "-m", "ui.cli", "simulate", "--profile", path,
             "--programme", PROGRAMME, "--loop", "--start-delay", "1.0"],
            stdout=subprocess.PIPE, text=True,
        )  # fmt: skip
        port = re.search(r"on (\S+)", sim.stdout.readline()).group(1)
    window = DashboardWindow(profile, simulated=SimulatedSource(programme=PROGRAMME), port=port)
    window.resize(1500, 900)
    window.window_s = SPAN_S
    window.show()
    window.connect_source()
    if external:
        time.sleep(1.5)  # the simulator's start delay
    ticks: list[float] = []
    probe = QtCore.QTimer()
    probe.setInterval(5)
    drawn: list[tuple[float, int]] = []  # (time, frames drawn) at each probe tick
    probe.timeout.connect(
        lambda: (ticks.append(time.perf_counter()), drawn.append((ticks[-1], window.frames)))
    )
    probe.start()
    start = time.perf_counter()
    frames0 = window.frames
    loop = QtCore.QEventLoop()  # a real event loop, as app.exec() runs it (no busy polling)
    QtCore.QTimer.singleShot(round(seconds * 1000), loop.quit)
    loop.exec()
    # Frames per second from the first frame with data (the worker and the cell take a
    # second or two to start; a frame without data draws nothing and is not counted).
    first = next(((t, n) for t, n in drawn if n > frames0), drawn[-1])
    fps = (window.frames - first[1]) / max(time.perf_counter() - first[0], 1e-9)
    ticks_a = np.array(ticks)
    gaps = np.diff(ticks_a[10:]) if len(ticks) > 12 else np.array([np.nan])
    if os.environ.get("BENCH_VERBOSE"):
        top = np.argsort(gaps)[-5:]
        print(
            "  longest gaps (ms) and when (s):",
            [(round(gaps[i] * 1e3, 1), round(ticks_a[10 + i] - start, 2)) for i in top],
        )
    # Received share: samples in hand over the samples the device sent from the first
    # one received (a device that starts before the port is opened is not a loss).
    t = window.buffer.latest(window.buffer.capacity)[0]
    received = t.size / ((t[-1] - t[0]) * RATE_HZ + 1.0) if t.size > 1 else 0.0
    probe.stop()
    window.close()
    if sim is not None:
        sim.terminate()
        sim.wait(10)
    return fps, float(np.max(gaps)), received


PROGRAMME = "hold 1 0; hold 2 30; hold 2 90; hold 2 50; hold 3 0"  # invented, 10 s


def main(argv: list[str]) -> int:
    frames = int(argv[1]) if len(argv) > 1 else 60
    app = QtWidgets.QApplication.instance() or QtWidgets.QApplication([])
    n = int(SPAN_S * RATE_HZ)
    window = DashboardWindow(default_demo_profile())
    window.resize(1500, 900)
    window.timer.stop()
    window.buffer = TraceBuffer(2 * n)
    fill(window.buffer, n)
    window.worker = _FakeWorker()
    window.window_s = SPAN_S
    window.show()
    app.processEvents()
    per_frame = int(RATE_HZ / 30)
    appended = [n]

    def draw_live() -> None:
        fill(window.buffer, per_frame, start=appended[0])
        appended[0] += per_frame
        window.redraw()

    def draw_full() -> None:
        window._running = None  # forget the running columns: reduce the whole window
        window.redraw()

    fps_live, worst_live = time_frames(draw_live, window.plots, frames, app)
    fps_env, worst_env = time_frames(draw_full, window.plots, frames, app)

    # Baseline on the same widget: all points, FillBetweenItem band.
    plot = window.p_f
    lo_c = plot.plot(pen=None)
    hi_c = plot.plot(pen=None)
    fill_item = pg.FillBetweenItem(lo_c, hi_c, brush=pg.mkBrush(0, 110, 120, 55))
    plot.addItem(fill_item)
    window.band.setVisible(False)

    def draw_all() -> None:
        t, x, f, u, kx = window.buffer.window(SPAN_S)
        window.c_x.setData(t, x, connect="all")
        window.c_force.setData(t, f, connect="all")
        window.c_static.setData(t, kx, connect="all")
        lo_c.setData(t, f - 2 * u)
        hi_c.setData(t, f + 2 * u)

    fps_all, worst_all = time_frames(draw_all, window.plots, max(5, frames // 6), app)
    print(f"{n} points per curve (10 s at 10 kHz), window 1500x900, offscreen")
    for name, fps, worst in (
        ("envelope, live (new samples)", fps_live, worst_live),
        ("envelope, rebuilt each frame", fps_env, worst_env),
        ("all points + FillBetween    ", fps_all, worst_all),
    ):
        print(
            f"{name}: {fps:7.1f} frames/s, longest frame {worst * 1e3:6.1f} ms, "
            f"{fps / fps_all:4.1f}x the baseline"
        )
    print("target: >= 30 frames/s, GUI thread never blocked > 50 ms")
    window.worker = None
    window.close()
    for external, where in ((True, "started here, as a port"), (False, "built in")):
        fps_live, worst_gap, received = live_pass(12.0, external=external)
        print(
            f"live, 10 kHz simulated cell {where}: {fps_live:.1f} frames/s, GUI thread "
            f"longest gap between 5 ms ticks {worst_gap * 1e3:.1f} ms, samples received "
            f"{100 * received:.1f} %"
        )
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv))
