"""``forcelens impact``: which recorded results a recalibration affects, and by how much.

Every catalogued run of the cell in the selection is replayed with the profile it was
recorded with and with the corrected one (same samples, same zero events); every
settled reading and load change is reported old against new, and flagged when the
difference exceeds the old value's U (k = 2) or ``--tolerance``. The work runs on Dask
(``ui.archive.parallel``); the table and its record are written by
``ui.archive.impact_report``.
"""

from __future__ import annotations

import argparse
import shlex
import sys
from pathlib import Path
from typing import Any

from ui.archive.parallel import add_parallel_options
from ui.outputs import add_force_option
from ui.run_selection import add_selection_options

__all__ = ["DEFAULT_OUT", "register"]

#: Default output folder of an assessment.
DEFAULT_OUT = "impact"


def register(subparsers: Any) -> None:
    p = subparsers.add_parser(
        "impact",
        help="after a recalibration: which settled readings and load changes of the "
        "recorded runs move, and by how much",
        description=(
            "Replay every catalogued run of the cell (the corrected profile's cell unless "
            "--cell) in the selection twice, with its own profile and with the corrected "
            "one, applying the run's zero events in both; for every settled reading and "
            "load change print or write the old value, the new one, the difference, and "
            "whether it exceeds the old value's expanded uncertainty U (k = 2) or "
            "--tolerance. Writes impact.csv, impact.html, impact.json (the command, the "
            "corrected profile and the runs' hashes, to audit the assessment) and "
            "corrected-profile.toml. Exit status 0 when nothing exceeds and every run was "
            "examined, 1 otherwise. Runs in parallel on Dask when it is installed."
        ),
    )
    p.add_argument(
        "--profile",
        required=True,
        metavar="NEW.toml",
        help="the corrected cell profile (required)",
    )
    add_selection_options(
        p, cell_help="cell name contains TEXT, any case (default: the corrected profile's "
        "cell name, whole)"
    )  # fmt: skip
    p.add_argument(
        "--tolerance",
        metavar="T",
        help="flag differences above T instead of U (k = 2): a force in N (0.05 or 0.05N), "
        "a share of each old value (0.1%%), or both added (0.1%%+0.005N: a share with a floor "
        "for values near zero); default: the U (k = 2) of each old value",
    )
    p.add_argument(
        "--out",
        default=DEFAULT_OUT,
        metavar="DIR",
        help="folder for the table and its record (default: %(default)s)",
    )
    add_parallel_options(p)
    add_force_option(p)
    p.set_defaults(run=run)


def run(args: argparse.Namespace) -> int:
    from estimator.profile import load_profile
    from ui.archive.impact import RunImpact, impact_task, parse_tolerance
    from ui.archive.impact_report import OUTPUT_NAMES, Assessment, write_assessment
    from ui.archive.parallel import plan_execution, run_tasks
    from ui.archive.progress import RunProgress
    from ui.crash import fault_text
    from ui.outputs import claim_folder
    from ui.run_selection import select_runs
    from ui.version import software_version

    tolerance = parse_tolerance(args.tolerance) if args.tolerance is not None else None
    profile = load_profile(args.profile)  # errors name the file and the key
    profile_toml = Path(args.profile).read_text(encoding="utf-8")
    replaced = claim_folder(
        args.out, OUTPUT_NAMES, inputs=[args.profile, args.root], force=args.force
    )
    by_name = args.cell is None
    selection = select_runs(args, cell=profile.cell.name if by_name else None)
    entries = selection.entries
    if by_name:  # "that cell": the whole name, not a part of it
        wanted = profile.cell.name.casefold()
        entries = [e for e in entries if e.cell_name.casefold() == wanted]
    cell = profile.cell.name if by_name else f"name containing {args.cell!r}"
    dates = selection.dates_text()
    print(f"cell: {cell}" + ("" if not by_name else " (from the corrected profile)"))
    if dates:
        print(dates)
    plan = plan_execution(args.workers, args.scheduler, len(entries))
    print(f"{len(entries)} run(s) to examine under {selection.root}; {plan.describe()}")
    progress = RunProgress(len(entries), "impact")
    folders = [e.folder for e in entries]
    outcomes = run_tasks(
        impact_task(profile_toml, tolerance), folders, plan, advance=progress.advance
    )
    progress.close()
    argv = list(getattr(args, "argv", None) or sys.argv[1:])
    assessment = Assessment(
        command="forcelens " + shlex.join(argv),
        profile_path=str(args.profile),
        profile_toml=profile_toml,
        cell=cell,
        filters={
            "root": str(selection.root),
            "since": selection.since.isoformat() if selection.since else None,
            "until": selection.until.isoformat() if selection.until else None,
            "cell": args.cell,
            "tag": args.tag,
            "status": args.status,
        },
        tolerance=tolerance,
        where=plan.describe(),
    )
    faults = 0
    for folder, outcome in zip(folders, outcomes, strict=True):
        if outcome.ok and isinstance(outcome.value, RunImpact):
            assessment.runs.append((folder, outcome.value))
        else:
            faults += outcome.fault is not None
            text = outcome.problem or fault_text(outcome.fault, argv, software_version())
            assessment.runs.append((folder, text))
    assessment.runs += selection.unreadable
    written = write_assessment(assessment, Path(args.out))
    print(assessment.summary())
    print(f"wrote {', '.join(written)} to {args.out}")
    for note in replaced:
        print(note)
    print(assessment.verdict())
    if faults:
        return 3
    return 0 if assessment.exceeded == 0 and assessment.complete else 1
