"""The impact assessment written out: table (CSV, HTML), its record, and the summary.

An assessment folder holds

* ``impact.csv`` — one row per settled reading and load change of every run examined,
  and one per run that could not be examined; ``#`` lines first say what was assessed;
* ``impact.html`` — the same table, self-contained, with the summary, the command and
  the corrected profile;
* ``impact.json`` — the record that makes the assessment auditable: the command, the
  software version, the corrected profile (text and SHA-256), the selection, and per
  run its samples' SHA-256 and the SHA-256 of the profile it was recorded with;
* ``corrected-profile.toml`` — the corrected profile as it was applied.

The table's order is the runs' order in the catalogue (start time), readings then load
changes within a run: the same whatever the number of workers.
"""

from __future__ import annotations

import csv
import datetime as dt
import hashlib
import html
import io
import json
import math
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from ui.archive.impact import RunImpact, Tolerance
from ui.outputs import write_text_atomic

__all__ = ["OUTPUT_NAMES", "Assessment", "write_assessment"]

#: Files an assessment writes in its folder.
OUTPUT_NAMES = ("impact.csv", "impact.html", "impact.json", "corrected-profile.toml")
IMPACT_FORMAT = "forcelens-impact"
IMPACT_VERSION = 1

_COLUMNS = (
    "run_id",
    "started_utc",
    "kind",
    "index [1]",
    "time_s [s]",
    "old_n [N]",
    "new_n [N]",
    "diff_n [N]",
    "diff_pct [%]",
    "expanded_u_n [N]",
    "limit_n [N]",
    "exceeds",
    "old_settle_ms [ms]",
    "new_settle_ms [ms]",
    "note",
)


@dataclass
class Assessment:
    """Everything one ``forcelens impact`` found, in the order of the runs.

    Attributes:
        command: the command line that made it.
        profile_path: the corrected profile as given.
        profile_toml: its text (the bytes applied).
        cell: the cell name the runs were selected by.
        filters: the selection (root, dates, tag, status) as text.
        tolerance: the tolerance replacing U, or None.
        where: where the job ran (serially, local workers, a cluster).
        runs: per selected run, ``(folder, RunImpact)`` or ``(folder, problem)``.
    """

    command: str
    profile_path: str
    profile_toml: str
    cell: str
    filters: dict[str, Any]
    tolerance: Tolerance | None
    where: str
    runs: list[tuple[str, RunImpact | str]] = field(default_factory=list)

    @property
    def impacts(self) -> list[RunImpact]:
        """The runs that were examined."""
        return [r for _, r in self.runs if isinstance(r, RunImpact)]

    @property
    def unreadable(self) -> list[tuple[str, str]]:
        """``(folder, problem)`` of the runs that could not be examined."""
        return [(f, r) for f, r in self.runs if isinstance(r, str)]

    @property
    def exceeded(self) -> int:
        """Readings and load changes whose difference exceeds its limit."""
        return sum(row.exceeds for imp in self.impacts for row in imp.rows)

    @property
    def complete(self) -> bool:
        """True when every selected run was examined."""
        return not self.unreadable

    def limit_text(self) -> str:
        """What the differences are compared with."""
        if self.tolerance is None:
            return "U (k = 2) of each old value"
        tol = self.tolerance
        parts = [f"{100 * tol.fraction:g} % of each old value"] if tol.fraction else []
        parts += [f"{tol.absolute_n:g} N"] if tol.absolute_n else []
        return f"the tolerance {' + '.join(parts)} ({tol.text})"

    def summary(self) -> str:
        """The terminal summary: runs, readings, changes, how many exceed, the worst."""
        impacts = self.impacts
        rows = [(imp, row) for imp in impacts for row in imp.rows]
        readings = sum(row.kind == "reading" for _, row in rows)
        lines = [
            f"runs examined: {len(impacts)} of {len(self.runs)} selected"
            + (f" ({len(self.unreadable)} could not be read)" if self.unreadable else ""),
            f"settled readings: {readings}, load changes: {len(rows) - readings}; "
            f"differences compared with {self.limit_text()}",
            f"exceeding: {self.exceeded} "
            f"({sum(r.exceeds and r.kind == 'reading' for _, r in rows)} readings, "
            f"{sum(r.exceeds and r.kind == 'change' for _, r in rows)} load changes) in "
            f"{sum(any(r.exceeds for r in imp.rows) for imp in impacts)} run(s)",
        ]
        if rows:
            imp, row = max(rows, key=lambda ir: ir[1].ratio)
            lines.append(
                f"worst: run {imp.run_id}, {row.kind} at {row.time_s:.4f} s: "
                f"{row.old_n:.6g} → {_num(row.new_n, '.6g')} N "
                f"({_num(row.diff_n, '+.4g')} N, {_num(row.ratio, '.3g')} × the limit "
                f"{row.limit_n:.4g} N)"
            )
        for folder, problem in self.unreadable:
            lines.append(f"could not be read: {folder}: {problem}")
        for imp in impacts:
            lines += [f"note: run {imp.run_id}: {n}" for n in imp.notes]
        return "\n".join(lines)

    def verdict(self) -> str:
        """The last line: whether anything exceeded and whether every run was examined."""
        if not self.runs:
            return "nothing to assess: no run of the cell matches the selection"
        if self.exceeded:
            text = f"AFFECTED: {self.exceeded} value(s) moved by more than {self.limit_text()}"
        else:
            text = f"not affected: no value moved by more than {self.limit_text()}"
        if not self.complete:
            text += f"; INCOMPLETE: {len(self.unreadable)} run(s) could not be examined"
        return text


