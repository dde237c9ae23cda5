"""Plain displacement CSV files: what is read, and each malformed file refused with its
line named. The files are invented."""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pytest

from daq.csvfile import read_displacement_csv
from daq.errors import FramingError, SourceError

GOOD = "# invented\ntime_s,displacement_m\n0.0,1e-6\n0.0005,\n0.001,1.2e-6\n"


def _file(tmp_path: Path, text: str, name: str = "x.csv") -> Path:
    p = tmp_path / name
    p.write_bytes(text.encode("utf-8"))
    return p


def test_reads_times_metres_and_missing_samples(tmp_path: Path) -> None:
    t, x = read_displacement_csv(_file(tmp_path, GOOD))
    np.testing.assert_array_equal(t, [0.0, 0.0005, 0.001])
    assert x[0] == 1e-6 and np.isnan(x[1]) and x[2] == 1.2e-6


def test_a_bom_and_crlf_line_ends_are_read(tmp_path: Path) -> None:
    p = _file(tmp_path, "\ufeff" + GOOD.replace("\n", "\r\n"))
    t, _ = read_displacement_csv(p)
    assert t.size == 3


@pytest.mark.parametrize(
    ("rows", "line", "words"),
    [
        # reversed: the second data row (line 4) goes back
        ("0.001,1e-6\n0.0005,1e-6\n0.0,1e-6\n", 4, "goes back from 0.001 (line 3) to 0.0005"),
        # shuffled
        ("0.0,1e-6\n0.001,1e-6\n0.0005,1e-6\n", 5, "goes back from 0.001 (line 4) to 0.0005"),
        # a duplicated row
        ("0.0,1e-6\n0.0005,1e-6\n0.0005,1e-6\n", 5, "0.0005 repeats that of line 4"),
    ],
)
def test_time_that_does_not_increase_is_refused_at_its_line(
    tmp_path: Path, rows: str, line: int, words: str
) -> None:
    p = _file(tmp_path, "# invented\ntime_s,displacement_m\n" + rows)
    with pytest.raises(FramingError, match=re.escape(f"x.csv:{line}: ") + ".*" + re.escape(words)):
        read_displacement_csv(p)


def test_a_ragged_row_is_refused_at_its_line(tmp_path: Path) -> None:
    p = _file(tmp_path, "time_s,displacement_m\n0.0,1e-6\n0.0005,1e-6,7\n0.001,1e-6\n")
    with pytest.raises(
        FramingError, match=r"x.csv:3: .* has 3 fields; the header \(line 1\) has 2"
    ):
        read_displacement_csv(p)


def test_a_missing_file_is_named(tmp_path: Path) -> None:
    with pytest.raises(SourceError, match=r"nope\.csv: cannot read"):
        read_displacement_csv(tmp_path / "nope.csv")


def test_semicolons_bracketed_units_and_case_are_read(tmp_path: Path) -> None:
    text = "# invented\r\nTime_s [s];Displacement_um [um]\r\n0.0;1.5\r\n0.001;1.25\r\n"
    t, x = read_displacement_csv(_file(tmp_path, "\ufeff" + text))
    np.testing.assert_array_equal(t, [0.0, 0.001])
    np.testing.assert_allclose(x, [1.5e-6, 1.25e-6], rtol=1e-15)
