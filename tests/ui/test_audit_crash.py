"""`audit` of a run that crashed tells "not closed, data intact up to the last flush" from
"data changed" (issue 15). Runs recorded here by the built-in simulated cell (invented
data); a crash is emulated by removing the closing record."""

from __future__ import annotations

import shutil
from pathlib import Path

import pytest

from daq.samples import SAMPLE_DTYPE
from tests.fuzz.harness import run_cli


@pytest.fixture(scope="module")
def recorded(tmp_path_factory: pytest.TempPathFactory) -> Path:
    root = tmp_path_factory.mktemp("runs")
    outcome = run_cli(
        ["live", "--sim-once", "--sim-programme", "hold 0.5 0; hold 1.0 40; hold 0.5 0",
         "--record", str(root), "--quiet", "--note", "invented test run"]
    )  # fmt: skip
    assert outcome.status == 0, outcome.stderr
    (run,) = [p for p in root.iterdir() if (p / "run.json").is_file()]
    return run


def _crashed(recorded: Path, tmp_path: Path) -> Path:
    folder = tmp_path / "run"
    shutil.copytree(recorded, folder)
    (folder / "closing.json").unlink()
    return folder


def test_an_untouched_crashed_run_is_intact_up_to_the_last_flush(
    recorded: Path, tmp_path: Path
) -> None:
    outcome = run_cli(["audit", str(_crashed(recorded, tmp_path))])
    assert outcome.status == 1  # not closed is still a difference
    assert "data intact up to the last flush" in outcome.stdout
    assert "recorded data changed" not in outcome.stdout + outcome.stderr
    assert outcome.stdout.count("DIFFERENCE") == 1 and "not closed" in outcome.stdout


def test_a_crashed_run_cut_short_is_data_lost(recorded: Path, tmp_path: Path) -> None:
    folder = _crashed(recorded, tmp_path)
    samples = folder / "samples.bin"
    size = samples.stat().st_size
    with open(samples, "r+b") as fh:
        fh.truncate(size // 2 - (size // 2) % SAMPLE_DTYPE.itemsize)
    outcome = run_cli(["audit", str(folder)])
    assert outcome.status == 1
    assert "data lost" in outcome.stdout
    assert "data intact" not in outcome.stdout
