"""``forcelens identify``: natural frequency and damping from a ring-down or a step record.

The record is a run folder (its raw displacement; ``--from``/``--to`` pick the stretch,
else the free decay or the step is found in the whole record) or a plain CSV of
``time_s`` and ``displacement_m`` (or mm, um). The scale (stiffness or mass) comes from
whatever is known: the moving mass, a stiffness from a static calibration (by default
the profile's), or the force of the step. With ``--profile`` an updated copy of the
profile is written with the identified plant, the date and the SHA-256 of the data used.
"""

from __future__ import annotations

import argparse
import dataclasses
import datetime
import hashlib
import math
from pathlib import Path
from typing import Any

from ui.outputs import add_force_option, claim_file

__all__ = ["register"]


def register(subparsers: Any) -> None:
    from ui.input_paths import input_path

    p = subparsers.add_parser(
        "identify",
        help="natural frequency and damping (with uncertainties) from a ring-down or a step",
        description=(
            "Identify ωn and ζ with standard uncertainties from a free decay (logarithmic "
            "decrement over all usable cycles, or a two-exponential fit when overdamped) or "
            "from a step (nonlinear least squares of the closed-form response), then the "
            "scale from a known mass, stiffness or step force. Uncertainties are standard "
            "(k = 1); the 95 % intervals use Student's t."
        ),
    )
    p.add_argument(
        "record",
        metavar="RUN_OR_CSV",
        type=input_path,
        help="run folder, or CSV with time_s and displacement_m/mm/um",
    )
    p.add_argument(
        "--test", choices=("ringdown", "step"), required=True, help="kind of record (required)"
    )
    p.add_argument(
        "--from",
        dest="t_from",
        type=float,
        metavar="S",
        help="start of the part used, s, on the record's own clock: a run's device time (as "
        "replay and the dashboard show it) or a CSV's time_s (without --from/--to the test "
        "is found in the whole record and the window used is printed: for a ring-down the "
        "free decay from the release until the ringing reaches the noise, for a step the "
        "largest level change with rest before and after it)",
    )
    p.add_argument(
        "--to",
        dest="t_to",
        type=float,
        metavar="S",
        help="end of the part used, s, on the same clock as --from (default: the record's end)",
    )
    scale = p.add_argument_group(
        "scale (at most one of --mass-kg, --stiffness-n-per-m, --step-force-n; "
        "default: the stiffness of --profile or of the run's profile)"
    )
    known = scale.add_mutually_exclusive_group()
    known.add_argument(
        "--mass-kg", type=float, metavar="M", help="known moving mass, kg (k = m·ωn²)"
    )
    known.add_argument("--stiffness-n-per-m", type=float, metavar="K", help="known stiffness, N/m")
    known.add_argument(
        "--step-force-n",
        type=float,
        metavar="F",
        help="force of the step, N (k = F / gain; with --test step)",
    )
    scale.add_argument(
        "--mass-u-kg",
        type=float,
        default=0.0,
        metavar="M",
        help="standard uncertainty (k = 1) of --mass-kg, kg (default 0)",
    )
    scale.add_argument(
        "--stiffness-u-n-per-m",
        type=float,
        default=0.0,
        metavar="K",
        help="standard uncertainty (k = 1) of --stiffness-n-per-m, N/m (default 0)",
    )
    scale.add_argument(
        "--step-force-u-n",
        type=float,
        default=0.0,
        metavar="F",
        help="standard uncertainty (k = 1) of --step-force-n, N (default 0)",
    )
    p.add_argument(
        "--profile",
        metavar="FILE.toml",
        help="profile to update, written to --out (default: the run's own profile, none for "
        "a CSV)",
    )
    p.add_argument(
        "--out",
        metavar="FILE.toml",
        help="write the updated profile here; needs --profile (default: none written)",
    )
    add_force_option(p)
    p.set_defaults(run=run)


def _refuse_implausible(path: Path, samples: Any) -> None:
    """A run's samples under the limits a CSV's rows meet (`daq.samples`): a time 1e12 s or
    more from zero or a displacement a metre or more from zero is damage or a unit error."""
    import numpy as np

    from daq.errors import RunFormatError
    from daq.samples import DISPLACEMENT_MAX_M, TIME_MAX_S

    for field, limit, unit in (
        ("device_time_s", TIME_MAX_S, "s"),
        ("displacement_m", DISPLACEMENT_MAX_M, "m"),
    ):
        values = samples[field]
        ok = np.abs(values) < limit
        if field == "displacement_m":
            ok |= np.isnan(values)  # a missing sample
        bad = np.flatnonzero(~ok)
        if bad.size:
            i = int(bad[0])
            raise RunFormatError(
                f"{path}: sample {i} (seq {int(samples['seq'][i])}) has {field} = "
                f"{float(values[i])!r}, {limit:g} {unit} or more from zero: damage or a unit "
                "error; such a record cannot be identified"
            )


def _record(path: Path) -> tuple[Any, Any, str, Any]:
    """time (s), displacement (m), SHA-256 of the data, and the run's profile (or None)."""
    import numpy as np

    if path.is_dir():
        from daq.runs import read_run
        from ui.wiring import profile_from_text

        data = read_run(path)
        s = np.asarray(data.samples)
        digest = data.closing["streams"]["samples"]["sha256"] if data.closing else None
        if digest is None:
            digest = hashlib.sha256(s.tobytes()).hexdigest()
        profile = profile_from_text(data.description["profile_toml"], str(path / "run.json"))
        _refuse_implausible(path, s)
        return s["device_time_s"], s["displacement_m"], digest, profile
    from daq.csvfile import read_displacement_csv

    t, x = read_displacement_csv(path)
    return t, x, hashlib.sha256(path.read_bytes()).hexdigest(), None


