"""`replay` and `report` refuse a run that cannot be verified unless told --unverified
(issue 15): here the recorded demo run (invented data) with its closing record removed."""

from __future__ import annotations

import shutil
from pathlib import Path

import pytest

from tests.fuzz.harness import demo_run, run_cli


@pytest.fixture
def unclosed(tmp_path: Path) -> Path:
    folder = tmp_path / "run"
    shutil.copytree(demo_run(), folder)
    (folder / "closing.json").unlink()
    return folder


@pytest.mark.parametrize("command", ["replay", "report"])
def test_an_unclosed_run_is_refused_naming_the_option(unclosed: Path, command: str) -> None:
    outcome = run_cli([command, str(unclosed)])
    assert outcome.status == 1
    assert "did not finish" in outcome.stderr and "--unverified" in outcome.stderr
    assert "Traceback" not in outcome.stderr


@pytest.mark.parametrize("command", ["replay", "report"])
def test_with_unverified_it_goes_on_and_says_so(unclosed: Path, command: str) -> None:
    outcome = run_cli([command, str(unclosed), "--unverified"])
    assert outcome.status == 0, outcome.stderr
    assert "UNVERIFIED run" in outcome.stdout


def test_a_closed_run_needs_no_option(tmp_path: Path) -> None:
    folder = tmp_path / "run"
    shutil.copytree(demo_run(), folder)
    outcome = run_cli(["replay", str(folder)])
    assert outcome.status == 0 and "UNVERIFIED" not in outcome.stdout
