"""``forcelens dashboard``: the live window (PySide6 + pyqtgraph)."""

from __future__ import annotations

import argparse
import os
import sys
from pathlib import Path
from typing import Any

__all__ = ["open_dashboard", "register"]


def register(subparsers: Any) -> None:
    from ui.commands.live import DEFAULT_RUNS_ROOT
    from ui.input_paths import input_path
    from ui.outputs import add_force_option
    from ui.sim_help import FAULTS_HELP, PROGRAMME_HELP, SPEED_HELP

    p = subparsers.add_parser(
        "dashboard",
        help="open the live window: force ± U, displacement, recording and zero",
        description=(
            "Open the live window: displacement and force ± U (k = 2) on one device-time "
            "axis, the settling state, alarms, recording, marks and zero; or, with --open, "
            "replay a recorded run in it. It connects to the built-in simulated cell "
            "(invented data) unless a port is chosen in the window or given with --port. "
            "--screenshot saves the window to a PNG after --after seconds and quits (works "
            "offscreen)."
        ),
    )
    p.add_argument("--profile", metavar="FILE.toml", help="cell profile (default: the demo cell)")
    p.add_argument(
        "--port",
        metavar="PORT",
        help="serial port to preselect, e.g. /dev/ttyUSB0 or COM3 (default: the built-in "
        "simulated cell)",
    )
    p.add_argument(
        "--runs-root",
        default=DEFAULT_RUNS_ROOT,
        metavar="DIR",
        help="folder for recordings (default: %(default)s)",
    )
    p.add_argument("--no-connect", action="store_true", help="wait for the Connect button")
    p.add_argument(
        "--open", metavar="RUN", type=input_path, help="start in replay mode on this run folder"
    )
    sim = p.add_argument_group("built-in simulated cell (used when no port is given)")
    sim.add_argument(
        "--sim-programme",
        metavar="SPEC",
        default="",
        help=PROGRAMME_HELP + " (default: the demo programme)",
    )
    sim.add_argument(
        "--sim-speed", type=float, default=1.0, metavar="X", help=SPEED_HELP + " (default 1)"
    )
    sim.add_argument(
        "--sim-faults", metavar="SPEC", default="", help=FAULTS_HELP + " (default: none)"
    )
    p.add_argument(
        "--screenshot",
        metavar="FILE.png",
        help="save the window to this PNG after --after seconds and quit (default: none)",
    )
    p.add_argument(
        "--after",
        type=float,
        default=3.0,
        metavar="S",
        help="with --screenshot: wall-clock seconds from opening the window to the "
        "screenshot (default 3)",
    )
    add_force_option(p)
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
    from ui.outputs import claim_file, replacing
    from ui.wiring import refuse_demo_model_on_a_real_port

    refuse_demo_model_on_a_real_port(args.port, args.profile)
    replaced = None
    if args.screenshot:  # refused before a window opens: an existing file needs --force
        inputs = [p for p in (args.profile, args.open) if p]
        replaced = claim_file(args.screenshot, inputs=inputs, force=args.force)
    profile = load_profile(args.profile) if args.profile else default_demo_profile()
    from ui.pipeline import prepare_estimator

    prepare_estimator(profile)  # before the window: a first run compiles, and says so
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
    saved: list[bool] = []
    if args.screenshot:
        out = Path(args.screenshot)

        def shoot() -> None:
            window.redraw()
            try:
                with replacing(out) as tmp:  # the old file or the new one, never half
                    if not window.grab().save(str(tmp)):
                        raise OSError("Qt could not encode or write the image")
                saved.append(True)
            except OSError as exc:
                print(f"could not write {out}: {exc}", file=sys.stderr)
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
        if not saved:
            return 1
        print(f"wrote {args.screenshot}" + (f" ({replaced})" if replaced else ""))
    return 0
