"""A read-only archive: `runs`, `audit --all` and `impact` index it without writing to it.

An auditor is often given read access only. The runs are then indexed into a temporary
copy of the archive's catalogue, nothing under the root changes, and the user is told.
"""

from __future__ import annotations

import hashlib
import os
import shutil
import stat
from pathlib import Path

import pytest

from daq.catalogue import Catalogue
from daq.errors import SourceError
from tests.ui.test_run_commands import _record
from ui.cli import main
from ui.recording import CATALOGUE_NAME


def _tree_digest(root: Path) -> dict[str, str]:
    return {
        str(p.relative_to(root)): hashlib.sha256(p.read_bytes()).hexdigest()
        for p in sorted(root.rglob("*"))
        if p.is_file()
    }


def _make_read_only(root: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    """Take write permission away; as root (who writes anyway) the catalogue's write probe
    is made to fail the way SQLite fails on a read-only file."""
    for p in [root, *root.rglob("*")]:
        p.chmod(p.stat().st_mode & ~(stat.S_IWUSR | stat.S_IWGRP | stat.S_IWOTH))
    if os.geteuid() == 0:
        real = Catalogue.check_writable
        own = (root / CATALOGUE_NAME).resolve()

        def probe(self: Catalogue) -> None:
            if self.path.resolve() == own:
                raise SourceError(
                    f"{own}: cannot use the catalogue (attempt to write a readonly database)"
                )
            real(self)

        monkeypatch.setattr(Catalogue, "check_writable", probe)


def _make_writable(root: Path) -> None:
    for p in [root, *root.rglob("*")]:
        p.chmod(p.stat().st_mode | stat.S_IWUSR)


def test_runs_and_audit_all_on_a_read_only_archive_write_nothing(
    tmp_path: Path, capsys: pytest.CaptureFixture[str], monkeypatch: pytest.MonkeyPatch
) -> None:
    root = tmp_path / "archive"
    kept = _record(root, note="kept")
    gone = _record(root, note="gone")  # catalogued, then its folder is removed
    late = _record(root, note="late")  # recorded after the catalogue was copied away
    saved = tmp_path / "catalogue-before"
    shutil.copyfile(root / CATALOGUE_NAME, saved)
    shutil.rmtree(gone)
    # the catalogue as it was before `late`: the scan must add `late` itself
    Catalogue(saved).remove(late)
    shutil.copyfile(saved, root / CATALOGUE_NAME)
    before = _tree_digest(root)
    _make_read_only(root, monkeypatch)
    try:
        assert main(["runs", "--root", str(root)]) == 0
        out, err = capsys.readouterr()
        assert "archive cannot be written" in err and "temporary catalogue" in err
        assert "a copy of catalogue.sqlite" in err
        assert "2 run(s)" in out and kept.name in out and late.name in out
        assert f"missing: run {gone.name} was catalogued" in out
        assert main(["audit", "--all", "--root", str(root), "--workers", "1"]) == 1
        out, err = capsys.readouterr()
        assert "archive cannot be written" in err
        assert kept.name in out and late.name in out
        assert _tree_digest(root) == before  # nothing under the root was written
    finally:
        _make_writable(root)
