"""``forcelens calibrate``: static calibration from a deadweight sheet.

Reads a calibration sheet (docs/calibration-sheet.md), turns conventional masses into
forces with local gravity and air buoyancy, fits deflection against force, evaluates
ISO 376-style errors and ASTM E74-style limits, and writes a text and an HTML summary
with the fit and residual plots. With ``--profile`` it also writes an updated copy of
the cell profile (stiffness, its uncertainty, the date and the data's SHA-256).
"""

from __future__ import annotations

import argparse
import datetime
from pathlib import Path
from typing import Any

from ui.outputs import add_force_option, claim_folder, write_text_atomic

__all__ = ["register"]


def register(subparsers: Any) -> None:
    p = subparsers.add_parser(
        "calibrate",
        help="static calibration from a deadweight sheet (ISO 376 / ASTM E74 style)",
        description=(
            "Fit a calibration sheet (CSV: series, direction, position, mass_kg or force_n, "
            "reading_m/mm/um) and report the stiffness with its standard uncertainty "
            "(k = 1), ISO 376-style errors and class per force step and ASTM E74-style "
            "lower force limits. Conventional masses become forces with g (from --g, or "
            "GRS80 normal gravity at --latitude and --height-m) and air buoyancy (OIML "
            "R 111). A sheet of masses needs one of --g or --latitude; the reading "
            "resolution comes from --resolution-m or, without it, from --profile."
        ),
    )
    p.add_argument("sheet", metavar="SHEET.csv", help="calibration sheet (CSV)")
    site = p.add_argument_group(
        "site (one of --g or --latitude is required when the sheet's loads are masses)"
    )
    one_of = site.add_mutually_exclusive_group()
    one_of.add_argument(
        "--g", type=float, metavar="G", help="measured local gravity, m/s² (no default)"
    )
    one_of.add_argument(
        "--latitude",
        type=float,
        metavar="DEG",
        help="site geodetic latitude, degrees, north positive (no default); g is then GRS80 "
        "normal gravity there",
    )
    site.add_argument(
        "--height-m",
        type=float,
        default=0.0,
        metavar="H",
        help="site height above the ellipsoid, m, with --latitude (default 0)",
    )
    p.add_argument(
        "--air-density",
        type=float,
        default=1.2,
        metavar="RHO",
        help="air density, kg/m³ (default 1.2)",
    )
    p.add_argument(
        "--weight-density",
        type=float,
        default=8000.0,
        metavar="RHO",
        help="density of the weights, kg/m³ (default 8000, the conventional value)",
    )
    p.add_argument(
        "--degree",
        type=int,
        default=1,
        choices=(1, 2, 3),
        help="degree of the polynomial of deflection against force, a count (default 1; "
        "only 1 gives a stiffness for --profile)",
    )
    p.add_argument(
        "--no-intercept", action="store_true", help="fit through the origin (no constant term)"
    )
    p.add_argument(
        "--resolution-m",
        type=float,
        metavar="X",
        help="reading resolution, m (required without --profile; default: one count of "
        "--profile's transducer)",
    )
    p.add_argument(
        "--profile",
        metavar="FILE.toml",
        help="cell profile to update, written to OUT/cell.toml (default: none, no profile "
        "written)",
    )
    p.add_argument(
        "--out",
        metavar="DIR",
        help="output folder (default: calibration-SHEET, SHEET the sheet's name without .csv)",
    )
    add_force_option(p)
    p.set_defaults(run=run)


def run(args: argparse.Namespace) -> int:
    from daq.calsheet import read_calibration_sheet
    from estimator.calibration import CalibrationSet, calibrate_static, forces_from_sheet
    from estimator.gravity import normal_gravity_m_s2
    from estimator.profile import load_profile

    out = Path(args.out or f"calibration-{Path(args.sheet).stem}")
    names = ["summary.txt", "summary.html", "fit.png", "residuals.png"]
    names += ["cell.toml"] if args.profile else []
    inputs = [args.sheet] + ([args.profile] if args.profile else [])
    replaced = claim_folder(out, names, inputs=inputs, force=args.force)
    sheet = read_calibration_sheet(args.sheet)
    for warning in sheet.warnings:
        print(f"warning: {warning}")
    profile = load_profile(args.profile) if args.profile else None
    if sheet.load_column == "mass_kg":
        if args.g is not None:
            g, g_text = args.g, f"g = {args.g} m/s² (measured, given)"
        elif args.latitude is not None:
            g = normal_gravity_m_s2(args.latitude, args.height_m)
            g_text = (
                f"g = {g:.7f} m/s² (GRS80 normal gravity at {args.latitude}°, {args.height_m} m)"
            )
        else:
            raise ValueError(
                f"{args.sheet}: loads are masses; give the site as --latitude DEG "
                "[--height-m H] or a measured --g"
            )
    else:
        g, g_text = None, "loads given as forces"
    resolution = args.resolution_m
    if resolution is None:
        if profile is None:
            raise ValueError("give --resolution-m (or --profile, whose transducer sets it)")
        resolution = profile.transducer.resolution_m
    forces = forces_from_sheet(
        sheet.load,
        sheet.load_column,
        g,
        air_density_kg_m3=args.air_density,
        weight_density_kg_m3=args.weight_density,
    )
    cal = CalibrationSet.from_rows(
        sheet.series, sheet.direction, sheet.position, forces, sheet.reading_m,
        row_labels=sheet.row_labels,
    )  # fmt: skip
    result = calibrate_static(
        cal,
        resolution_m=resolution,
        data_sha256=sheet.sha256,
        degree=args.degree,
        intercept=not args.no_intercept,
    )
    out.mkdir(parents=True, exist_ok=True)
    header = [
        f"forcelens static calibration of {args.sheet}",
        g_text,
        f"air density {args.air_density} kg/m³, weight density {args.weight_density} kg/m³",
        f"reading resolution {resolution:.3g} m",
        "",
    ]
    text = "\n".join(header) + result.text()
    write_text_atomic(out / "summary.txt", text + "\n")
    from ui.calibration_report import write_calibration_report

    html = write_calibration_report(result, text, out)
    written = ["summary.txt", html.name, "fit.png", "residuals.png"]
    if profile is not None:
        written.append(_write_profile(profile, result, args.sheet, out / "cell.toml").name)
    print(text)
    print(f"wrote {', '.join(written)} to {out}")
    for note in replaced:
        print(note)
    return 0


def _write_profile(profile: Any, result: Any, sheet: str, path: Path) -> Path:
    """The profile with the calibrated stiffness, its uncertainty, the date and the hash."""
    import dataclasses

    from estimator.profile import save_profile

    if result.stiffness_n_per_m is None:
        raise ValueError("only a degree-1 fit gives a stiffness for the profile; use --degree 1")
    plant = dataclasses.replace(
        profile.plant,
        stiffness_n_per_m=float(result.stiffness_n_per_m),
        stiffness_u_n_per_m=float(result.stiffness_u_n_per_m),
    )
    today = datetime.date.today().isoformat()
    cell = dataclasses.replace(
        profile.cell,
        calibration_date=today,
        source=f"static calibration {today} of {Path(sheet).name} "
        f"(SHA-256 {result.data_sha256}); was: {profile.cell.source}",
    )
    save_profile(profile.with_updates(plant=plant, cell=cell), path)
    return path
