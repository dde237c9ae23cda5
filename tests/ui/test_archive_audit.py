"""``forcelens audit --all`` on a small archive of INVENTED runs (serially here; the same
jobs on Dask are compared in test_archive_parallel.py)."""

from __future__ import annotations

import shutil
from pathlib import Path

import pytest

from tests.ui.invented_archive import record_run
from ui.cli import main

SHORT = "hold 0.4 0; hold 0.5 30; hold 0.4 0"


def test_every_run_is_audited_and_damaged_ones_are_named_without_stopping_the_job(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    root = tmp_path / "runs"
    good = record_run(root, seed=31, programme=SHORT, tags=("invented", "static"))
    cut = record_run(root, seed=32, programme=SHORT)
    gone = record_run(root, seed=33, programme=SHORT)
    assert main(["runs", "--root", str(root)]) == 0  # all three catalogued
    capsys.readouterr()
    samples = cut / "samples.bin"
    samples.write_bytes(samples.read_bytes()[: 44 * 100])  # truncated after closing
    shutil.rmtree(gone)  # deleted after it was catalogued
    assert main(["audit", "--all", "--root", str(root), "--workers", "1"]) == 1
    out = capsys.readouterr().out
    assert f"{good.name}  " in out and "identical" in out
    assert "differs: truncated" in out
    assert f"{gone.resolve()}" in out and "missing: run" in out
    assert "3 run(s): 1 identical, 1 differ, 1 unreadable" in out
    # the filters select as in forcelens runs: only the run tagged "static"
    assert main(["audit", "--all", "--root", str(root), "--tag", "static", "--workers", "1"]) == 0
    out = capsys.readouterr().out
    assert "1 run(s): 1 identical, 0 differ, 0 unreadable" in out


@pytest.mark.parametrize(
    ("argv", "message"),
    [
        (["audit"], "give the RUN folder to audit, or --all"),
        (["audit", "somewhere", "--all"], "give a RUN or --all, not both"),
        (["audit", "--all", "--profile", "p.toml"], "--profile applies to one RUN"),
        (["audit", "somewhere", "--tag", "x"], "--tag: only with --all"),
        (["audit", "--all", "--root", "no/such/folder"], "--root no/such/folder: no such folder"),
    ],
)
def test_misused_options_are_refused_in_one_line(
    capsys: pytest.CaptureFixture[str], argv: list[str], message: str
) -> None:
    assert main(argv) == 1
    err = capsys.readouterr().err
    assert message in err and len(err.strip().splitlines()) == 1


def test_an_existing_table_is_replaced_only_with_force(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    root = tmp_path / "runs"
    record_run(root, seed=34, programme=SHORT)
    table = tmp_path / "table.csv"
    table.write_text("keep me\n")
    argv = ["audit", "--all", "--root", str(root), "--workers", "1", "--out", str(table)]
    assert main(argv) == 1
    assert "exists; give --force" in capsys.readouterr().err
    assert table.read_text() == "keep me\n"
    assert main([*argv, "--force"]) == 0
    assert "run_id,started_utc,folder,state,verdict,details" in table.read_text()
