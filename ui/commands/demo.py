"""``forcelens demo``: the whole job on the built-in simulated cell.

An invented sprung-platen cell runs an invented load programme and sends its
readings as ASCII lines to a pseudo-terminal; forcelens connects to that port
through pyserial exactly as to a real device, estimates force live, and ends with a
table comparing the observer with the static conversion k·x.
"""

from __future__ import annotations

import argparse
import math
import sys
import time
from pathlib import Path
from typing import Any

from ui.outputs import add_force_option, claim_folder, write_text_atomic
from ui.safety import CAUTION
from ui.sim_help import SPEED_HELP

__all__ = ["register"]


def register(subparsers: Any) -> None:
    p = subparsers.add_parser(
        "demo",
        help="run the observer live on the built-in simulated cell (invented data)",
        description=(
            "Start the built-in simulated cell (an invented cell and load programme) on a "
            "pseudo-terminal, connect to it through pyserial, estimate force live and print "
            "a summary per load step. Writes estimates.csv, truth.csv, summary.txt, the "
            "session's log session.log and demo.png to --out."
        ),
    )
    p.add_argument(
        "--profile",
        metavar="FILE.toml",
        help="cell profile (default: the invented demo cell)",
    )
    p.add_argument(
        "--out",
        default="forcelens-demo",
        metavar="DIR",
        help="output folder (default: %(default)s)",
    )
    p.add_argument(
        "--seed",
        type=int,
        default=1,
        metavar="N",
        help="seed of the simulated noise, an integer ≥ 0 (default: %(default)s)",
    )
    p.add_argument(
        "--speed",
        type=float,
        default=1.0,
        metavar="X",
        help=SPEED_HELP + " (default 1)",
    )
    p.add_argument("--no-plot", action="store_true", help="skip the PNG plot")
    p.add_argument(
        "--no-window",
        action="store_true",
        help="do not open the live dashboard afterwards (it opens only when a display is "
        "available)",
    )
    add_force_option(p)
    p.set_defaults(run=run)


def run(args: argparse.Namespace) -> int:
    import shlex

    import numpy as np

    from daq.programme import demo_programme
    from daq.scaling import Scaling
    from daq.simulator import SimulatedCell, write_truth_csv
    from estimator.profile import default_demo_profile, load_profile
    from estimator.uncertainty import ForceUncertainty
    from ui.session_log import SessionLog, log_start

    out_dir = Path(args.out)
    names = ["estimates.csv", "truth.csv", "summary.txt", "session.log"]
    names += [] if args.no_plot else ["demo.png"]
    inputs = [args.profile] if args.profile else []
    replaced = claim_folder(out_dir, names, inputs=inputs, force=args.force)
    profile = load_profile(args.profile) if args.profile else default_demo_profile()
    out_dir.mkdir(parents=True, exist_ok=True)
    tr, pl, acq = profile.transducer, profile.plant, profile.acquisition
    scaling = Scaling(tr.volts_per_count, tr.metres_per_volt, tr.zero_volts)
    cell = SimulatedCell(
        pl.mass_kg, pl.stiffness_n_per_m, pl.damping_ratio, tr.noise_m, scaling,
        acq.sample_rate_hz, seed=args.seed,
    )  # fmt: skip
    programme = demo_programme()
    truth = cell.generate(programme)
    print(CAUTION)
    from ui.pipeline import prepare_estimator

    prepare_estimator(profile)  # says so when it compiles (the first run after an install)
    print(
        f"Invented demo: cell '{profile.cell.name}' (fn {pl.natural_freq_hz:.1f} Hz, "
        f"ζ {pl.damping_ratio:g}, k {pl.stiffness_n_per_m:g} N/m) at {acq.sample_rate_hz:g} Hz, "
        f"{programme.duration_s:.1f} s of load steps."
    )
    k = pl.stiffness_n_per_m
    # the session's log beside the outputs, as `live` logs into its run folder (a log
    # appends: the one of an earlier demo, which claim_folder let us replace, goes first)
    (out_dir / "session.log").unlink(missing_ok=True)
    with SessionLog("demo", run_folder=out_dir) as log:
        command = "forcelens " + shlex.join(getattr(args, "argv", None) or ["demo"])
        log_start(command, "the built-in simulated cell (invented data)", profile, args.profile)
        got, est, session = _acquire(profile, truth, programme, args)
        if log.problem:
            print(f"session log: {log.problem}")
    decoded = session.reader.stats().decoder
    totals = session.pipeline.observer_totals()
    print(
        f"received {got.size} of {len(truth)} samples; malformed lines or frames "
        f"{decoded.rejected}, lost {decoded.samples_lost}; observer rejected "
        f"{totals['rejected']}, load jumps {totals['jumps']}"
    )
    truth_f = np.asarray(truth.true_force_n)[got["seq"]]
    budget = ForceUncertainty.from_profile(profile)  # GUM: observer, calibration, resolution
    table = _summary(
        programme, got["device_time_s"], est, k * got["displacement_m"], truth_f, budget
    )
    print(table)
    from ui.estimates_csv import write_estimates_csv

    write_estimates_csv(
        est,
        out_dir / "estimates.csv",
        metadata={"source": "built-in simulated cell (invented data)", "cell": profile.cell.name},
    )
    write_truth_csv(truth, out_dir / "truth.csv")
    write_text_atomic(out_dir / "summary.txt", table + "\n")
    written = ["estimates.csv", "truth.csv", "summary.txt", "session.log"]
    if not args.no_plot:
        from ui.plots import RunTraces, render_run_png

        render_run_png(
            RunTraces(
                time_s=est["time_s"],
                displacement_m=got["displacement_m"],
                force_n=est["force_n"],
                force_expanded_u_n=budget.expanded_n(est["force_n"], est["force_u_n"]),
                static_force_n=k * got["displacement_m"],
                truth_time_s=got["device_time_s"],
                truth_force_n=truth_f,
                title="forcelens demo — invented cell and load programme",
                zoom_s=_zoom_window(programme),
            ),
            out_dir / "demo.png",
        )
        written.append("demo.png")
    print(f"wrote {', '.join(written)} to {out_dir.resolve()}")
    for note in replaced:
        print(note)
    if not args.no_window and display_available():
        print("opening the live dashboard on the simulated cell (close the window to end)")
        from ui.commands.dashboard import open_dashboard

        open_dashboard(profile, profile_path=args.profile or "")
    return 0


