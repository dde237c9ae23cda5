"""``forcelens audit``: recompute every figure of a run and compare with what was stored.

``forcelens audit RUN`` checks, in order: the files against the closing record (a
changed sample, a truncated file, an edited description); the replayed estimates against
the ones computed live; the settling and alarm transitions against those logged live;
and, when a report was made (``figures.json``), every figure of it (``ui.auditing``). It
prints "identical" or each difference with its likely cause, and exits 1 on any
difference that a newer software version alone does not explain.

``forcelens audit --all [filters]`` audits every catalogued run the filters select, in
parallel on Dask (``ui.archive.parallel``), and prints one row per run: identical,
differs (with the cause) or unreadable (``ui.archive.audit_table``); exit 1 when any run
differs or cannot be read.
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

__all__ = ["register"]

_ALL_ONLY = ("since", "until", "cell", "tag", "status", "workers", "scheduler", "out")


def register(subparsers: Any) -> None:
    from ui.input_paths import input_path

    p = subparsers.add_parser(
        "audit",
        help="replay a run (or every catalogued run with --all) and check every stored "
        "figure: 'identical' or what differs and why",
        description=(
            "Replay a recorded run through the same pipeline and recompute its estimates, "
            "settling states, alarms and, when a report was made, every figure of it; "
            "compare with what was stored and name each difference with its likely cause "
            "(altered or truncated data, another profile, another software version). "
            "Exit status 1 on a difference not explained by the software version alone. "
            "With --all, every catalogued run under --root that the filters select, in "
            "parallel on Dask when it is installed, as a table: identical, differs (with "
            "the cause) or unreadable; exit status 1 when any run differs or cannot be read."
        ),
    )
    p.add_argument("run_folder", metavar="RUN", nargs="?", type=input_path, help="run folder")
    p.add_argument(
        "--report",
        metavar="DIR",
        help="report folder whose figures.json is checked (default: RUN-report beside the "
        "run, when it exists)",
    )
    p.add_argument(
        "--profile",
        metavar="FILE.toml",
        help="replay with this profile (default: the run's own)",
    )
    p.add_argument(
        "--all",
        action="store_true",
        help="audit every catalogued run the filters below select (each compared with its "
        "report when RUN-report/figures.json exists beside it)",
    )
    add_selection_options(p)
    add_parallel_options(p)
    p.add_argument(
        "--out",
        metavar="FILE.csv",
        help="with --all: also write the table as CSV (default: none written)",
    )
    add_force_option(p)
    p.set_defaults(run=run)


def run(args: argparse.Namespace) -> int:
    if args.all:
        if args.run_folder:
            raise ValueError(f"{args.run_folder}: give a RUN or --all, not both")
        for option in ("report", "profile"):
            if getattr(args, option) is not None:
                raise ValueError(
                    f"--{option} applies to one RUN; with --all each run is replayed with its "
                    "own profile (for a corrected profile use forcelens impact)"
                )
        return _audit_all(args)
    if not args.run_folder:
        raise ValueError("give the RUN folder to audit, or --all for every catalogued run")
    given = [f"--{o}" for o in _ALL_ONLY if getattr(args, o) is not None]
    if given:
        raise ValueError(f"{', '.join(given)}: only with --all (these select and run many runs)")
    return _audit_one(args)


def _audit_one(args: argparse.Namespace) -> int:
    from daq.runs import check_run_folder
    from estimator.profile import load_profile
    from ui.auditing import audit_run
    from ui.progress import wanted

    # what is not a run at all is an error, not a difference found in a run
    check_run_folder(args.run_folder)
    profile = load_profile(args.profile) if args.profile else None
    with wanted():  # one run: its replay may show a bar on a terminal
        result = audit_run(
            args.run_folder, profile=profile, profile_name=args.profile or "", report=args.report
        )
    print(result.text())
    return 1 if result.differs else 0


def _audit_all(args: argparse.Namespace) -> int:
    from ui.archive.audit_table import IDENTICAL, AuditRow, format_table, table_csv
    from ui.archive.parallel import plan_execution, run_tasks
    from ui.archive.progress import RunProgress
    from ui.auditing import AuditResult, audit_run
    from ui.crash import fault_text
    from ui.outputs import claim_file, write_text_atomic
    from ui.run_selection import select_runs
    from ui.version import software_version

    replaced = claim_file(args.out, inputs=[args.root], force=args.force) if args.out else None
    selection = select_runs(args)
    entries = selection.entries
    dates = selection.dates_text()
    if dates:
        print(dates)
    plan = plan_execution(args.workers, args.scheduler, len(entries))
    print(f"{len(entries)} run(s) to audit under {selection.root}; {plan.describe()}")
    progress = RunProgress(len(entries), "audit")
    outcomes = run_tasks(audit_run, [e.folder for e in entries], plan, advance=progress.advance)
    progress.close()
    argv = list(getattr(args, "argv", None) or sys.argv[1:])
    rows, faults = [], 0
    for entry, outcome in zip(entries, outcomes, strict=True):
        if outcome.ok and isinstance(outcome.value, AuditResult):
            rows.append(AuditRow.from_audit(entry, outcome.value))
        else:
            faults += outcome.fault is not None
            text = outcome.problem or fault_text(outcome.fault, argv, software_version())
            rows.append(AuditRow.unreadable(entry.folder, text, entry))
    rows += [AuditRow.unreadable(f, p) for f, p in selection.unreadable]
    print(format_table(rows))
    if args.out:
        write_text_atomic(Path(args.out), table_csv(rows, "forcelens " + shlex.join(argv)))
        print(f"wrote {args.out}" + (f" ({replaced})" if replaced else ""))
    if faults:
        return 3
    return 1 if any(r.state != IDENTICAL for r in rows) else 0
