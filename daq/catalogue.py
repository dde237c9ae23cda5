"""A searchable index of run folders, kept in one SQLite file.

The catalogue only copies what each run folder already says about itself (``run.json``
and ``closing.json``, read without loading samples), so it can be deleted and rebuilt
at any time with :meth:`Catalogue.scan`. Every method opens its own connection and
closes it before returning.

Status of a run in the catalogue: ``open`` (no ``closing.json``: still recording or
crashed), or the closing status ``complete`` / ``aborted`` / ``failed``.
"""

from __future__ import annotations

import os
import sqlite3
from collections.abc import Iterator
from contextlib import closing, contextmanager
from dataclasses import dataclass
from datetime import datetime
from pathlib import Path

from daq.errors import RunFormatError, SourceError
from daq.runs import CLOSING_STATUSES, DESCRIPTION_FILE, read_run_info, utc_text

__all__ = ["CATALOGUE_SCHEMA_VERSION", "CATALOGUE_STATUSES", "Catalogue", "CatalogueEntry"]

#: Schema version this software writes and reads (``meta`` table, key ``schema_version``).
CATALOGUE_SCHEMA_VERSION = 1
#: Values of the ``status`` column.
CATALOGUE_STATUSES: tuple[str, ...] = ("open", *CLOSING_STATUSES)

_SCHEMA = """
CREATE TABLE meta (key TEXT PRIMARY KEY, value TEXT NOT NULL);
CREATE TABLE runs (
    folder TEXT PRIMARY KEY,
    run_id TEXT NOT NULL,
    started_utc TEXT NOT NULL,
    ended_utc TEXT,
    cell_name TEXT NOT NULL,
    status TEXT NOT NULL,
    samples INTEGER NOT NULL,
    sha256 TEXT,
    operator_note TEXT NOT NULL
);
CREATE INDEX runs_started ON runs (started_utc);
CREATE TABLE run_tags (
    folder TEXT NOT NULL REFERENCES runs (folder) ON DELETE CASCADE,
    tag TEXT NOT NULL,
    PRIMARY KEY (folder, tag)
);
"""


@dataclass(frozen=True)
class CatalogueEntry:
    """One run as the catalogue knows it.

    ``folder`` is absolute; times are ISO 8601 UTC text (``ended_utc`` None while open);
    ``samples`` is the number of whole sample records; ``sha256`` is the samples file
    digest from ``closing.json`` (None while open).
    """

    run_id: str
    folder: str
    started_utc: str
    ended_utc: str | None
    cell_name: str
    tags: tuple[str, ...]
    status: str
    samples: int
    sha256: str | None
    operator_note: str


def _normalise_utc(text: str) -> str:
    """Fixed-width UTC text (sorts in time order) from any ISO 8601 UTC text."""
    return utc_text(datetime.fromisoformat(text))


def _bound(name: str, value: datetime | str | None) -> str | None:
    if value is None:
        return None
    try:
        moment = datetime.fromisoformat(value) if isinstance(value, str) else value
        return utc_text(moment)
    except (TypeError, ValueError, RunFormatError):
        raise RunFormatError(
            f"{name} = {value!r}: give a timezone-aware datetime or ISO 8601 text with a "
            "zone, e.g. '2026-12-01T00:00:00Z'"
        ) from None