def _acquire(profile: Any, truth: Any, programme: Any, args: argparse.Namespace) -> tuple:
    """Run the simulated cell on a pseudo-terminal and read it through a live session;
    returns the samples, the estimates and the (closed) session."""
    from daq.samples import concat_blocks
    from daq.simulator import PtyCell
    from estimator.observer import concat_estimates
    from ui.session import LiveSession

    samples, estimates = [], []
    live = _StatusLine(profile)
    # The same path as `forcelens live` and the dashboard: serial reader, decoder of the
    # profile's framing, estimation pipeline with the settling monitor and the alarms.
    framing = profile.acquisition.framing
    with PtyCell(truth, speed=args.speed, framing=framing) as pty:  # the port exists
        print(f"simulated cell on {pty.port_name}; connecting through pyserial")
        session = LiveSession(profile, pty.port_name).start()
        ended = "stopped before the demo programme ended"
        try:
            deadline = time.monotonic() + programme.duration_s / args.speed + 15.0
            # Open the port before the cell starts sending: opening discards what
            # arrived before, as with a real device.
            while not session.connected_once and time.monotonic() < deadline:
                session.poll()
                time.sleep(0.01)
            pty.start()
            quiet_since = None
            while time.monotonic() < deadline:
                got = session.poll()
                if got.samples.size:
                    quiet_since = None
                    samples.append(got.samples)
                    estimates.append(got.estimates)
                    live.maybe_show(got.estimates, session)
                elif pty.finished:
                    quiet_since = quiet_since or time.monotonic()
                    if time.monotonic() - quiet_since > 0.3:
                        break
                time.sleep(0.02)
            ended = "the demo programme ended"
        finally:
            session.close(reason=ended)
        live.finish()
        if pty.error is not None:
            raise OSError(f"simulated cell stopped: {pty.error}")
    got = concat_blocks(samples)
    est = concat_estimates(estimates)
    return got, est, session


