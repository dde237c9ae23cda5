"""Every CSV writer of forcelens through every reader (issue 12, part 1: one dialect).

Writers: ``export`` (samples, estimates), ``replay --out`` and the demo's
``estimates.csv`` (`write_estimates_csv`), ``simulate --truth`` and the demo's
``truth.csv`` (`write_truth_csv`). Readers: the table reader (`read_csv_table`), the
displacement reader of ``replay``/``identify``/``tune`` (`read_displacement_csv`), the
load-programme reader of ``simulate --programme-csv`` (`load_programme_csv`). Each file is
also read after conversion to the plain dialect of other tools (semicolons, a byte-order
mark, CRLF). References outside the project: Python's ``csv`` module and ``float()``
parse the same text (exact numbers), and the arrays the files were written from.
The run is recorded from the simulated cell (invented data).
"""

from __future__ import annotations

import csv
from pathlib import Path

import numpy as np
import pytest

from daq.csv_table import read_csv_table
from daq.csvfile import read_displacement_csv
from daq.programme import load_programme_csv, parse_programme
from daq.runs import read_run
from daq.simulator import write_truth_csv
from tests.ui.test_run_commands import PROFILE, _record
from ui.cli import main
from ui.estimates_csv import write_estimates_csv
from ui.wiring import simulated_cell_for


@pytest.fixture(scope="module")
def written(tmp_path_factory: pytest.TempPathFactory) -> dict[str, tuple[Path, dict]]:
    """Each writer's file and the arrays it was written from (name → array)."""
    tmp = tmp_path_factory.mktemp("dialect")
    folder = _record(tmp / "runs", tare=False)
    run = read_run(folder)
    samples = np.asarray(run.samples)
    live = np.asarray(run.streams["estimates"])
    out: dict[str, tuple[Path, dict]] = {}
    path = tmp / "samples.csv"
    assert main(["export", str(folder), "--out", str(path)]) == 0
    out["export samples"] = (path, {n: samples[n] for n in samples.dtype.names})
    path = tmp / "estimates-export.csv"
    assert main(["export", str(folder), "--stream", "estimates", "--out", str(path)]) == 0
    out["export estimates"] = (path, {n: live[n] for n in live.dtype.names})
    path = tmp / "replay.csv"
    assert main(["replay", str(folder), "--out", str(path)]) == 0  # bit-identical to live
    out["replay --out"] = (path, {n: live[n] for n in live.dtype.names})
    path = tmp / "estimates.csv"
    write_estimates_csv(live, path)  # the demo's writer
    out["demo estimates.csv"] = (path, {n: live[n] for n in live.dtype.names})
    truth = simulated_cell_for(PROFILE, seed=2).generate(parse_programme("hold 0.1 0; hold 0.1 9"))
    path = tmp / "truth.csv"
    write_truth_csv(truth, path)  # simulate --truth and the demo's truth.csv
    out["truth.csv"] = (
        path,
        {
            "time_s": truth.time_s,
            "force_n": truth.true_force_n,
            "displacement_m": truth.true_displacement_m,
        },
    )
    return out


def _foreign(path: Path, tmp_path: Path) -> Path:
    """The same file as a spreadsheet elsewhere might save it: BOM, CRLF, semicolons."""
    text = path.read_text(encoding="utf-8").replace(",", ";").replace("\n", "\r\n")
    other = tmp_path / f"foreign-{path.name}"
    other.write_bytes(b"\xef\xbb\xbf" + text.encode("utf-8"))
    return other


WRITERS = ["export samples", "export estimates", "replay --out", "demo estimates.csv", "truth.csv"]


@pytest.mark.parametrize("foreign", [False, True], ids=["as written", "bom-crlf-semicolons"])
@pytest.mark.parametrize("writer", WRITERS)
def test_every_writer_through_every_reader(
    written: dict[str, tuple[Path, dict]], writer: str, foreign: bool, tmp_path: Path
) -> None:
    path, source = written[writer]
    lines = path.read_text(encoding="utf-8").splitlines()
    # the dialect: '# forcelens ...' first, '#' lines, then 'name [unit]' for every column
    assert lines[0].startswith("# forcelens ")
    header = next(line for line in lines if not line.startswith("#"))
    assert all(c.endswith("]") and " [" in c for c in header.split(","))
    # reference: Python's csv module and float() on the text give the source exactly
    rows = list(csv.reader(line for line in lines if not line.startswith("#")))
    names = [c.split(" [")[0] for c in rows[0]]
    assert names == list(source)
    for i, name in enumerate(names):
        np.testing.assert_array_equal(
            np.array([float(r[i]) for r in rows[1:]]), np.asarray(source[name], dtype=float)
        )
    if foreign:
        path = _foreign(path, tmp_path)
    # the table reader: every column, byte-exact
    table = read_csv_table(path)
    assert list(table.names) == names
    for name in names:
        got, want = table.columns[name], np.asarray(source[name], dtype=np.float64)
        assert got.tobytes() == want.tobytes() or np.array_equal(got, want, equal_nan=True)
    # the displacement reader (replay, identify, tune): every file has time and displacement
    t, x = read_displacement_csv(path)
    time_name = "time_s" if "time_s" in source else "device_time_s"
    assert t.tobytes() == np.asarray(source[time_name], dtype=np.float64).tobytes()
    assert x.tobytes() == np.asarray(source["displacement_m"], dtype=np.float64).tobytes()
    # the load-programme reader: every file with force against a time from 0
    if "force_n" in source:  # every stream here starts at t = 0 (a programme must)
        table_points = load_programme_csv(path).segments[0]
        assert table_points.time_s.tobytes() == np.asarray(source[time_name]).tobytes()
        assert table_points.force_n.tobytes() == np.asarray(source["force_n"]).tobytes()
