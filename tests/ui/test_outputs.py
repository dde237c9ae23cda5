"""Outputs never destroy inputs: every writing command against the cases that used to lose
data (a run's own files, the input itself, a device, an existing file), and the
`ui.outputs` rules and atomic replacement they rest on. Runs and sheets are invented."""

from __future__ import annotations

import hashlib
import os
import shutil
from pathlib import Path

import pytest

from daq.runs import read_run
from estimator.profile import default_demo_profile, save_profile
from tests.ui.test_run_commands import _record
from ui.cli import main
from ui.outputs import OutputRefusedError, claim_file, claim_folder, replacing

REPO = Path(__file__).resolve().parents[2]
SHEET = REPO / "docs" / "examples" / "invented-calibration-sheet.csv"


def _digest(folder: Path) -> dict[str, str]:
    """SHA-256 of every file under ``folder``, by relative path."""
    return {
        str(p.relative_to(folder)): hashlib.sha256(p.read_bytes()).hexdigest()
        for p in sorted(folder.rglob("*"))
        if p.is_file()
    }


@pytest.fixture()
def run_folder(tmp_path: Path) -> Path:
    return _record(tmp_path / "runs")


def _refused(argv: list[str], capsys: pytest.CaptureFixture[str], *words: str) -> None:
    assert main(argv) == 1
    err = capsys.readouterr().err
    assert err.count("\n") == 1, err  # one line, no traceback
    for w in words:
        assert w in err, err


def test_export_into_the_run_folder_is_refused(run_folder: Path, capsys) -> None:
    before = _digest(run_folder)
    argv = ["export", str(run_folder), "--out", str(run_folder / "samples.bin"), "--force"]
    _refused(argv, capsys, "inside the recorded run", "samples.bin")
    assert _digest(run_folder) == before


def test_replay_over_run_json_is_refused_and_the_run_stays_readable(run_folder, capsys) -> None:
    before = _digest(run_folder)
    argv = ["replay", str(run_folder), "--out", str(run_folder / "run.json"), "--force"]
    _refused(argv, capsys, "inside the recorded run")
    assert _digest(run_folder) == before
    assert read_run(run_folder).samples.size == 1200


def test_replay_of_a_csv_onto_itself_is_refused(tmp_path: Path, capsys) -> None:
    csv = tmp_path / "x.csv"
    csv.write_text("time_s,displacement_m\n0.0,1e-6\n0.0005,1.1e-6\n", encoding="utf-8")
    prof = tmp_path / "cell.toml"
    save_profile(default_demo_profile(), prof)
    before = csv.read_bytes()
    argv = ["replay", str(csv), "--profile", str(prof), "--out", str(csv), "--force"]
    _refused(argv, capsys, "is an input of this command")
    assert csv.read_bytes() == before
    # the same file under another name (a hard link) is the same input
    link = tmp_path / "y.csv"
    os.link(csv, link)
    argv = ["replay", str(csv), "--profile", str(prof), "--out", str(link), "--force"]
    _refused(argv, capsys, "is an input of this command")
    assert csv.read_bytes() == before


def test_a_device_is_not_an_output(run_folder: Path, capsys) -> None:
    # /dev/null: atomic replacement would have turned the device into a regular file
    argv = ["export", str(run_folder), "--out", os.devnull, "--force"]
    _refused(argv, capsys, "is a device")
    assert Path(os.devnull).is_char_device()


def test_fifo_and_symlink_are_refused(tmp_path: Path) -> None:
    fifo = tmp_path / "pipe"
    os.mkfifo(fifo)
    with pytest.raises(OutputRefusedError, match="is a FIFO"):
        claim_file(fifo, force=True)
    target = tmp_path / "real.csv"
    target.write_text("x", encoding="utf-8")
    (tmp_path / "link.csv").symlink_to(target)
    with pytest.raises(OutputRefusedError, match="symbolic link"):
        claim_file(tmp_path / "link.csv", force=True)
    with pytest.raises(OutputRefusedError, match="is a folder"):
        claim_file(tmp_path, force=True)