def display_available() -> bool:
    """True when a desktop display is there (X11, Wayland, or Windows and macOS)."""
    import os

    if os.environ.get("QT_QPA_PLATFORM", "") in ("offscreen", "minimal"):
        return False
    if sys.platform in ("win32", "darwin"):
        return True
    return bool(os.environ.get("DISPLAY") or os.environ.get("WAYLAND_DISPLAY"))


def _zoom_window(programme: Any) -> tuple[float, float] | None:
    """Around the largest load step: 10 ms before to 60 ms after."""
    steps = programme.step_changes()
    if not steps:
        return None
    t0 = max(steps, key=lambda s: abs(s[2] - s[1]))[0]
    return (t0 - 0.01, t0 + 0.06)


def _summary(programme: Any, t: Any, est: Any, kx: Any, truth_f: Any, budget: Any) -> str:
    """Per load step: applied, estimate, k·x, and time to enter and stay within 2 %."""
    import numpy as np

    from estimator.settling import time_to_settle

    steps = programme.step_changes()
    ends = [s[0] for s in steps[1:]] + [programme.duration_s]
    head = (
        f"{'step at':>8} {'applied':>9} {'observer':>10} {'U (k=2)':>8} {'k·x':>10}"
        f" {'observer':>9} {'k·x':>9} {'faster':>7}\n"
        f"{'s':>8} {'N':>9} {'N':>10} {'N':>8} {'N':>10}"
        f" {'settle ms':>9} {'settle ms':>9} {'×':>7}"
    )
    rows = [head, "-" * len(head.splitlines()[0])]
    for (t0, f_from, f_to), t_end in zip(steps, ends, strict=True):
        band = 0.02 * abs(f_to - f_from)  # 2 % of the step (common practice)
        tail = (t >= t0 + 0.7 * (t_end - t0)) & (t < t_end)
        f_obs = float(np.mean(est["force_n"][tail]))
        u_obs = float(np.mean(budget.expanded_n(est["force_n"][tail], est["force_u_n"][tail])))
        f_kx = float(np.mean(kx[tail]))
        ts_obs = time_to_settle(t, est["force_n"], t0, t_end, f_to, band)
        ts_kx = time_to_settle(t, kx, t0, t_end, f_to, band)
        ratio = ts_kx / ts_obs if ts_obs > 0 else math.inf
        f_obs, f_kx = (0.0 if round(v, 3) == 0.0 else v for v in (f_obs, f_kx))  # no "-0.000"
        rows.append(
            f"{t0:8.2f} {f_to:9.3f} {f_obs:10.3f} {u_obs:8.3f} {f_kx:10.3f}"
            f" {ts_obs * 1e3:9.1f} {ts_kx * 1e3:9.1f} {ratio:7.1f}"
        )
    rows.append(
        "settle: time from the load change until the reading enters and stays within 2 % of "
        "the step. Observer and k·x values are means over the last 30 % of each hold. "
        "Invented data."
    )
    return "\n".join(rows)


class _StatusLine:
    """The live status line of `forcelens live` (`ui.status.format_status`: the cell's
    units, the digits U supports, the settling state, the model in force, losses),
    rate-limited: rewritten in place on a terminal, a line every 0.5 s otherwise."""

    def __init__(self, profile: Any) -> None:
        from estimator.uncertainty import ForceUncertainty
        from ui.display_units import CellUnits

        self.tty = sys.stdout.isatty()
        self.budget = ForceUncertainty.from_profile(profile)  # GUM: U of the reading
        self.units = CellUnits.for_profile(profile)
        self.framing = profile.acquisition.framing
        self.last = 0.0
        self.period = 0.1 if self.tty else 0.5

    def maybe_show(self, estimates: Any, session: Any) -> None:
        """Show the newest of `estimates` with the session's state (rate-limited)."""
        from ui.status import format_status

        now = time.monotonic()
        if now - self.last < self.period:
            return
        self.last = now
        monitor = session.pipeline.monitor
        decoded = session.reader.stats().decoder
        line = format_status(
            estimates,
            settling=monitor.state if monitor is not None else "",
            lost=decoded.samples_lost,
            rejected=decoded.rejected,
            budget=self.budget,
            units=self.units,
            framing=self.framing,
        )
        if self.tty:
            print("\r" + line, end="", flush=True)
        else:
            print(line, flush=True)

    def finish(self) -> None:
        if self.tty:
            print()
