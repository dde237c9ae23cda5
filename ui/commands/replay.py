"""``forcelens replay``: estimates from a recorded run or a plain CSV of displacement.

A run (a folder written by ``forcelens live --record``) is replayed with the profile and
the zero (tare) events recorded with it, through the same pipeline as the live run;
when the run holds the estimates computed live, the replay is compared with them
sample by sample and must be bit-identical.
"""

from __future__ import annotations

import argparse
import math
import sys
import time
from pathlib import Path
from typing import Any

from ui.outputs import add_force_option, claim_file
from ui.unverified import add_unverified_option

__all__ = ["register"]

_BLOCK = 200_000  # samples per observer call; any size gives the same numbers
_PACED_BLOCK_S = 0.05  # device time per block when pacing, s


def register(subparsers: Any) -> None:
    p = subparsers.add_parser(
        "replay",
        help="estimate force again from a recorded run or a CSV of time and displacement",
        description=(
            "Replay a recorded run (a run folder) or a plain CSV file (header: time_s and "
            "displacement_m, displacement_mm or displacement_um) through the force observer. "
            "A run is replayed with its own profile and zero events and compared with the "
            "estimates recorded live. --out writes the estimates as forcelens CSV (the "
            "columns of export --stream estimates: time_s [s], force_n [N], force_u_n [N], "
            "...; force_u_n is the standard uncertainty, k = 1); see docs/csv-files.md."
        ),
    )
    p.add_argument("source", metavar="RUN_OR_CSV", help="run folder or CSV file")
    p.add_argument(
        "--profile",
        metavar="FILE.toml",
        help="cell profile; required for a CSV (default for a run: the run's own)",
    )
    p.add_argument(
        "--out",
        metavar="FILE.csv",
        help="write the estimates to this CSV; required for a CSV input (default for a run: "
        "none written)",
    )
    p.add_argument(
        "--speed",
        default="max",
        metavar="X",
        help="'max' (as fast as possible), or simulated seconds per real second, a factor: "
        "1 for real time, 5 for five times faster (default: max)",
    )
    p.add_argument(
        "--steps",
        action="store_true",
        help="also print the load changes found, with rise, overshoot and settling times "
        "for the estimate and for the static k·x",
    )
    p.add_argument(
        "--smooth",
        action="store_true",
        help="also use later samples (Rauch-Tung-Striebel smoother); offline only, slower",
    )
    add_force_option(p)
    add_unverified_option(p)
    p.set_defaults(run=run)


def _speed(text: str) -> float:
    if text == "max":
        return math.inf
    try:
        value = float(text)
    except ValueError:
        value = math.nan
    if not (math.isfinite(value) and value > 0):
        raise ValueError(f"--speed = {text!r}: give 'max' or a factor > 0 such as 1 or 5")
    return value


def run(args: argparse.Namespace) -> int:
    speed = _speed(args.speed)
    source = Path(args.source)
    if not source.exists():
        raise ValueError(f"{source}: no such file or folder")
    # checked before any work: an output never replaces an input or a file unasked
    args.replaced = None
    if args.out:
        inputs = [source] + ([args.profile] if args.profile else [])
        args.replaced = claim_file(args.out, inputs=inputs, force=args.force)
    if source.is_dir():
        return _replay_run(args, source, speed)
    return _replay_csv(args, source, speed)


def _replay_csv(args: argparse.Namespace, source: Path, speed: float) -> int:
    import numpy as np

    from daq.csvfile import read_displacement_csv
    from daq.samples import empty_block
    from estimator.profile import load_profile

    if not args.profile:
        raise ValueError(f"{source}: a CSV carries no profile; give --profile FILE")
    if not args.out:
        raise ValueError(f"{source}: give --out FILE for the estimates")
    profile = load_profile(args.profile)
    t, x = read_displacement_csv(source)
    samples = empty_block(t.size)
    samples["seq"] = np.arange(t.size)
    samples["device_time_s"] = t
    samples["host_time_s"] = math.nan
    samples["displacement_m"] = x
    estimates, observer = _estimate(args, profile, samples, [], speed)
    _write(args, estimates, profile)
    if args.steps:
        _print_steps(profile, samples, estimates)
    c = observer.counters
    print(
        f"{source}: {t.size} samples; rejected {c.rejected}, missing {c.missing}, "
        f"gaps {c.gaps}, load jumps {c.jumps}"
    )
    return 0


