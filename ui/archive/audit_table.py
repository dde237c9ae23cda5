"""The table of ``forcelens audit --all``: one row per run, identical / differs / unreadable.

Each row comes from the audit of one run (``ui.auditing.AuditResult``), or from the
problem that kept it from being audited (a run the catalogue lists that can no longer
be read, a folder the catalogue could not index). The rows keep the catalogue's order.
"""

from __future__ import annotations

import csv
import io
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

__all__ = [
    "DIFFERS",
    "IDENTICAL",
    "UNREADABLE",
    "AuditRow",
    "counts_text",
    "format_table",
    "table_csv",
]

IDENTICAL = "identical"
DIFFERS = "differs"
UNREADABLE = "unreadable"


@dataclass(frozen=True)
class AuditRow:
    """One run of the archive audit.

    Attributes:
        folder: the run folder.
        run_id, started_utc: from the catalogue ("" for a folder it could not index).
        state: ``identical`` (a newer software version may explain a difference),
            ``differs`` or ``unreadable``.
        verdict: what the table shows: "identical", "differs: altered sample", ...
        details: the differences with their likely causes, or the problem.
    """

    folder: str
    run_id: str
    started_utc: str
    state: str
    verdict: str
    details: tuple[str, ...] = ()

    @classmethod
    def from_audit(cls, entry: Any, result: Any) -> AuditRow:
        """The row of a catalogue entry and its ``AuditResult``."""
        return cls(
            entry.folder,
            entry.run_id,
            entry.started_utc,
            DIFFERS if result.differs else IDENTICAL,
            result.verdict(),
            tuple(f"{f.what} (likely cause: {f.cause})" for f in result.findings),
        )

    @classmethod
    def unreadable(cls, folder: str, problem: str, entry: Any = None) -> AuditRow:
        """The row of a run that could not be audited."""
        return cls(
            folder,
            entry.run_id if entry is not None else "",
            entry.started_utc if entry is not None else "",
            UNREADABLE,
            f"unreadable: {problem}",
            (problem,),
        )


def format_table(rows: Sequence[AuditRow]) -> str:
    """The terminal table, the differences under each run that differs, and the counts."""
    lines = [f"{'run':<24} {'started (UTC)':<20} verdict"]
    for r in rows:
        lines.append(f"{r.run_id or r.folder:<24} {r.started_utc[:19]:<20} {r.verdict}")
        if r.state != UNREADABLE and r.verdict != IDENTICAL:
            lines += [f"    {d}" for d in r.details]
    lines.append(counts_text(rows))
    return "\n".join(lines)


def counts_text(rows: Sequence[AuditRow]) -> str:
    """The counts line: N run(s), how many identical, differ and unreadable."""
    n = {s: sum(r.state == s for r in rows) for s in (IDENTICAL, DIFFERS, UNREADABLE)}
    return (
        f"{len(rows)} run(s): {n[IDENTICAL]} identical, {n[DIFFERS]} differ, "
        f"{n[UNREADABLE]} unreadable"
    )


def table_csv(rows: Sequence[AuditRow], command: str) -> str:
    """The table as CSV (``#`` line with the command, then run_id, started_utc, folder,
    state, verdict, details joined by " | ")."""
    buffer = io.StringIO()
    buffer.write(f"# forcelens audit --all: {command}\n")
    writer = csv.writer(buffer, lineterminator="\n")
    writer.writerow(["run_id", "started_utc", "folder", "state", "verdict", "details"])
    for r in rows:
        writer.writerow([r.run_id, r.started_utc, r.folder, r.state, r.verdict,
                         " | ".join(r.details)])  # fmt: skip
    return buffer.getvalue()
