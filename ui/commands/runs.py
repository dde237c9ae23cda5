"""``forcelens runs``: list recorded runs from the catalogue, with filters."""

from __future__ import annotations

import argparse
import dataclasses
import datetime as dt
import json
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
            "list them, oldest first, then the folders that could not be read and why. "
            "Dates are UTC: YYYY-MM-DD, or an ISO 8601 time (taken as UTC when it has no "
            "zone)."
        ),
    )
    p.add_argument(
        "--root", default=DEFAULT_RUNS_ROOT, help="folder holding runs (default: %(default)s)"
    )
    p.add_argument("--since", metavar="DATE", help="started at or after DATE (UTC)")
    p.add_argument("--until", metavar="DATE", help="started before the end of DATE (UTC)")
    p.add_argument("--cell", metavar="TEXT", help="cell name contains TEXT (any case)")
    p.add_argument("--tag", metavar="TEXT", help="a tag contains TEXT (any case)")
    p.add_argument(
        "--status", help="complete, aborted, failed or open (never closed: crashed or running)"
    )
    p.add_argument(
        "--json",
        action="store_true",
        help="print {runs: [...], unreadable: [{folder, problem}]} as JSON, for scripts",
    )
    p.set_defaults(run=run)


def _utc(option: str, text: str | None, *, end_of_day: bool) -> dt.datetime | None:
    """``YYYY-MM-DD`` (its start, or with ``end_of_day`` the next day's start) or an ISO
    time; without a zone, UTC."""
    if text is None:
        return None
    try:
        moment = dt.datetime.fromisoformat(text)
    except ValueError:
        raise ValueError(
            f"{option} {text!r}: give a date YYYY-MM-DD or an ISO 8601 time such as "
            "2026-12-01T08:30 (UTC unless it names a zone)"
        ) from None
    if moment.tzinfo is None:
        moment = moment.replace(tzinfo=dt.UTC)
    if end_of_day and len(text) == 10:  # a plain date: up to its end
        moment += dt.timedelta(days=1)
    return moment


def run(args: argparse.Namespace) -> int:
    from ui.recording import catalogue_for

    root = Path(args.root)
    if not root.is_dir():
        raise ValueError(
            f"--root {root}: no such folder; record a run with forcelens live --record"
        )
    since = _utc("--since", args.since, end_of_day=False)
    until = _utc("--until", args.until, end_of_day=True)
    catalogue = catalogue_for(root)
    catalogue.scan(root)
    entries = catalogue.query(
        since=since, until=until, cell=args.cell, tag=args.tag, status=args.status
    )
    skipped = catalogue.skipped
    if args.json:
        out = {
            "runs": [dataclasses.asdict(e) for e in entries],
            "unreadable": [{"folder": f, "problem": p} for f, p in skipped],
        }
        print(json.dumps(out, indent=2, ensure_ascii=False))
        return 0
    if since or until:
        print(
            "dates in UTC: from "
            + (since.isoformat() if since else "the first run")
            + " to "
            + (until.isoformat() if until else "the last")
        )
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
        print(f"no run under {root} matches")
    for folder, problem in skipped:
        print(f"unreadable: {folder}: {problem}")
    return 0