def _replay_run(args: argparse.Namespace, folder: Path, speed: float) -> int:
    import numpy as np

    from daq.runs import read_run
    from estimator.profile import load_profile
    from ui.pipeline import ESTIMATE_STREAM, tares_from_events
    from ui.unverified import refuse_unverifiable
    from ui.wiring import profile_from_text

    data = read_run(folder)
    refuse_unverifiable(folder, data.warnings, args.unverified)
    for warning in data.warnings:
        print(f"warning: {warning}", file=sys.stderr)
    if data.warnings:
        print("UNVERIFIED run (--unverified): the estimates rest on what is left of it")
    recorded_profile = profile_from_text(
        data.description["profile_toml"], f"{folder / 'run.json'} [profile_toml]"
    )
    profile = load_profile(args.profile) if args.profile else recorded_profile
    own_profile = profile == recorded_profile
    tares = tares_from_events(data.events)
    state = "closed" if data.closed else "NOT closed (ended without its closing record)"
    print(f"run {data.description['run_id']}: {data.samples.size} samples, {state}")
    estimates, observer = _estimate(args, profile, data.samples, tares, speed)
    if args.out:
        _write(args, estimates, profile)
    if args.steps:
        _print_steps(profile, data.samples, estimates)
    c = observer.counters
    print(
        f"replayed {estimates.size} samples; rejected {c.rejected}, gaps {c.gaps}, "
        f"load jumps {c.jumps}, zero events {len(tares)}"
    )
    live = data.streams.get(ESTIMATE_STREAM)
    if live is None or args.smooth:
        return 0
    n = min(live.size, estimates.size)
    same = np.asarray(live[:n]).tobytes() == estimates[:n].tobytes()
    if same and live.size == estimates.size:
        print(f"identical to the {n} estimates computed live (bit for bit)")
        return 0
    if not own_profile:
        print("differs from the live estimates, as expected: --profile replaces the run's own")
        return 0
    if same:
        lost = any("data lost" in w for w in data.warnings)
        why = "records were removed after the recording" if lost else "the run ended mid-flush"
        print(
            f"the first {n} estimates are identical to the live ones; the live stream holds "
            f"{live.size} and the samples {estimates.size} ({why})"
        )
        return 1 if lost else 0
    live_rows = np.asarray(live[:n]).view(np.uint8).reshape(n, -1)
    replay_rows = estimates[:n].view(np.uint8).reshape(n, -1)
    first = int(np.flatnonzero((live_rows != replay_rows).any(axis=1))[0])
    print(
        f"DIFFERS from the live estimates from sample {first} on "
        f"(seq {int(data.samples['seq'][first])}); the run or the software has changed",
        file=sys.stderr,
    )
    return 1


def _estimate(
    args: argparse.Namespace, profile: Any, samples: Any, tares: list, speed: float
) -> tuple[Any, Any]:
    from estimator.observer import concat_estimates
    from estimator.smoother import smooth_record
    from ui.display_units import CellUnits
    from ui.pipeline import EstimationPipeline
    from ui.status import StatusLine, format_status

    pipeline = EstimationPipeline(profile, tares=tares)
    units = CellUnits.for_profile(profile)  # the status line in the cell's units, as live
    if args.smooth:
        if tares:
            raise ValueError("--smooth cannot replay a run with zero events yet; leave it out")
        from ui.progress import busy

        with busy(f"smoothing {samples.size} samples"):
            est = smooth_record(
                pipeline.observer, samples["device_time_s"], samples["displacement_m"]
            )
        return est, pipeline.observer
    parts = []
    if math.isinf(speed):
        from ui.progress import bar

        with bar(samples.size, "estimating") as shown:
            for start in range(0, samples.size, _BLOCK):
                parts.append(pipeline.process(samples[start : start + _BLOCK]))
                shown.update(parts[-1].size)
    else:
        status = StatusLine()
        t = samples["device_time_s"]
        t0_dev = float(t[0]) if t.size else 0.0
        t0 = time.monotonic()
        start = 0
        while start < samples.size:
            stop = int(t.searchsorted(t[start] + _PACED_BLOCK_S * speed, side="right"))
            stop = max(stop, start + 1)
            due = t0 + (float(t[stop - 1]) - t0_dev) / speed
            wait = due - time.monotonic()
            if wait > 0:
                time.sleep(wait)
            parts.append(pipeline.process(samples[start:stop]))
            start = stop
            if status.due():
                status.show(
                    format_status(
                        parts[-1],
                        state=f"replay ×{speed:g}",
                        units=units,
                        framing=profile.acquisition.framing,
                    )
                )
        status.finish()
    est = concat_estimates(parts) if parts else pipeline.process(samples[:0])
    return est, pipeline.observer


def _print_steps(profile: Any, samples: Any, estimates: Any) -> None:
    """The change table of the estimate and of the static conversion k·x."""
    import numpy as np

    from estimator.metrics import change_table, format_change_table

    ok = np.isfinite(estimates["force_n"])
    t = estimates["time_s"][ok]
    k = profile.plant.stiffness_n_per_m
    static = k * samples["displacement_m"][ok]
    # The band is 2 % of each step, never narrower than twice the steady force
    # uncertainty (so noise alone cannot hold the reading "unsettled").
    floor = 4.0 * float(np.median(estimates["force_u_n"][ok])) if ok.any() else 0.0
    rows = change_table(t, estimates["force_n"][ok], static, band_floor_n=floor)
    print(format_change_table(rows) if rows else "no load change found")


def _write(args: argparse.Namespace, estimates: Any, profile: Any) -> None:
    from ui.estimates_csv import write_estimates_csv
    from ui.version import software_version

    meta = {
        "source": Path(args.source).name,
        "cell": profile.cell.name,
        "profile": args.profile or "the run's own",
        "method": "smoother (offline)" if args.smooth else "observer (as live)",
        "software_version": software_version(),
    }
    from ui.progress import bar

    with bar(estimates.size, f"writing {args.out}", unit="rows") as shown:
        done = [0]

        def advance(rows: int, total: int) -> None:
            shown.update(rows - done[0])
            done[0] = rows

        write_estimates_csv(estimates, args.out, progress=advance, metadata=meta)
    print(f"wrote {args.out}" + (f" ({args.replaced})" if args.replaced else ""))
