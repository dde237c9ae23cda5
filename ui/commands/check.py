"""``forcelens check``: does the cell meet a target settling time and overshoot?

Compares the cell of a profile (its identified plant) with a target settling time to a
band and a largest overshoot, and says what stiffness and damping would meet the target
with the same moving mass (`estimator.plant.design_cell`). This is the bare cell read
statically (k·x); the observer settles much sooner, which ``forcelens demo`` shows.
"""

from __future__ import annotations

import argparse
import math
from typing import Any

__all__ = ["register"]


def register(subparsers: Any) -> None:
    p = subparsers.add_parser(
        "check",
        help="compare the cell with a target settling time and overshoot; what would meet it",
        description=(
            "Report the profile's cell (ωn, ζ, settling time to the band, overshoot) against "
            "a target settling time and largest overshoot, and the stiffness and damping "
            "that would meet the target with the same moving mass. Exit 1 when the cell "
            "misses the target."
        ),
    )
    p.add_argument("--profile", metavar="FILE.toml", help="cell profile (default: the demo cell)")
    p.add_argument(
        "--settling-time-s",
        type=float,
        required=True,
        metavar="S",
        help="target settling time after a step, s (required)",
    )
    p.add_argument(
        "--band",
        type=float,
        default=0.02,
        metavar="FRAC",
        help="settling band ± around the final value, a fraction of the step: 0.02 is 2\u00a0%% "
        "(default 0.02)",
    )
    p.add_argument(
        "--max-overshoot",
        type=float,
        default=0.05,
        metavar="FRAC",
        help="largest acceptable overshoot, a fraction of the step: 0.05 is 5\u00a0%% "
        "(default 0.05)",
    )
    p.set_defaults(run=run)


def run(args: argparse.Namespace) -> int:
    from estimator.plant import (
        damping_ratio_for_overshoot,
        design_cell,
        normalised_settling_time,
    )
    from estimator.profile import default_demo_profile, load_profile

    # fractions, not percent: 0.02 is 2 %
    if not (math.isfinite(args.band) and 0.0 < args.band < 0.5):
        raise ValueError(f"--band = {args.band!r}: a fraction in (0, 0.5), 0.02 means 2 %")
    if not (math.isfinite(args.max_overshoot) and 0.0 <= args.max_overshoot < 1.0):
        raise ValueError(
            f"--max-overshoot = {args.max_overshoot!r}: a fraction in [0, 1), 0.05 means 5 %"
        )
    if not (math.isfinite(args.settling_time_s) and args.settling_time_s > 0):
        raise ValueError(f"--settling-time-s = {args.settling_time_s!r}: must be > 0 seconds")
    profile = load_profile(args.profile) if args.profile else default_demo_profile()
    plant = profile.plant.plant()
    ts = plant.settling_time_s(args.band)
    os_ = plant.peak_overshoot()
    meets_time = ts <= args.settling_time_s
    meets_os = os_ <= args.max_overshoot
    print(
        f"cell '{profile.cell.name}': fn {plant.natural_freq_hz:.4g} Hz, "
        f"ζ {plant.damping_ratio:.4g}, settling to ±{100 * args.band:.3g} % in {ts * 1e3:.4g} ms, "
        f"overshoot {100 * os_:.3g} %"
    )
    print(
        f"target: settle within {args.settling_time_s * 1e3:.4g} ms, overshoot at most "
        f"{100 * args.max_overshoot:.3g} %  ->  settling "
        f"{'met' if meets_time else 'MISSED'}, overshoot {'met' if meets_os else 'MISSED'}"
    )
    m, k = profile.plant.mass_kg, profile.plant.stiffness_n_per_m
    zeta = damping_ratio_for_overshoot(args.max_overshoot) if args.max_overshoot > 0 else 1.0
    wn = math.sqrt(k / m)
    ts_damped = normalised_settling_time(zeta, args.band) / wn
    print(
        f"damping for the overshoot: ζ = {zeta:.4g}, b = {2 * zeta * math.sqrt(k * m):.4g} N·s/m "
        f"(now {profile.plant.damping_n_s_per_m:.4g}); with today's stiffness it settles in "
        f"{ts_damped * 1e3:.4g} ms"
    )
    design = design_cell(
        args.settling_time_s,
        m,
        damping_ratio=zeta,
        band=args.band,
    )
    print(
        f"stiffness for the settling time at that ζ and the same moving mass ({m:.4g} kg): "
        f"k ≥ {design.stiffness_n_per_m:.4g} N/m (now {k:.4g})"
    )
    print(
        "This is the bare cell read statically (k·x); the observer's reading settles much "
        "sooner (see forcelens demo). Mechanical changes to a cell need a new calibration."
    )
    return 0 if meets_time and meets_os else 1