def _num(value: float | None, fmt: str) -> str:
    if value is None or not math.isfinite(value):
        return "—"
    return format(value, fmt)


def _csv_num(value: float | None) -> str:
    """A number as the CSV dialect writes it (docs/csv-files.md): the shortest text that
    reads back to the same double; empty when there is none."""
    if value is None or not math.isfinite(value):
        return ""
    return repr(float(value))


def _short(value: float | None) -> str:
    """A number for people (the HTML table): six significant digits."""
    if value is None or not math.isfinite(value):
        return ""
    return format(value, ".6g")


def _table(a: Assessment, number: Callable[[float | None], str] = _csv_num) -> list[list[str]]:
    out = []
    for folder, result in a.runs:
        if isinstance(result, str):
            out.append(["", "", "unreadable", "", "", "", "", "", "", "", "", "", "", "",
                        f"{folder}: {result}"])  # fmt: skip
            continue
        for row in result.rows:
            pct = 100.0 * row.diff_n / abs(row.old_n) if row.old_n else math.nan
            note = "" if math.isfinite(row.new_n) else "no matching change in the new replay"
            out.append(
                [
                    result.run_id,
                    result.started_utc,
                    row.kind,
                    str(row.index),
                    number(row.time_s),
                    number(row.old_n),
                    number(row.new_n),
                    number(row.diff_n),
                    number(pct),
                    number(row.expanded_u_n),
                    number(row.limit_n),
                    "yes" if row.exceeds else "no",
                    number(row.old_settle_ms),
                    number(row.new_settle_ms),
                    note,
                ]
            )
    return out


def _csv_text(a: Assessment, sha: str) -> str:
    buffer = io.StringIO()
    head = {
        "command": a.command,
        "corrected_profile": a.profile_path,
        "corrected_profile_sha256": sha,
        "cell": a.cell,
        "limit": a.limit_text(),
        "expanded_u_n": "U (k = 2) of each old value, N",
    }
    buffer.write("# forcelens impact assessment\n")
    for key, value in head.items():
        buffer.write(f"# {key}: {value}".replace("\n", " ") + "\n")
    writer = csv.writer(buffer, lineterminator="\n")
    writer.writerow(_COLUMNS)
    writer.writerows(_table(a))
    return buffer.getvalue()


