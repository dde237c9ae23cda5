"""``forcelens simulate``: play a simulated cell on a pseudo-terminal.

The cell's mechanics and transducer come from a profile (the built-in demo profile by
default); the load programme from ``--programme`` (compact text spec), ``--programme-csv``
or the built-in demo scenario. Any serial client can open the printed port and read the
ASCII line stream (docs/ascii-line-format.md) or binary frames (docs/binary-frame.md).
NumPy, SciPy and the profile reader are imported only inside the run function.
"""

from __future__ import annotations

import argparse
import sys
import threading
import time
from typing import TYPE_CHECKING

from ui.outputs import add_force_option, claim_file
from ui.sim_help import FAULTS_HELP, PROGRAMME_HELP, SPEED_HELP

if TYPE_CHECKING:
    from daq.simulator import SimulatedRun

__all__ = ["register", "run_simulate"]

#: How long the port stays open after the last line, s, so a reader can drain it.
LINGER_S = 0.5


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add the ``simulate`` sub-command to ``subparsers``."""
    parser = subparsers.add_parser(
        "simulate",
        help="play a simulated cell on a pseudo-terminal (a stand-in serial device)",
        description=(
            "Simulate the cell described by a profile under a load programme and write "
            "its samples, in real time, to a pseudo-terminal that any serial client can "
            "open. The data are invented."
        ),
    )
    parser.add_argument(
        "--profile", metavar="FILE.toml", help="cell profile (default: the built-in demo cell)"
    )
    source = parser.add_mutually_exclusive_group()
    source.add_argument(
        "--programme",
        metavar="SPEC",
        help=PROGRAMME_HELP + " (default: the demo programme)",
    )
    source.add_argument(
        "--programme-csv",
        metavar="FILE.csv",
        help="load programme as a CSV of time_s (s, from 0) and force_n (N), linear "
        "between points (default: the demo programme)",
    )
    parser.add_argument(
        "--rate", type=float, metavar="HZ", help="sample rate, Hz (default: the profile's)"
    )
    parser.add_argument(
        "--seed",
        type=int,
        default=0,
        metavar="N",
        help="seed of the simulated noise, an integer ≥ 0 (default 0)",
    )
    parser.add_argument(
        "--truth",
        metavar="FILE.csv",
        help="also write the true force and displacement (first pass) as CSV (default: "
        "none written)",
    )
    add_force_option(parser)
    parser.add_argument(
        "--loop", action="store_true", help="repeat the programme until Ctrl-C (fresh noise)"
    )
    parser.add_argument(
        "--speed",
        type=float,
        default=1.0,
        metavar="X",
        help=SPEED_HELP + " (default 1)",
    )
    parser.add_argument(
        "--framing",
        choices=("ascii-lines", "binary-24", "binary-32"),
        help="how samples are framed on the line (default: the profile's)",
    )
    parser.add_argument(
        "--faults",
        metavar="SPEC",
        default="",
        help=FAULTS_HELP + " (default: none)",
    )
    parser.add_argument(
        "--start-delay",
        type=float,
        default=2.0,
        metavar="S",
        help=(
            "wall-clock seconds between printing the port and the first sample, so a "
            "client can open the port first (opening a port discards what arrived before; "
            "default 2)"
        ),
    )
    parser.add_argument(
        "--start-on-input",
        action="store_true",
        help=(
            "start when a line arrives on standard input instead of after --start-delay, "
            "and stop when standard input ends (for a program that opens the port first, "
            "then says go; if that program dies, the cell stops too)"
        ),
    )
    parser.set_defaults(run=run_simulate)


def run_simulate(args: argparse.Namespace) -> int:
    """Run the ``simulate`` sub-command; returns the exit status."""
    from daq.programme import demo_programme, load_programme_csv, parse_programme
    from daq.scaling import Scaling
    from daq.simulator import PtyCell, SimulatedCell, write_truth_csv
    from estimator.profile import default_demo_profile, load_profile
    from ui.wiring import parse_faults

    replaced = None
    if args.truth:
        inputs = [x for x in (args.profile, args.programme_csv) if x]
        replaced = claim_file(args.truth, inputs=inputs, force=args.force)
    profile = load_profile(args.profile) if args.profile else default_demo_profile()
    if args.programme is not None:
        programme = parse_programme(args.programme)
    elif args.programme_csv is not None:
        programme = load_programme_csv(args.programme_csv)
    else:
        programme = demo_programme()
    if args.seed < 0:
        raise ValueError(f"--seed = {args.seed}: must be >= 0")
    if not 0.0 <= args.start_delay <= 3600.0:
        raise ValueError(f"--start-delay = {args.start_delay}: must be 0 to 3600 seconds")
    rate_hz = args.rate if args.rate is not None else profile.acquisition.sample_rate_hz
    tr = profile.transducer
    plant = profile.plant
    cell = SimulatedCell(
        mass_kg=plant.mass_kg,
        stiffness_n_per_m=plant.stiffness_n_per_m,
        damping_ratio=plant.damping_ratio,
        noise_m=tr.noise_m,
        scaling=Scaling(tr.volts_per_count, tr.metres_per_volt, tr.zero_volts),
        sample_rate_hz=rate_hz,
        seed=args.seed,
    )
    run = cell.generate(programme)
    if run.n_clipped:
        print(
            f"warning: {run.n_clipped} sample(s) clipped at the ADC range; "
            "lower the programme's forces",
            file=sys.stderr,
        )
    if args.truth:
        write_truth_csv(run, args.truth)
        if replaced:
            print(replaced, file=sys.stderr)

    def regenerate(repetition: int) -> SimulatedRun:
        return cell.generate(programme, seed=args.seed + repetition)

    framing = args.framing or profile.acquisition.framing
    faults = parse_faults(args.faults, option="--faults")
    with PtyCell(
        run,
        speed=args.speed,
        loop=args.loop,
        regenerate=regenerate,
        framing=framing,
        faults=faults,
    ) as pty:
        print(
            f"simulated cell on {pty.port_name} — connect any serial client; Ctrl-C stops",
            flush=True,
        )
        print(
            f"  {len(run)} samples at {rate_hz:g} Hz, {framing}, "
            f"programme {programme.duration_s:g} s" + (", looping" if args.loop else ""),
            flush=True,
        )
        input_ended = threading.Event()
        try:
            if args.start_on_input:
                if not sys.stdin.readline():
                    print("stopped: standard input ended before the go", flush=True)
                    return 0

                def watch_input() -> None:
                    sys.stdin.read()  # returns at end of input: whoever started us is gone
                    input_ended.set()

                threading.Thread(target=watch_input, name="stdin watch", daemon=True).start()
            else:
                time.sleep(args.start_delay)
            pty.start()
            while not pty.wait(0.2):
                if pty.error is not None:
                    raise pty.error
                if input_ended.is_set():
                    print(f"stopped (input ended): {pty.lines_written} lines written", flush=True)
                    return 0
        except KeyboardInterrupt:
            print(f"\nstopped: {pty.lines_written} lines written", flush=True)
            return 0
        if pty.error is not None:
            raise pty.error
        time.sleep(LINGER_S)
        print(
            f"programme finished: {pty.lines_written} lines written, "
            f"{pty.bytes_dropped} bytes dropped",
            flush=True,
        )
    return 0
