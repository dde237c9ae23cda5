"""Which recorded runs a command works on: the catalogue filters, as options and as a query.

`forcelens runs` lists what the filters select; `forcelens impact` and `forcelens audit
--all` work on it. All three take the same options (`add_selection_options`) and read
them the same way (`select_runs`): the run folders under ``--root`` are indexed into
their catalogue (``daq.catalogue``), then queried by start time (UTC), cell, tag and
status. Folders that could not be read are returned with their problem, never dropped.
A read-only archive is indexed into a temporary copy of its catalogue
(`ui.catalogue_access`), with a note on standard error.

This module imports nothing heavy: `add_selection_options` runs while the parser is built.
"""

from __future__ import annotations

import argparse
import datetime as dt
import sys
from dataclasses import dataclass
from pathlib import Path
from typing import Any

__all__ = ["RUN_STATUSES", "Selection", "add_selection_options", "parse_utc", "select_runs"]


@dataclass(frozen=True)
class Selection:
    """The runs a set of filters selects.

    Attributes:
        root: the folder holding the runs.
        entries: the matching runs (``daq.catalogue.CatalogueEntry``), oldest first.
        unreadable: ``(folder, problem)`` of every folder under ``root`` that holds a
            ``run.json`` but could not be read, then of every run the filters selected in
            the catalogue before this scan whose folder no longer holds a run (missing).
        since, until: the time bounds used (UTC), or None.
    """

    root: Path
    entries: list[Any]
    unreadable: list[tuple[str, str]]
    since: dt.datetime | None
    until: dt.datetime | None

    def dates_text(self) -> str | None:
        """The line naming the time bounds (UTC) when one was given, else None."""
        if not (self.since or self.until):
            return None
        return (
            "dates in UTC: from "
            + (self.since.isoformat() if self.since else "the first run")
            + " to "
            + (self.until.isoformat() if self.until else "the last")
        )


#: what ``--status`` takes: the catalogue's statuses (`daq.catalogue.CATALOGUE_STATUSES`,
#: not imported here: ``--help`` stays free of numpy)
RUN_STATUSES = ("complete", "aborted", "failed", "open")


def add_selection_options(
    parser: argparse.ArgumentParser,
    *,
    cell_help: str = "cell name contains TEXT, any case (default: any cell)",
) -> None:
    """``--root``, ``--since``, ``--until``, ``--cell``, ``--tag``, ``--status``."""
    from ui.commands.live import DEFAULT_RUNS_ROOT

    parser.add_argument(
        "--root",
        default=DEFAULT_RUNS_ROOT,
        metavar="DIR",
        help="folder holding runs (default: %(default)s)",
    )
    parser.add_argument(
        "--since",
        metavar="DATE",
        help="started at or after DATE: YYYY-MM-DD or an ISO 8601 time, UTC when it names no "
        "zone (default: no limit)",
    )
    parser.add_argument(
        "--until",
        metavar="DATE",
        help="started before the end of DATE (a day) or before DATE (a time), UTC as for "
        "--since (default: no limit)",
    )
    parser.add_argument("--cell", metavar="TEXT", help=cell_help)
    parser.add_argument(
        "--tag", metavar="TEXT", help="a tag contains TEXT, any case (default: any tag)"
    )
    parser.add_argument(
        "--status",
        metavar="STATUS",
        choices=RUN_STATUSES,
        help="complete, aborted, failed or open (never closed: crashed or running); default: any",
    )


def parse_utc(option: str, text: str | None, *, end_of_day: bool) -> dt.datetime | None:
    """``YYYY-MM-DD`` (its start, or with ``end_of_day`` the next day's start) or an ISO
    time; without a zone, UTC. Raises ValueError naming ``option`` for anything else."""
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


def select_runs(args: argparse.Namespace, *, cell: str | None = None) -> Selection:
    """Index the runs under ``args.root`` and return those the filters in ``args`` select.

    ``cell`` overrides ``args.cell`` (text the cell name contains). Raises ValueError when
    the root is not a folder or a filter is malformed.
    """
    from ui.catalogue_access import catalogue_to_scan

    root = Path(args.root)
    if not root.is_dir():
        raise ValueError(
            f"--root {root}: no such folder; record a run with forcelens live --record"
        )
    since = parse_utc("--since", args.since, end_of_day=False)
    until = parse_utc("--until", args.until, end_of_day=True)
    catalogue, note = catalogue_to_scan(root)
    if note:
        print(f"note: {note}", file=sys.stderr)
    filters = {
        "since": since,
        "until": until,
        "cell": args.cell if cell is None else cell,
        "tag": args.tag,
        "status": args.status,
    }
    base = root.resolve()

    def below_root(entries: list[Any]) -> list[Any]:
        # the catalogue may also hold runs of other roots (a copied catalogue.sqlite)
        return [e for e in entries if Path(e.folder).is_relative_to(base)]

    known = below_root(catalogue.query(**filters))  # what was catalogued before this scan
    catalogue.scan(root)
    entries = below_root(catalogue.query(**filters))
    unreadable = list(catalogue.skipped)
    seen = {e.folder for e in entries} | {str(Path(f).resolve()) for f, _ in unreadable}
    unreadable += [
        (e.folder, f"missing: run {e.run_id} was catalogued, its folder no longer holds it")
        for e in known
        if e.folder not in seen
    ]
    return Selection(root, entries, unreadable, since, until)
