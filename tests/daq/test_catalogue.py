"""The SQLite index of run folders (daq/catalogue.py, docs/run-format.md).

Reference outside the project: Python's sqlite3 module, used directly to alter the file
the way another program (or a future version) could.
"""

from __future__ import annotations

import shutil
import sqlite3
from contextlib import closing
from datetime import UTC, datetime
from pathlib import Path

import numpy as np
import pytest

from daq.catalogue import CATALOGUE_SCHEMA_VERSION, Catalogue
from daq.errors import RunFormatError
from daq.runs import RunWriter
from daq.samples import empty_block


def make_run(
    root: Path,
    started: datetime,
    cell: str,
    tags: list[str],
    status: str | None,
    n: int,
) -> Path:
    """Write a run with ``n`` samples; ``status`` None leaves it open (no closing.json)."""
    writer = RunWriter.new(root, started_utc=started, cell_name=cell, tags=tags)
    block = empty_block(n)
    block["seq"] = np.arange(n)
    writer.append(block)
    writer.flush()
    writer.close(status or "complete")
    if status is None:
        (writer.folder / "closing.json").unlink()  # as a crashed recording leaves it
    return writer.folder


@pytest.fixture
def runs(tmp_path: Path) -> dict[str, Path]:
    root = tmp_path / "recordings"
    day = datetime(2026, 3, 1, 9, 0, tzinfo=UTC)
    return {
        "a": make_run(root, day, "cell-1", ["creep"], "complete", 10),
        "b": make_run(root, day.replace(day=2), "cell-2", ["step", "creep"], "aborted", 20),
        "c": make_run(root / "2026-03", day.replace(day=3), "cell-1", [], None, 30),
        "d": make_run(root / "2026-03", day.replace(day=4), "cell-1", ["step"], "failed", 40),
    }


def ids(entries) -> list[str]:
    return [Path(e.folder).name for e in entries]


def test_scan_and_filters(tmp_path: Path, runs: dict[str, Path]) -> None:
    cat = Catalogue(tmp_path / "catalogue.sqlite")
    assert cat.scan(tmp_path / "recordings") == 4
    everything = cat.query()
    assert ids(everything) == [runs[k].name for k in "abcd"]  # ordered by start time
    first = everything[0]
    assert first.folder == str(runs["a"].resolve()) and Path(first.folder).is_absolute()
    assert first.cell_name == "cell-1" and first.tags == ("creep",)
    assert first.status == "complete" and first.samples == 10
    assert first.started_utc == "2026-03-01T09:00:00.000000Z"
    assert first.sha256 is not None and first.ended_utc is not None
    open_run = everything[2]
    assert open_run.status == "open" and open_run.samples == 30
    assert open_run.sha256 is None and open_run.ended_utc is None

    since = datetime(2026, 3, 2, tzinfo=UTC)
    assert ids(cat.query(since=since)) == [runs[k].name for k in "bcd"]
    assert ids(cat.query(until="2026-03-03T09:00:00Z")) == [runs[k].name for k in "ab"]
    assert ids(cat.query(since=since, until=datetime(2026, 3, 4, tzinfo=UTC))) == [
        runs[k].name for k in "bc"
    ]
    assert ids(cat.query(cell="cell-1")) == [runs[k].name for k in "acd"]
    assert ids(cat.query(tag="creep")) == [runs[k].name for k in "ab"]
    assert ids(cat.query(tag="step", cell="cell-1")) == [runs["d"].name]
    assert ids(cat.query(status="open")) == [runs["c"].name]
    assert ids(cat.query(status="aborted")) == [runs["b"].name]
    assert cat.query(cell="no-such-cell") == []
    with pytest.raises(RunFormatError, match="status = 'done'"):
        cat.query(status="done")
    with pytest.raises(RunFormatError, match="since"):
        cat.query(since=datetime(2026, 3, 2))  # no time zone


def test_rescan_drops_vanished_folders_and_refreshes(tmp_path: Path, runs: dict) -> None:
    cat = Catalogue(tmp_path / "catalogue.sqlite")
    root = tmp_path / "recordings"
    cat.scan(root)
    shutil.rmtree(runs["b"])
    assert cat.scan(root) == 3
    assert ids(cat.query()) == [runs[k].name for k in "acd"]
    assert cat.query(tag="step") == [e for e in cat.query() if e.folder.endswith(runs["d"].name)]
    # A second catalogue object on the same file sees the same index (nothing cached).
    assert ids(Catalogue(cat.path).query()) == ids(cat.query())


def test_scan_keeps_entries_outside_the_root_and_skips_bad_folders(
    tmp_path: Path, runs: dict
) -> None:
    cat = Catalogue(tmp_path / "catalogue.sqlite")
    cat.upsert(runs["a"])
    bad = tmp_path / "recordings" / "2026-03" / "broken"
    bad.mkdir()
    (bad / "run.json").write_text("{not json", encoding="utf-8")
    assert cat.scan(tmp_path / "recordings" / "2026-03") == 2
    assert ids(cat.query()) == [runs[k].name for k in "acd"]  # "a" lies outside that root
    assert [Path(folder).name for folder, _ in cat.skipped] == ["broken"]
    assert "not valid JSON" in cat.skipped[0][1]
    with pytest.raises(RunFormatError, match=r"run\.json"):
        cat.upsert(bad)


def test_upsert_updates_an_entry(tmp_path: Path) -> None:
    cat = Catalogue(tmp_path / "catalogue.sqlite")
    writer = RunWriter(tmp_path / "run", cell_name="c", tags=["x"])
    writer.append(empty_block(5))
    writer.flush()
    assert cat.upsert(writer.folder).status == "open"
    assert [e.samples for e in cat.query()] == [5]
    writer.append(empty_block(2))
    writer.close("complete")
    entry = cat.upsert(writer.folder)
    assert entry.status == "complete" and entry.samples == 7
    assert cat.query() == [entry]
    assert cat.remove(writer.folder) is True and cat.query() == []


def test_unknown_schema_version_is_refused(tmp_path: Path) -> None:
    path = tmp_path / "catalogue.sqlite"
    Catalogue(path)
    with closing(sqlite3.connect(path)) as con, con:
        value = con.execute("SELECT value FROM meta WHERE key = 'schema_version'").fetchone()
        assert value == (str(CATALOGUE_SCHEMA_VERSION),)
        con.execute("UPDATE meta SET value = '99' WHERE key = 'schema_version'")
    with pytest.raises(RunFormatError) as info:
        Catalogue(path)
    message = str(info.value)
    assert "catalogue.sqlite" in message and "'99'" in message
    assert f"version {CATALOGUE_SCHEMA_VERSION} only" in message and "scan" in message


def test_files_that_are_not_catalogues_are_refused(tmp_path: Path) -> None:
    other = tmp_path / "other.sqlite"
    with closing(sqlite3.connect(other)) as con, con:
        con.execute("CREATE TABLE things (x)")
    with pytest.raises(RunFormatError, match="not a forcelens run catalogue"):
        Catalogue(other)
    text = tmp_path / "notes.txt"
    text.write_text("hello, this is not a database\n" * 100)
    with pytest.raises(RunFormatError, match=r"notes\.txt"):
        Catalogue(text)
