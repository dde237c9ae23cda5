"""run.json keeps the versions of the libraries a bit-identical replay depends on, and
``audit`` names a change of them as a possible cause (issue 12, part 7). Runs are made
from the simulated cell (invented data)."""

from __future__ import annotations

import json
from pathlib import Path

import filterpy
import numba
import numpy as np
import pytest
import scipy

from daq.runs import read_run
from tests.ui.test_run_commands import _record
from ui.cli import main
from ui.pipeline import EstimationPipeline

RECORDINGS = Path(__file__).resolve().parents[2] / "recordings"


def test_run_json_records_the_library_versions(tmp_path: Path) -> None:
    folder = _record(tmp_path / "runs", tare=False)
    libraries = json.loads((folder / "run.json").read_text(encoding="utf-8"))["libraries"]
    # reference: each library's own __version__ (not the metadata the writer reads)
    assert libraries == {
        "numpy": np.__version__,
        "scipy": scipy.__version__,
        "numba": numba.__version__,
        "filterpy": filterpy.__version__,
    }
    assert read_run(folder).description["libraries"] == libraries


def test_a_run_recorded_before_the_versions_were_kept_still_reads() -> None:
    old = sorted(RECORDINGS.glob("*/run.json"))[0].parent
    assert "libraries" not in json.loads((old / "run.json").read_text(encoding="utf-8"))
    assert read_run(old).samples.size > 0


def test_audit_names_a_library_version_change_when_the_replay_differs(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch, capsys: pytest.CaptureFixture[str]
) -> None:
    import daq.runs.layout

    folder = _record(tmp_path / "runs", tare=False)
    recorded = read_run(folder).description["libraries"]["numpy"]
    installed = {**daq.runs.layout.library_versions(), "numpy": "9.9.9"}
    monkeypatch.setattr(daq.runs.layout, "library_versions", lambda: installed)
    assert main(["audit", str(folder)]) == 0  # the same numbers: no cause to name
    assert "library" not in capsys.readouterr().out
    original = EstimationPipeline._estimate

    def other_rounding(self: EstimationPipeline, part: np.ndarray) -> np.ndarray:
        est = original(self, part)
        est["force_n"][part["seq"] >= 500] += 1e-12  # stands for a NumPy that rounds otherwise
        return est

    monkeypatch.setattr(EstimationPipeline, "_estimate", other_rounding)
    assert main(["audit", str(folder)]) == 1
    out = capsys.readouterr().out
    assert "other library versions" in out and f"numpy 9.9.9 (run: {recorded})" in out
