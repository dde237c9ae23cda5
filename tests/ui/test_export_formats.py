"""``forcelens export --format mat|hdf5`` read back by the reference readers.

References outside the project: ``scipy.io.loadmat`` (the reader of MATLAB's own
version-5 format that SciPy documents as MATLAB/Octave compatible) and ``h5py`` (the
HDF5 library's Python binding). The run is recorded from the simulated cell (invented
data).
"""

from __future__ import annotations

from pathlib import Path

import h5py
import numpy as np
import pytest
import scipy.io

from daq.runs import read_run
from tests.ui.test_run_commands import _record
from ui.cli import main


@pytest.fixture(scope="module")
def folder(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return _record(tmp_path_factory.mktemp("runs"), note="export test", tare=False)


@pytest.mark.parametrize("stream", ["samples", "estimates"])
def test_mat_reads_back_in_scipy_loadmat(folder: Path, tmp_path: Path, stream: str) -> None:
    out = tmp_path / "run.mat"
    assert main(["export", str(folder), "--stream", stream, "--out", str(out)]) == 0
    run = read_run(folder)
    want = np.asarray(run.streams[stream])
    got = scipy.io.loadmat(out, squeeze_me=True, chars_as_strings=True)
    for name in want.dtype.names:
        assert got[name].dtype == want.dtype[name], name  # the recorded type, not double
        assert got[name].tobytes() == want[name].tobytes(), name  # bit for bit
    units = got["units"]
    assert units["displacement_m"].item() == "m"
    assert units["time_s" if stream == "estimates" else "device_time_s"].item() == "s"
    facts = got["run"]
    assert facts["run_id"].item() == run.run_id
    assert facts["stream"].item() == stream
    assert facts["profile_toml"].item().strip() == run.description["profile_toml"].strip()
    # a column vector in MATLAB: loadmat without squeezing gives shape (n, 1)
    raw = scipy.io.loadmat(out)
    assert raw["displacement_m"].shape == (want.size, 1)


@pytest.mark.parametrize("stream", ["samples", "estimates"])
def test_hdf5_reads_back_in_h5py_with_units_and_facts(
    folder: Path, tmp_path: Path, stream: str
) -> None:
    out = tmp_path / "run.h5"  # the format from the name's ending
    assert main(["export", str(folder), "--stream", stream, "--out", str(out)]) == 0
    run = read_run(folder)
    want = np.asarray(run.streams[stream])
    units = run.description["streams"][stream]["units"]
    with h5py.File(out, "r") as f:
        for name in want.dtype.names:
            assert f[name].dtype == want.dtype[name], name
            assert f[name][()].tobytes() == want[name].tobytes(), name
            assert f[name].attrs["unit"] == units[name]
        assert f.attrs["run_id"] == run.run_id
        assert f.attrs["started_utc"] == run.description["started_utc"]
        assert f.attrs["software_version"] == run.description["software_version"]
        assert f.attrs["stream"] == stream
        assert f.attrs["profile_toml"] == run.description["profile_toml"]
        assert f.attrs["closed"].startswith("yes")


def test_formats_are_refused_when_the_name_says_otherwise_and_never_overwrite(
    folder: Path, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    out = tmp_path / "run.csv"
    assert main(["export", str(folder), "--format", "mat", "--out", str(out)]) == 1
    err = capsys.readouterr().err
    assert "the ending says csv but --format is mat" in err and "Traceback" not in err
    assert not out.exists()
    out = tmp_path / "x.mat"
    out.write_bytes(b"keep")
    assert main(["export", str(folder), "--out", str(out)]) == 1
    assert "exists; give --force" in capsys.readouterr().err and out.read_bytes() == b"keep"
    assert main(["export", str(folder), "--out", str(out), "--force"]) == 0
    assert scipy.io.loadmat(out)["seq"].size == read_run(folder).samples.size
