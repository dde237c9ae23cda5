"""``forcelens dashboard``: the live window (PySide6 + pyqtgraph)."""

from __future__ import annotations

import argparse
import os
from pathlib import Path
from typing import Any

__all__ = ["open_dashboard", "register"]


def register(subparsers: Any) -> None:
    from ui.commands.live import DEFAULT_RUNS_ROOT

    p = subparsers.add_parser(
        "dashboard",
        help="open the live window: force ± U, displacement, recording and zero",
        description=(
            "Open the live dashboard. It connects to the built-in simulated cell (invented "
            "data) unless a port is chosen in the window or given with --port. --screenshot "
            "saves the window to a PNG after --after seconds and quits (works offscreen)."
        ),
    )
    p.add_argument("--profile", metavar="FILE", help="cell profile (default: the demo cell)")
    p.add_argument("--port", help="serial port to preselect (default: the simulated cell)")
    p.add_argument(
        "--runs-root",
        default=DEFAULT_RUNS_ROOT,
        help="folder for recordings (default: %(default)s)",
    )
    p.add_argument("--no-connect", action="store_true", help="wait for the Connect button")
    p.add_argument("--open", metavar="RUN", help="start in replay mode on this run folder")
    p.add_argument("--sim-programme", metavar="SPEC", default="", help="simulated load programme")
    p.add_argument(
        "--sim-speed", type=float, default=1.0, metavar="X", help="simulated time scale"
    )
    p.add_argument("--sim-faults", metavar="SPEC", default="", help="faults, as for live")
    p.add_argument("--screenshot", metavar="PNG", help="save the window to PNG and quit")
    p.add_argument("--after", type=float, default=3.0, metavar="S", help="screenshot delay (s)")
    p.set_defaults(run=run)


def open_dashboard(profile: Any, *, profile_path: str = "") -> None:
    """Open the dashboard on the built-in simulated cell and wait until it is closed."""
    from pyqtgraph.Qt import QtWidgets

    from ui.dashboard.window import DashboardWindow, show_caution

    app = QtWidgets.QApplication.instance() or QtWidgets.QApplication([])
    window = DashboardWindow(profile, profile_path=profile_path)
    window.show()
    show_caution(window)
    window.connect_source()
    app.exec()


def run(args: argparse.Namespace) -> int:
    from estimator.profile import default_demo_profile, load_profile
    from ui.wiring import refuse_demo_model_on_a_real_port

    refuse_demo_model_on_a_real_port(args.port, args.profile)
    profile = load_profile(args.profile) if args.profile else default_demo_profile()
    if args.screenshot and not os.environ.get("DISPLAY") and "QT_QPA_PLATFORM" not in os.environ:
        os.environ["QT_QPA_PLATFORM"] = "offscreen"
    from pyqtgraph.Qt import QtCore, QtWidgets

    from ui.dashboard.window import DashboardWindow, show_caution
    from ui.dashboard.worker import SimulatedSource

    app = QtWidgets.QApplication.instance() or QtWidgets.QApplication([])
    window = DashboardWindow(
        profile,
        profile_path=args.profile or "",
        runs_root=Path(args.runs_root),
        simulated=SimulatedSource(
            programme=args.sim_programme, speed=args.sim_speed, faults=args.sim_faults
        ),
        port=args.port,
    )
    window.show()
    if args.screenshot:
        out = Path(args.screenshot)

        def shoot() -> None:
            window.redraw()
            if not window.grab().save(str(out)):
                print(f"could not write {out}")
            window.close()

        if args.open:
            window.open_run(args.open)
            window.play_button.setChecked(True)
        else:
            window.connect_source()
        QtCore.QTimer.singleShot(int(args.after * 1000), shoot)
    else:
        show_caution(window)
        if args.open:
            window.open_run(args.open)
        elif not args.no_connect:
            window.connect_source()
    app.exec()
    if args.screenshot:
        print(f"wrote {args.screenshot}")
    return 0