def test_an_existing_file_is_replaced_only_with_force(run_folder, tmp_path, capsys) -> None:
    out = tmp_path / "samples.csv"
    out.write_text("keep me", encoding="utf-8")
    _refused(["export", str(run_folder), "--out", str(out)], capsys, "exists; give --force")
    assert out.read_text(encoding="utf-8") == "keep me"
    assert main(["export", str(run_folder), "--out", str(out), "--force"]) == 0
    assert "replaced" in capsys.readouterr().out
    assert out.read_text(encoding="utf-8").startswith("#")


def test_identify_does_not_write_over_its_profile(run_folder: Path, tmp_path, capsys) -> None:
    prof = tmp_path / "cell.toml"
    save_profile(default_demo_profile(), prof)
    before = prof.read_bytes()
    argv = ["identify", str(run_folder), "--test", "step", "--profile", str(prof)]
    _refused([*argv, "--out", str(prof), "--force"], capsys, "is an input of this command")
    assert prof.read_bytes() == before


def test_calibrate_into_a_used_folder_needs_force(tmp_path: Path, capsys) -> None:
    out = tmp_path / "cal"
    argv = ["calibrate", str(SHEET), "--resolution-m", "1e-7", "--out", str(out)]
    argv += ["--latitude", "45", "--height-m", "100"]
    assert main(argv) == 0
    summary = (out / "summary.txt").read_bytes()
    capsys.readouterr()
    _refused(argv, capsys, "summary.txt: exists; give --force")
    assert (out / "summary.txt").read_bytes() == summary
    assert main([*argv, "--force"]) == 0
    assert "replaced" in capsys.readouterr().out


def test_claim_folder_refuses_a_run_folder_and_names_each_replaced_file(
    run_folder: Path, tmp_path: Path
) -> None:
    with pytest.raises(OutputRefusedError, match="inside the recorded run"):
        claim_folder(run_folder / "report", ["report.html"])
    out = tmp_path / "rep"
    out.mkdir()
    (out / "a.txt").write_text("1", encoding="utf-8")
    assert claim_folder(out, ["a.txt", "b.txt"], force=True) == [
        "replaced " + str(out / "a.txt") + " (1 bytes)"
    ]


def test_replacing_leaves_the_old_file_when_writing_fails(tmp_path: Path) -> None:
    target = tmp_path / "report.html"
    target.write_text("old", encoding="utf-8")
    with pytest.raises(RuntimeError), replacing(target) as tmp:
        tmp.write_text("half", encoding="utf-8")
        raise RuntimeError("disk full (simulated)")
    assert target.read_text(encoding="utf-8") == "old"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["report.html"]  # no leftovers
    with replacing(target) as tmp:
        tmp.write_text("new", encoding="utf-8")
    assert target.read_text(encoding="utf-8") == "new"


def test_demo_twice_into_one_folder_needs_force(tmp_path: Path, capsys) -> None:
    out = tmp_path / "demo"
    out.mkdir()
    (out / "summary.txt").write_text("an earlier demo", encoding="utf-8")
    argv = ["demo", "--out", str(out), "--no-plot", "--no-window", "--speed", "50"]
    _refused(argv, capsys, "summary.txt: exists; give --force")
    assert (out / "summary.txt").read_text(encoding="utf-8") == "an earlier demo"
    shutil.rmtree(out)


@pytest.mark.parametrize("command", ["export", "replay"])
def test_a_dash_for_the_output_is_refused_and_no_file_named_dash_appears(
    command: str, run_folder: Path, tmp_path: Path, monkeypatch, capsys
) -> None:
    """``--out -`` reads as standard output by Unix habit; forcelens writes files, so it
    says so instead of leaving a file named ``-`` behind."""
    monkeypatch.chdir(tmp_path)
    _refused([command, str(run_folder), "--out", "-"], capsys, "not to standard output")
    assert not (tmp_path / "-").exists()


def test_a_dash_for_an_output_folder_is_refused(tmp_path: Path) -> None:
    with pytest.raises(OutputRefusedError, match="not to standard output"):
        claim_folder("-", ["report.html"])