def run(args: argparse.Namespace) -> int:
    import numpy as np

    from estimator.identify import identify_ringdown, identify_step, scale_from
    from estimator.profile import load_profile
    from ui.progress import busy

    if args.out and not args.profile:
        raise ValueError("--out writes an updated profile: give --profile too")
    replaced = None
    if args.out:  # checked before the fit: an output never replaces an input unasked
        replaced = claim_file(args.out, inputs=[args.record, args.profile], force=args.force)
    t, x, digest, run_profile = _record(Path(args.record))
    keep = np.ones(t.size, dtype=bool)
    if args.t_from is not None:
        keep &= t >= args.t_from
    if args.t_to is not None:
        keep &= t <= args.t_to
    t, x = t[keep], x[keep]
    if args.t_from is None and args.t_to is None:
        t, x = _window(t, x, args.record, args.test)
    if args.test == "ringdown":
        with busy(f"identifying on {t.size} samples"):
            result = identify_ringdown(t, x)
    else:
        with busy(f"fitting the step on {t.size} samples"):
            result = identify_step(t, x, force_n=args.step_force_n)
    profile = load_profile(args.profile) if args.profile else run_profile
    scale: dict[str, float] = {}
    if args.mass_kg is not None:
        scale = {"mass_kg": args.mass_kg, "mass_u_kg": args.mass_u_kg}
    elif args.stiffness_n_per_m is not None:
        scale = {
            "stiffness_n_per_m": args.stiffness_n_per_m,
            "stiffness_u_n_per_m": args.stiffness_u_n_per_m,
        }
    elif args.step_force_n is not None:
        scale = {"step_force_n": args.step_force_n, "step_force_u_n": args.step_force_u_n}
    elif profile is not None:
        scale = {
            "stiffness_n_per_m": profile.plant.stiffness_n_per_m,
            "stiffness_u_n_per_m": profile.plant.stiffness_u_n_per_m,
        }
    print(_describe(result, args.test))
    if not scale:
        print("no scale given (--mass-kg, --stiffness-n-per-m, --step-force-n or --profile)")
        return 0
    plant = scale_from(result, **scale)
    print(
        f"scale from {plant.scale_source}: m = {plant.mass_kg:.6g} kg (u {plant.mass_u_kg:.2g}), "
        f"k = {plant.stiffness_n_per_m:.6g} N/m (u {plant.stiffness_u_n_per_m:.2g}), "
        f"ζ = {plant.damping_ratio:.5g} (u {plant.damping_ratio_u:.2g}); "
        "standard uncertainties, k = 1"
    )
    if args.out and args.profile:
        updated = _updated_profile(load_profile(args.profile), plant, args, digest)
        from estimator.profile import save_profile

        save_profile(updated, args.out)
        print(f"wrote {args.out}" + (f" ({replaced})" if replaced else ""))
    return 0


def _window(t: Any, x: Any, record: str, test: str) -> tuple[Any, Any]:
    """The free decay or the load step of a whole record (estimator.record_windows), said in
    one line; a record where none can be found is refused in one line that says to give
    --from/--to."""
    from estimator.record_windows import (
        WindowNotFoundError,
        find_ringdown_window,
        find_step_window,
    )

    find = find_ringdown_window if test == "ringdown" else find_step_window
    what = "the free decay's" if test == "ringdown" else "the step's"
    try:
        window = find(t, x)
    except WindowNotFoundError as exc:
        raise ValueError(
            f"{record}: {exc}; give {what} start and end with --from S --to S"
        ) from None
    print(window.text())
    keep = (t >= window.start_s) & (t <= window.end_s)
    return t[keep], x[keep]


def _describe(result: Any, test: str) -> str:
    wn, z = result.natural_freq_rad_s, result.damping_ratio
    lines = [
        f"{test}: ωn = {wn.value:.6g} rad/s (u {wn.u:.2g}; "
        f"fn = {wn.value / (2 * math.pi):.6g} Hz), ζ = {z.value:.5g} (u {z.u:.2g})",
        f"  95 % intervals: ωn {wn.ci95[0]:.6g} … {wn.ci95[1]:.6g} rad/s, "
        f"ζ {z.ci95[0]:.5g} … {z.ci95[1]:.5g}",
    ]
    if test == "ringdown":
        lines.append(f"  method: {result.method}; cycles used {result.cycles_used}; {result.note}")
    else:
        check = "passed" if result.residual_ok else "FAILED"
        lines.append(
            f"  residual RMS {result.residual_rms_m:.3g} m against noise {result.noise_m:.3g} m; "
            f"residual check {check} ({result.residual_note})"
        )
    return "\n".join(lines)


def _updated_profile(profile: Any, plant: Any, args: argparse.Namespace, digest: str) -> Any:
    table = plant.plant_table()
    new_plant = dataclasses.replace(profile.plant, **table)
    today = datetime.date.today().isoformat()
    cell = dataclasses.replace(
        profile.cell,
        source=f"{args.test} identification {today} of {Path(args.record).name} "
        f"(SHA-256 {digest}); was: {profile.cell.source}",
    )
    return profile.with_updates(plant=new_plant, cell=cell)
