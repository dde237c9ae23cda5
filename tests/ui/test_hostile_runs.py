"""Run folders and profiles that were damaged or planted: each refused at once with one
line naming the file (issue 15, "readers trust nothing"). The runs are invented,
recorded in-process as ``forcelens live --record`` would."""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import pytest

from daq.errors import RunFormatError
from daq.runs import read_run, read_run_info
from estimator.errors import ProfileError
from estimator.profile import load_profile
from tests.ui.test_run_commands import _record
from ui.cli import main


@pytest.fixture()
def run_folder(tmp_path: Path) -> Path:
    return _record(tmp_path / "runs")


def test_a_fifo_in_place_of_run_json_does_not_block(run_folder: Path) -> None:
    # Formerly verify, replay and export waited forever. In a child process, so that a
    # regression fails by its timeout instead of hanging the suite.
    (run_folder / "run.json").unlink()
    os.mkfifo(run_folder / "run.json")
    code = f"from ui.cli import main; raise SystemExit(main(['verify', {str(run_folder)!r}]))"
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=60)
    assert proc.returncode == 1
    said = proc.stdout + proc.stderr
    assert "run.json: not a regular file (a FIFO)" in said and "Traceback" not in said


def test_an_event_log_linked_to_dev_zero_is_refused(run_folder: Path, capsys) -> None:
    # Formerly read until 2.7 GB and a MemoryError.
    (run_folder / "events.jsonl").unlink()
    (run_folder / "events.jsonl").symlink_to("/dev/zero")
    with pytest.raises(RunFormatError, match="outside the run folder"):
        read_run(run_folder)
    assert main(["replay", str(run_folder)]) == 1
    assert "events.jsonl" in capsys.readouterr().err


def test_a_stream_linked_out_of_the_folder_is_refused(run_folder: Path, tmp_path) -> None:
    outside = tmp_path / "elsewhere.bin"
    (run_folder / "samples.bin").rename(outside)
    (run_folder / "samples.bin").symlink_to(outside)
    with pytest.raises(RunFormatError, match=r"samples\.bin: a symbolic link to .* outside"):
        read_run_info(run_folder)


def test_deeply_nested_json_is_refused_in_one_line(run_folder: Path, capsys) -> None:
    # Formerly a RecursionError traceback.
    (run_folder / "run.json").write_text("[" * 100_000 + "]" * 100_000, encoding="utf-8")
    with pytest.raises(RunFormatError, match="nested too deeply"):
        read_run_info(run_folder)
    assert main(["export", str(run_folder)]) == 1
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "nested too deeply" in err


def test_an_oversized_description_is_refused(run_folder: Path) -> None:
    path = run_folder / "run.json"
    with path.open("ab") as fh:
        fh.truncate(17 * 2**20)
    with pytest.raises(RunFormatError, match="is at most 16777216 bytes"):
        read_run_info(run_folder)


def test_hostile_profiles_are_refused(tmp_path: Path) -> None:
    deep = tmp_path / "deep.toml"
    deep.write_text("x = " + "[" * 100_000 + "]" * 100_000 + "\n", encoding="utf-8")
    with pytest.raises(ProfileError, match="nested too deeply"):
        load_profile(deep)
    fifo = tmp_path / "fifo.toml"
    os.mkfifo(fifo)
    with pytest.raises(ProfileError, match="not a regular file"):
        load_profile(fifo)
    big = tmp_path / "big.toml"
    with big.open("wb") as fh:
        fh.truncate(2 * 2**20)
    with pytest.raises(ProfileError, match="a profile is at most"):
        load_profile(big)


def _edit_json(path: Path, change) -> None:
    import json

    data = json.loads(path.read_text(encoding="utf-8"))
    change(data)
    path.write_text(json.dumps(data), encoding="utf-8")


def test_a_peeled_seal_fails_verify(run_folder: Path, capsys) -> None:
    # Issue 15: edit the profile copy in run.json and delete the matching hash from
    # closing.json: verify said OK and report used the altered profile.
    assert main(["verify", str(run_folder)]) == 0
    capsys.readouterr()

    def stiffer(d: dict) -> None:
        d["profile_toml"] = d["profile_toml"].replace(
            "stiffness_n_per_m = ", "stiffness_n_per_m = 1"
        )

    _edit_json(run_folder / "run.json", stiffer)
    _edit_json(run_folder / "closing.json", lambda d: d.pop("description_sha256"))
    assert main(["verify", str(run_folder)]) == 1
    said = capsys.readouterr()
    assert "description_sha256" in said.out + said.err
    assert main(["report", str(run_folder), "--out", str(run_folder.parent / "rep")]) == 1
    assert "description_sha256" in capsys.readouterr().err


def test_an_injected_event_with_its_hash_removed_fails(run_folder: Path, capsys) -> None:
    # The same with a zero event added to events.jsonl and the events key deleted.
    with (run_folder / "events.jsonl").open("a", encoding="utf-8") as fh:
        fh.write('{"kind": "tare", "seq": 5, "note": "injected"}\n')
    _edit_json(run_folder / "closing.json", lambda d: d.pop("events"))
    with pytest.raises(RunFormatError, match="key 'events' is missing"):
        read_run(run_folder)
    _edit_json(run_folder / "closing.json", lambda d: d.update(note="x"))
    with pytest.raises(RunFormatError, match="unknown key"):
        read_run(run_folder)