class Catalogue:
    """Index of run folders in the SQLite file ``path`` (created when missing).

    Raises RunFormatError when the file is not a catalogue or has an unknown schema
    version (delete it and :meth:`scan` again to rebuild it).
    """

    def __init__(self, path: str | os.PathLike[str]) -> None:
        self._path = Path(path)
        #: (folder, reason) of every folder the last :meth:`scan` could not index.
        self.skipped: list[tuple[str, str]] = []
        with self._connect() as con:
            tables = {
                row[0] for row in con.execute("SELECT name FROM sqlite_master WHERE type='table'")
            }
            if not tables:
                con.executescript(_SCHEMA)
                con.execute(
                    "INSERT INTO meta (key, value) VALUES ('schema_version', ?)",
                    (str(CATALOGUE_SCHEMA_VERSION),),
                )
                return
            row = (
                con.execute("SELECT value FROM meta WHERE key = 'schema_version'").fetchone()
                if "meta" in tables
                else None
            )
            if row is None:
                raise RunFormatError(
                    f"{self._path}: not a forcelens run catalogue (no schema_version in a meta "
                    "table); choose another file"
                )
            if row[0] != str(CATALOGUE_SCHEMA_VERSION):
                raise RunFormatError(
                    f"{self._path}: catalogue schema version {row[0]!r} is unknown; this "
                    f"software reads version {CATALOGUE_SCHEMA_VERSION} only. The catalogue "
                    "is only an index: delete the file and scan the run folders again"
                )

    @property
    def path(self) -> Path:
        """The SQLite file."""
        return self._path

    @contextmanager
    def _connect(self) -> Iterator[sqlite3.Connection]:
        """One connection, committed on success, rolled back on error, always closed."""
        try:
            with closing(sqlite3.connect(self._path)) as con:
                con.execute("PRAGMA foreign_keys = ON")
                with con:
                    yield con
        except sqlite3.OperationalError as exc:  # cannot open, locked, read-only...
            raise SourceError(f"{self._path}: cannot use the catalogue ({exc})") from exc
        except sqlite3.DatabaseError as exc:  # e.g. "file is not a database"
            raise RunFormatError(f"{self._path}: not a usable SQLite catalogue ({exc})") from exc

    def check_writable(self) -> None:
        """Raise SourceError when the catalogue cannot be written (a read-only archive).

        The probe is a real write that changes nothing (the schema version set to itself),
        so it fails exactly when indexing would: a read-only file, folder or file system.
        """
        with self._connect() as con:
            con.execute("UPDATE meta SET value = value WHERE key = 'schema_version'")

    # ----------------------------------------------------------------------- writing

    def upsert(self, run_folder: str | os.PathLike[str]) -> CatalogueEntry:
        """Add or refresh the entry of one run folder; return it.

        Reads ``run.json`` and ``closing.json`` only. Raises RunFormatError when the
        folder is not a readable run.
        """
        entry = self._entry_from_folder(run_folder)
        with self._connect() as con:
            self._store(con, entry)
        return entry

    def scan(self, root: str | os.PathLike[str]) -> int:
        """Index every run folder below ``root``; return how many were added or refreshed.

        A run folder is any folder holding ``run.json``; folders below a run folder are not
        searched. Entries whose folder lies below ``root`` but no longer holds a readable
        run are removed. Folders that could not be read are listed in :attr:`skipped`.
        """
        base = Path(root).resolve()
        if not base.is_dir():
            raise SourceError(f"{base}: not a folder; pass the folder that holds the runs")
        self.skipped = []
        entries: list[CatalogueEntry] = []
        for current, subdirs, files in os.walk(base):
            if DESCRIPTION_FILE in files:
                subdirs.clear()
                try:
                    entries.append(self._entry_from_folder(current))
                except RunFormatError as exc:
                    self.skipped.append((current, str(exc)))
            else:
                subdirs[:] = sorted(d for d in subdirs if not d.startswith("."))
        found = {entry.folder for entry in entries}
        with self._connect() as con:
            for (folder,) in con.execute("SELECT folder FROM runs").fetchall():
                if Path(folder).is_relative_to(base) and folder not in found:
                    con.execute("DELETE FROM runs WHERE folder = ?", (folder,))
            for entry in entries:
                self._store(con, entry)
        return len(entries)

    def remove(self, run_folder: str | os.PathLike[str]) -> bool:
        """Forget one run folder (the folder itself is untouched); True if it was listed."""
        folder = str(Path(run_folder).resolve())
        with self._connect() as con:
            return con.execute("DELETE FROM runs WHERE folder = ?", (folder,)).rowcount > 0

    # ----------------------------------------------------------------------- reading

    def query(
        self,
        *,
        since: datetime | str | None = None,
        until: datetime | str | None = None,
        cell: str | None = None,
        tag: str | None = None,
        status: str | None = None,
    ) -> list[CatalogueEntry]:
        """Runs matching every given filter, ordered by start time.

        ``since <= started_utc < until`` (aware datetimes or ISO text with a zone);
        ``cell``: text the cell name contains, ``tag``: text one of the run's tags
        contains (both ignoring case); ``status`` one of ``open``, ``complete``,
        ``aborted``, ``failed``.
        """
        where: list[str] = []
        args: list[object] = []
        low, high = _bound("since", since), _bound("until", until)
        if low is not None:
            where.append("started_utc >= ?")
            args.append(low)
        if high is not None:
            where.append("started_utc < ?")
            args.append(high)
        if status is not None:
            if status not in CATALOGUE_STATUSES:
                raise RunFormatError(
                    f"status = {status!r}: must be one of {', '.join(CATALOGUE_STATUSES)}"
                )
            where.append("status = ?")
            args.append(status)
        sql = (
            "SELECT folder, run_id, started_utc, ended_utc, cell_name, status, samples, sha256, "
            "operator_note FROM runs"
        )
        if where:
            sql += " WHERE " + " AND ".join(where)
        sql += " ORDER BY started_utc, run_id, folder"
        with self._connect() as con:
            rows = con.execute(sql, args).fetchall()
            tags: dict[str, list[str]] = {}
            for folder, tag_text in con.execute("SELECT folder, tag FROM run_tags ORDER BY rowid"):
                tags.setdefault(folder, []).append(tag_text)
        found = [
            CatalogueEntry(
                run_id=run_id,
                folder=folder,
                started_utc=started,
                ended_utc=ended,
                cell_name=cell_name,
                tags=tuple(tags.get(folder, ())),
                status=state,
                samples=samples,
                sha256=digest,
                operator_note=note,
            )
            for folder, run_id, started, ended, cell_name, state, samples, digest, note in rows
        ]
        # text filters in Python: casefold() ignores case beyond ASCII, SQLite's LIKE does not
        if cell is not None:
            found = [e for e in found if cell.casefold() in e.cell_name.casefold()]
        if tag is not None:
            found = [e for e in found if any(tag.casefold() in t.casefold() for t in e.tags)]
        return found

    # ----------------------------------------------------------------------- internals

    @staticmethod
    def _entry_from_folder(run_folder: str | os.PathLike[str]) -> CatalogueEntry:
        info = read_run_info(run_folder)
        desc = info.description
        closing_data = info.closing
        if closing_data is None:
            ended, status, digest = None, "open", None
            samples = info.records["samples"]
        else:
            ended = _normalise_utc(closing_data["ended_utc"])
            status = str(closing_data["status"])
            samples = int(closing_data["streams"]["samples"]["records"])
            digest = str(closing_data["streams"]["samples"]["sha256"])
        return CatalogueEntry(
            run_id=str(desc["run_id"]),
            folder=str(Path(run_folder).resolve()),
            started_utc=_normalise_utc(desc["started_utc"]),
            ended_utc=ended,
            cell_name=str(desc["cell_name"]),
            tags=tuple(dict.fromkeys(str(t) for t in desc["tags"])),
            status=status,
            samples=samples,
            sha256=digest,
            operator_note=str(desc["operator_note"]),
        )

    @staticmethod
    def _store(con: sqlite3.Connection, entry: CatalogueEntry) -> None:
        con.execute("DELETE FROM runs WHERE folder = ?", (entry.folder,))
        con.execute(
            "INSERT INTO runs (folder, run_id, started_utc, ended_utc, cell_name, status, "
            "samples, sha256, operator_note) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?)",
            (
                entry.folder,
                entry.run_id,
                entry.started_utc,
                entry.ended_utc,
                entry.cell_name,
                entry.status,
                entry.samples,
                entry.sha256,
                entry.operator_note,
            ),
        )
        con.executemany(
            "INSERT INTO run_tags (folder, tag) VALUES (?, ?)",
            [(entry.folder, tag) for tag in entry.tags],
        )
