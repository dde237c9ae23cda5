"""``forcelens runs``: list recorded runs from the catalogue, with filters."""

from __future__ import annotations

import argparse
from pathlib import Path
from typing import Any

__all__ = ["register"]


def register(subparsers: Any) -> None:
    from ui.commands.live import DEFAULT_RUNS_ROOT

    p = subparsers.add_parser(
        "runs",
        help="list recorded runs (filter by date, cell, tag, status)",
        description=(
            "Index the run folders under --root into its catalogue (catalogue.sqlite) and "
            "list them, oldest first. Dates are UTC, YYYY-MM-DD or a full ISO time."
        ),
    )
    p.add_argument(
        "--root", default=DEFAULT_RUNS_ROOT, help="folder holding runs (default: %(default)s)"
    )
    p.add_argument("--since", metavar="DATE", help="started at or after DATE (UTC)")
    p.add_argument("--until", metavar="DATE", help="started before the end of DATE (UTC)")
    p.add_argument("--cell", help="cell name contains this text")
    p.add_argument("--tag", help="has this tag")
    p.add_argument(
        "--status", help="complete, aborted, failed or open (never closed: crashed or running)"
    )
    p.set_defaults(run=run)


def run(args: argparse.Namespace) -> int:
    from ui.recording import catalogue_for

    root = Path(args.root)
    if not root.is_dir():
        raise ValueError(
            f"--root {root}: no such folder; record a run with forcelens live --record"
        )
    catalogue = catalogue_for(root)
    catalogue.scan(root)
    entries = catalogue.query(
        since=args.since, until=args.until, cell=args.cell, tag=args.tag, status=args.status
    )
    if not entries:
        print(f"no run under {root} matches")
        return 0
    print(f"{'run':<24} {'started (UTC)':<20} {'status':<9} {'samples':>10}  cell / tags / note")
    for e in entries:
        tags = ",".join(e.tags)
        print(
            f"{e.run_id:<24} {e.started_utc[:19]:<20} {e.status:<9} {e.samples:>10}  "
            f"{e.cell_name} / {tags} / {e.operator_note}"
        )
    print(f"{len(entries)} run(s)")
    return 0
