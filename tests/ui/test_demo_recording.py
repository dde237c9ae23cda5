"""The demo runs kept in recordings/ (invented data) still verify and replay bit for bit.

This is the audit promise applied to the repository itself: a change that alters any
estimate of a recorded run fails here until the run is re-recorded on purpose.
"""

from __future__ import annotations

from pathlib import Path

import pytest

from daq.runs import read_run, verify_run
from ui.cli import main

RECORDINGS = Path(__file__).resolve().parents[2] / "recordings"
RUNS = sorted(p.parent for p in RECORDINGS.glob("*/run.json"))


def test_there_is_a_demo_run() -> None:
    assert RUNS, "recordings/ holds no run; see DEVELOPERS.md to record the demo run"


@pytest.mark.parametrize("folder", RUNS, ids=[p.name for p in RUNS])
def test_demo_run_verifies_and_replays_identically(
    folder: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    assert verify_run(folder).ok
    data = read_run(folder)
    assert "invented" in data.description["operator_note"]
    assert main(["replay", str(folder)]) == 0
    assert f"identical to the {data.samples.size} estimates computed live" in (
        capsys.readouterr().out
    )
