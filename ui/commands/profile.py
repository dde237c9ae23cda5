"""``forcelens profile``: create a cell profile from a few numbers, or check and summarise one.

``profile new OUT.toml ...`` writes a validated profile; ``profile show FILE``
prints a readable summary with SI units. Only the standard library and
``estimator.profile`` and ``estimator.quantisation`` are imported (no Qt, no SciPy).
"""

from __future__ import annotations

import argparse
import math
from pathlib import Path

from estimator.profile import (
    AcquisitionSection,
    CellInfo,
    CellProfile,
    LimitsSection,
    ObserverSection,
    PlantSection,
    TransducerSection,
    load_profile,
    save_profile,
)
from estimator.quantisation import residual_bias_sd_m
from ui.outputs import add_force_option, claim_file

__all__ = ["DEFAULT_VOLTS_PER_COUNT", "register", "run_new", "run_show", "summary_lines"]

#: A 24-bit converter spanning 20 V: one count in volts.
DEFAULT_VOLTS_PER_COUNT = 20.0 / 2**24


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add the ``profile`` sub-command (with ``new`` and ``show``) to ``subparsers``."""
    parser = subparsers.add_parser(
        "profile",
        help="create or check a cell profile (TOML file describing one cell)",
        description="Create a cell profile from a few numbers, or check and summarise one.",
    )
    actions = parser.add_subparsers(dest="profile_action", metavar="ACTION")

    def run_help(_args: argparse.Namespace) -> int:
        parser.print_help()
        return 2

    parser.set_defaults(run=run_help)

    new = actions.add_parser(
        "new",
        help="write a new profile from stiffness, mass (or natural frequency), damping, noise",
        description=(
            "Write a validated cell profile. All values SI. Give either the moving mass "
            "or the undamped natural frequency; the mass is then k / (2π·f)²."
        ),
    )
    new.add_argument("out", metavar="OUT.toml", help="file to write")
    new.add_argument(
        "--stiffness-n-per-m",
        type=float,
        required=True,
        metavar="K",
        help="stiffness, N/m (required)",
    )
    mass = new.add_mutually_exclusive_group(required=True)
    mass.add_argument(
        "--mass-kg",
        type=float,
        metavar="M",
        help="moving mass, kg (one of --mass-kg or --natural-frequency-hz is required)",
    )
    mass.add_argument(
        "--natural-frequency-hz",
        type=float,
        metavar="HZ",
        help="undamped natural frequency f, Hz; the mass is then k/(2π·f)²",
    )
    new.add_argument(
        "--damping-ratio",
        type=float,
        required=True,
        metavar="Z",
        help="damping ratio ζ, dimensionless, > 0 (required)",
    )
    for option, what, unit in (
        ("--stiffness-u-n-per-m", "the stiffness, from the cell's calibration", "N/m"),
        ("--mass-u-kg", "the moving mass", "kg"),
        ("--damping-ratio-u", "the damping ratio", "dimensionless"),
    ):
        new.add_argument(
            option,
            type=float,
            default=0.0,
            metavar="U",
            help=f"standard uncertainty (k = 1) of {what}, {unit} (default 0: not stated; "
            "the expanded uncertainty U then leaves it out)",
        )
    new.add_argument(
        "--noise-m",
        type=float,
        required=True,
        metavar="X",
        help="white displacement noise of the transducer, one standard deviation, m (required)",
    )
    new.add_argument(
        "--resolution-m",
        type=float,
        required=True,
        metavar="X",
        help="displacement of one ADC count, m (required)",
    )
    new.add_argument(
        "--sample-rate-hz",
        type=float,
        required=True,
        metavar="HZ",
        help="sample rate, Hz (required)",
    )
    new.add_argument(
        "--force-max-n",
        type=float,
        required=True,
        metavar="F",
        help="upper end of the calibrated force range, N (required)",
    )
    new.add_argument(
        "--force-min-n",
        type=float,
        default=0.0,
        metavar="F",
        help="lower end of the calibrated force range, N (default 0)",
    )
    new.add_argument(
        "--name", metavar="TEXT", help="cell name (default: the file name without .toml)"
    )
    new.add_argument(
        "--bandwidth-hz",
        type=float,
        default=ObserverSection().force_bandwidth_hz,
        metavar="HZ",
        help="bandwidth of the observer's hold model (how fast a held reading follows), Hz "
        "(default %(default)g)",
    )
    new.add_argument(
        "--volts-per-count",
        type=float,
        default=DEFAULT_VOLTS_PER_COUNT,
        metavar="V",
        help="ADC least significant bit, V (default 20/2**24)",
    )
    new.add_argument(
        "--travel-m",
        type=float,
        metavar="X",
        help="displacement |x| at the mechanical stop, m (default: none, no travel alarm)",
    )
    new.add_argument(
        "--port",
        default="",
        metavar="PORT",
        help='serial port, e.g. /dev/ttyUSB0 or COM3 (default "": the built-in simulated cell)',
    )
    new.add_argument(
        "--baudrate",
        type=int,
        default=AcquisitionSection(sample_rate_hz=1.0).baudrate,
        metavar="BAUD",
        help="serial line speed, bit/s (default %(default)d)",
    )
    add_force_option(new)
    new.set_defaults(run=run_new)

    show = actions.add_parser(
        "show",
        help="validate a profile and print a summary",
        description=(
            "Read a cell profile, check every key (present, a finite number in range, its "
            "unit plausible) and print it in SI units with what follows from it: natural "
            "frequency, damping coefficient and the static force of one count and of the "
            "noise. A profile with a problem is refused in one line naming the key."
        ),
    )
    show.add_argument("file", metavar="FILE.toml", help="profile to read")
    show.set_defaults(run=run_show)


def _mass_from_natural_frequency(
    stiffness_n_per_m: float, natural_freq_hz: float, sample_rate_hz: float
) -> float:
    """m = k / ωn², from ωn = sqrt(k/m) with ωn = 2π·f (kg); f between 1 mHz and Nyquist."""
    nyquist = sample_rate_hz / 2.0 if math.isfinite(sample_rate_hz) else math.inf
    if not (math.isfinite(natural_freq_hz) and 1e-3 <= natural_freq_hz < nyquist):
        raise ValueError(
            f"--natural-frequency-hz = {natural_freq_hz!r}: must be from 0.001 Hz up to "
            f"below the Nyquist frequency (--sample-rate-hz / 2 = {nyquist:g} Hz)"
        )
    return stiffness_n_per_m / (2.0 * math.pi * natural_freq_hz) ** 2


def run_new(args: argparse.Namespace) -> int:
    """Build, validate and write the profile described by the ``new`` options; return 0."""
    out = Path(args.out)
    replaced = claim_file(out, force=args.force)
    k = args.stiffness_n_per_m
    if args.mass_kg is not None:
        mass_kg = args.mass_kg
    else:
        mass_kg = _mass_from_natural_frequency(k, args.natural_frequency_hz, args.sample_rate_hz)
    for option, value, unit in (
        ("--resolution-m", args.resolution_m, "m"),
        ("--volts-per-count", args.volts_per_count, "V"),
    ):
        if not (math.isfinite(value) and value > 0):
            raise ValueError(f"{option} = {value!r}: must be a finite number > 0 ({unit})")
    profile = CellProfile(
        cell=CellInfo(
            name=args.name if args.name is not None else out.stem,
            source="forcelens profile new",
        ),
        plant=PlantSection(
            mass_kg=mass_kg,
            stiffness_n_per_m=k,
            damping_ratio=args.damping_ratio,
            mass_u_kg=args.mass_u_kg,
            stiffness_u_n_per_m=args.stiffness_u_n_per_m,
            damping_ratio_u=args.damping_ratio_u,
        ),
        transducer=TransducerSection(
            volts_per_count=args.volts_per_count,
            metres_per_volt=args.resolution_m / args.volts_per_count,
            noise_m=args.noise_m,
        ),
        acquisition=AcquisitionSection(
            sample_rate_hz=args.sample_rate_hz, port=args.port, baudrate=args.baudrate
        ),
        observer=ObserverSection(force_bandwidth_hz=args.bandwidth_hz),
        limits=LimitsSection(
            force_min_n=args.force_min_n, force_max_n=args.force_max_n, travel_m=args.travel_m
        ),
    )
    save_profile(profile, out)
    plant = profile.plant
    print(f"wrote {out}" + (f" ({replaced})" if replaced else ""))
    print(f"  mass m                 {plant.mass_kg:.6g} kg")
    print(f"  stiffness k            {plant.stiffness_n_per_m:.6g} N/m")
    print(
        f"  natural frequency      {plant.natural_freq_hz:.6g} Hz "
        f"(ωn = sqrt(k/m) = {plant.natural_freq_rad_s:.6g} rad/s)"
    )
    print(f"  damping ratio ζ        {plant.damping_ratio:.6g}")
    print(f"  damping coefficient c  {plant.damping_n_s_per_m:.6g} N·s/m (c = 2ζ·sqrt(k·m))")
    print(
        f"  static resolution      {k * profile.transducer.resolution_m:.6g} N "
        f"(k × {profile.transducer.resolution_m:.6g} m per count)"
    )
    print(f"  metres per volt        {profile.transducer.metres_per_volt:.6g} m/V")
    if plant.stiffness_u_n_per_m == 0.0:
        print(
            "note: no stiffness uncertainty given, so readings' U will leave the calibration "
            "out; give --stiffness-u-n-per-m from the cell's calibration, or run forcelens "
            "calibrate SHEET --profile"
        )
    return 0


def summary_lines(profile: CellProfile) -> list[str]:
    """Return a readable, SI-unit summary of ``profile``, one string per line."""
    cell, plant, tr, acq, obs, lim = (
        profile.cell,
        profile.plant,
        profile.transducer,
        profile.acquisition,
        profile.observer,
        profile.limits,
    )
    k = plant.stiffness_n_per_m
    lines = [
        f"cell         {cell.name}",
    ]
    if cell.description:
        lines.append(f"             {cell.description}")
    if cell.source:
        lines.append(f"             source: {cell.source}")
    lines.append(f"             calibrated: {cell.calibration_date or 'never'}")
    lines += [
        "plant        (uncertainties are standard, k=1)",
        f"  mass                 {plant.mass_kg:.6g} kg ± {plant.mass_u_kg:.3g} kg",
        f"  stiffness            {k:.6g} N/m ± {plant.stiffness_u_n_per_m:.3g} N/m",
        f"  damping ratio ζ      {plant.damping_ratio:.6g} ± {plant.damping_ratio_u:.3g}",
        f"  natural frequency    {plant.natural_freq_hz:.6g} Hz "
        f"(ωn = {plant.natural_freq_rad_s:.6g} rad/s)",
        f"  damping coefficient  {plant.damping_n_s_per_m:.6g} N·s/m",
        "transducer",
        f"  volts per count      {tr.volts_per_count:.6g} V",
        f"  metres per volt      {tr.metres_per_volt:.6g} m/V",
        f"  zero                 {tr.zero_volts:.6g} V",
        f"  resolution           {tr.resolution_m:.6g} m per count "
        f"({k * tr.resolution_m:.6g} N static)",
        f"  noise (1σ)           {tr.noise_m:.6g} m ({k * tr.noise_m:.6g} N static)",
    ]
    bias_m = residual_bias_sd_m(tr.resolution_m, tr.noise_m)
    if bias_m >= 1e-3 * tr.resolution_m:
        lines.append(
            f"  quantisation bias    {bias_m:.3g} m ({k * bias_m:.3g} N, standard): the noise is "
            "narrower than a count, so held readings keep a bias averaging cannot remove "
            "(in the observer's σ)"
        )
    lines += [
        "acquisition",
        f"  sample rate          {acq.sample_rate_hz:.6g} Hz",
        f"  port                 {acq.port or '(built-in simulated cell)'}",
        f"  baudrate             {acq.baudrate} bit/s",
        f"  framing              {acq.framing}",
        "observer",
        f"  force bandwidth      {obs.force_bandwidth_hz:.6g} Hz",
    ]
    if obs.process_noise_n2_per_s is not None:
        lines.append(
            f"  process noise        {obs.process_noise_n2_per_s:.6g} N²/s (overrides bandwidth)"
        )
    lines += [
        f"  innovation gate      {obs.gate_sigma:.6g} σ",
        f"  rate-model scale     {obs.rate_scale:.6g}",
        "limits",
        f"  force range          {lim.force_min_n:.6g} N to {lim.force_max_n:.6g} N",
    ]
    if lim.travel_m is not None:
        lines.append(
            f"  travel               ±{lim.travel_m:.6g} m (k·travel = {k * lim.travel_m:.6g} N)"
        )
    return lines


def run_show(args: argparse.Namespace) -> int:
    """Validate the profile ``args.file`` and print its summary; return 0."""
    profile = load_profile(args.file)
    print(f"{args.file}: valid cell profile")
    for line in summary_lines(profile):
        print(line)
    return 0
