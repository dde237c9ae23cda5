"""``forcelens runs``: list recorded runs from the catalogue, with filters."""

from __future__ import annotations

import argparse
import dataclasses
import json
from typing import Any

from ui.run_selection import add_selection_options

__all__ = ["register"]


def register(subparsers: Any) -> None:
    p = subparsers.add_parser(
        "runs",
        help="list recorded runs (filter by date, cell, tag, status)",
        description=(
            "Index the run folders under --root into its catalogue (catalogue.sqlite) and "
            "list them, oldest first, then the folders that could not be read and why. "
            "Dates are UTC: YYYY-MM-DD, or an ISO 8601 time (taken as UTC when it has no "
            "zone)."
        ),
    )
    add_selection_options(p)
    p.add_argument(
        "--json",
        action="store_true",
        help="print {runs: [...], unreadable: [{folder, problem}]} as JSON, for scripts",
    )
    p.set_defaults(run=run)


def run(args: argparse.Namespace) -> int:
    from ui.run_selection import select_runs

    selection = select_runs(args)
    entries, skipped = selection.entries, selection.unreadable
    if args.json:
        out = {
            "runs": [dataclasses.asdict(e) for e in entries],
            "unreadable": [{"folder": f, "problem": p} for f, p in skipped],
        }
        print(json.dumps(out, indent=2, ensure_ascii=False))
        return 0
    dates = selection.dates_text()
    if dates:
        print(dates)
    if entries:
        print(
            f"{'run':<24} {'started (UTC)':<20} {'status':<9} {'samples':>10}  cell / tags / note"
        )
        for e in entries:
            tags = ",".join(e.tags)
            print(
                f"{e.run_id:<24} {e.started_utc[:19]:<20} {e.status:<9} {e.samples:>10}  "
                f"{e.cell_name} / {tags} / {e.operator_note}"
            )
        print(f"{len(entries)} run(s)")
    else:
        print(f"no run under {selection.root} matches")
    for folder, problem in skipped:
        print(f"unreadable: {folder}: {problem}")
    return 0
