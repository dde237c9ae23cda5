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


def test_a_run_recorded_before_the_versions_were_kept_still_reads(tmp_path: Path) -> None:
    # The demo run in recordings/ was re-recorded with both keys; an older run is made
    # from a copy of it by removing them (invented edit; the seal then no longer matches)
    import shutil

    old = tmp_path / "old"
    shutil.copytree(sorted(RECORDINGS.glob("*/run.json"))[0].parent, old)
    description = json.loads((old / "run.json").read_text(encoding="utf-8"))
    description.pop("libraries", None)
    description.pop("platform", None)
    (old / "run.json").write_text(json.dumps(description, indent=2), encoding="utf-8")
    data = read_run(old, check_hash=False)
    assert data.samples.size > 0 and "libraries" not in data.description
    from daq.runs.export import export_metadata

    meta = export_metadata(data, "samples")  # what every export states about the run
    assert meta["software_version"] and not {"numpy_version", "python_version"} & set(meta)


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


def test_run_json_records_the_interpreter_and_the_platform(tmp_path: Path) -> None:
    import os
    import platform
    import sys

    folder = _record(tmp_path / "runs", tare=False)
    facts = json.loads((folder / "run.json").read_text(encoding="utf-8"))["platform"]
    # references: the interpreter's own sys.version_info and sys.implementation, the
    # kernel's uname (POSIX) for the processor architecture
    assert facts["python"] == ".".join(map(str, sys.version_info[:3]))
    assert facts["implementation"].lower() == sys.implementation.name
    if hasattr(os, "uname"):
        assert facts["machine"] == os.uname().machine
    assert facts["system"] == platform.platform() and facts["machine"] in facts["system"]
    assert read_run(folder).description["platform"] == facts
    # ... and every export states them (CSV '# key: value' lines)
    out = tmp_path / "samples.csv"
    assert main(["export", str(folder), "--out", str(out)]) == 0
    head = [line for line in out.read_text(encoding="utf-8").splitlines() if line[:1] == "#"]
    assert f"# python_version: {facts['python']}" in head
    assert f"# platform: {facts['system']}" in head


def test_a_run_with_a_malformed_platform_is_refused_in_one_line(tmp_path: Path) -> None:
    from daq.errors import RunFormatError

    folder = _record(tmp_path / "runs", tare=False)
    description = json.loads((folder / "run.json").read_text(encoding="utf-8"))
    description["platform"] = {"python": 3.11}  # invented damage: a number, not text
    (folder / "run.json").write_text(json.dumps(description), encoding="utf-8")
    with pytest.raises(RunFormatError, match=r"platform = \{'python': 3.11\}: must map"):
        read_run(folder, check_hash=False)


def test_the_report_names_the_interpreter_and_platform_of_the_run(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    import sys

    folder = _record(tmp_path / "runs", tare=False)
    facts = json.loads((folder / "run.json").read_text(encoding="utf-8"))["platform"]
    assert main(["report", str(folder), "--out", str(tmp_path / "rep")]) == 0
    page = (tmp_path / "rep" / "report.html").read_text(encoding="utf-8")
    python = ".".join(map(str, sys.version_info[:3]))  # reference: sys.version_info
    assert f"Python {python} ({facts['implementation']}) on {facts['system']}" in page


def test_audit_names_another_python_when_the_replay_differs(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch, capsys: pytest.CaptureFixture[str]
) -> None:
    import daq.runs.layout

    folder = _record(tmp_path / "runs", tare=False)
    recorded = read_run(folder).description["platform"]["python"]
    other = {**daq.runs.layout.platform_facts(), "python": "9.9.9"}
    monkeypatch.setattr(daq.runs.layout, "platform_facts", lambda: other)
    assert main(["audit", str(folder)]) == 0  # the same numbers: no cause to name
    assert "Python" not in capsys.readouterr().out
    original = EstimationPipeline._estimate

    def other_rounding(self: EstimationPipeline, part: np.ndarray) -> np.ndarray:
        est = original(self, part)
        est["force_n"][part["seq"] >= 500] += 1e-12  # stands for another rounding
        return est

    monkeypatch.setattr(EstimationPipeline, "_estimate", other_rounding)
    assert main(["audit", str(folder)]) == 1
    out = capsys.readouterr().out
    assert "another interpreter or processor" in out
    assert f"Python 9.9.9 (run: {recorded})" in out
    assert "other library versions" not in out  # the libraries are the same