def _html_text(a: Assessment, sha: str, version: str) -> str:
    e = html.escape
    head = "".join(f"<th>{e(c)}</th>" for c in _COLUMNS)
    body = "".join(
        f"<tr class='{'bad' if r[11] == 'yes' or r[2] == 'unreadable' else ''}'>"
        + "".join(f"<td>{e(c)}</td>" for c in r)
        + "</tr>"
        for r in _table(a, _short)
    )
    return (
        "<!DOCTYPE html><html lang='en'><head><meta charset='utf-8'>"
        "<title>forcelens impact assessment</title><style>"
        "body{font-family:sans-serif;margin:2em;color:#222}"
        "table{border-collapse:collapse;font-size:90%}"
        "td,th{border:1px solid #bbb;padding:2px 5px;text-align:right}"
        "tr.bad td{background:#f6dede}pre{background:#f4f4f4;padding:.5em}</style></head><body>"
        "<h1>forcelens impact assessment</h1>"
        f"<p><b>{e(a.verdict())}</b></p><pre>{e(a.summary())}</pre>"
        f"<p>Command: <code>{e(a.command)}</code><br>Software: forcelens {e(version)}; "
        f"{e(a.where)}.<br>Cell: {e(a.cell)}. Selection: {e(json.dumps(a.filters))}.</p>"
        "<p>A settled reading is the mean force estimate while the settling monitor held "
        "the reading settled, compared over the same samples in both replays; a load "
        "change is valued by the level it reached. Both replays apply the run's own zero "
        "events. U is the expanded uncertainty (k = 2) the old value was issued with.</p>"
        f"<table><tr>{head}</tr>{body}</table>"
        f"<h2>Corrected profile</h2><p>{e(a.profile_path)}, SHA-256 <code>{sha}</code></p>"
        f"<pre>{e(a.profile_toml)}</pre></body></html>\n"
    )


def _record(a: Assessment, sha: str, version: str) -> dict[str, Any]:
    runs = []
    for folder, result in a.runs:
        if isinstance(result, str):
            runs.append({"folder": folder, "examined": False, "problem": result})
        else:
            runs.append(
                {
                    "folder": folder,
                    "examined": True,
                    "run_id": result.run_id,
                    "samples": result.samples,
                    "samples_sha256": result.samples_sha256,
                    "own_profile_sha256": result.own_profile_sha256,
                    "readings": sum(r.kind == "reading" for r in result.rows),
                    "changes": sum(r.kind == "change" for r in result.rows),
                    "exceeding": sum(r.exceeds for r in result.rows),
                    "notes": list(result.notes),
                }
            )
    return {
        "format": IMPACT_FORMAT,
        "version": IMPACT_VERSION,
        "command": a.command,
        "software_version": version,
        "made_utc": dt.datetime.now(dt.UTC).strftime("%Y-%m-%dT%H:%M:%SZ"),
        "where": a.where,
        "corrected_profile": {"path": a.profile_path, "sha256": sha, "toml": a.profile_toml},
        "cell": a.cell,
        "selection": a.filters,
        "limit": a.limit_text(),
        "exceeding": a.exceeded,
        "complete": a.complete,
        "runs": runs,
    }


def write_assessment(a: Assessment, folder: Path) -> list[str]:
    """Write the four files (claimed beforehand) into ``folder``; their names."""
    from ui.version import software_version

    version = software_version()
    sha = hashlib.sha256(a.profile_toml.encode("utf-8")).hexdigest()
    folder.mkdir(parents=True, exist_ok=True)
    write_text_atomic(folder / "impact.csv", _csv_text(a, sha))
    write_text_atomic(folder / "impact.html", _html_text(a, sha, version))
    record = json.dumps(_record(a, sha, version), indent=2, ensure_ascii=False, allow_nan=False)
    write_text_atomic(folder / "impact.json", record + "\n")
    write_text_atomic(folder / "corrected-profile.toml", a.profile_toml)
    return list(OUTPUT_NAMES)
