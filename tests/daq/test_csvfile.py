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


# ------------------------------------------------------------------ read in chunks
# Any chunk size gives the same numbers and the same refusals at the same lines: a
# chunk of 1 character holds one line, so every row boundary is a chunk boundary.
# Reference: Python's csv module and float() on the same text.

MIXED = (
    "\ufeff# forcelens invented record\r\n# cell: invented\r\n\r\n"
    "Time_s [s];displacement_m [m];note\r\n"
    "0.0;1e-6;a\r\n0.0005;;b\r\n# a comment between rows\r\n\r\n"
    "0.001; 1.2e-6 ;c\r\n0.0015;nan;d\r\n0.002;-3.5e-7;e\r\n"
)


def _reference(text: str) -> tuple[list[float], list[float]]:
    """Times and displacements by Python's csv module and float() (empty = NaN)."""
    import csv
    import io

    rows = [
        r
        for r in csv.reader(io.StringIO(text.lstrip("\ufeff")), delimiter=";")
        if r and "".join(r).strip() and not r[0].lstrip().startswith("#")
    ][1:]
    return (
        [float(r[0]) for r in rows],
        [float(r[1]) if r[1].strip() else float("nan") for r in rows],
    )


@pytest.mark.parametrize("chunk_chars", [1, 5, 40, 1 << 22])
def test_any_chunk_size_reads_the_same_numbers(tmp_path: Path, chunk_chars: int) -> None:
    from daq.csvfile import iter_displacement_csv

    p = _file(tmp_path, MIXED)
    chunks = list(iter_displacement_csv(p, chunk_chars=chunk_chars))
    t = np.concatenate([c.time_s for c in chunks])
    x = np.concatenate([c.displacement_m for c in chunks])
    t_ref, x_ref = _reference(MIXED)
    assert t.tobytes() == np.array(t_ref).tobytes()
    assert x.tobytes() == np.array(x_ref).tobytes()  # NaN bit patterns included
    assert [c.first_row for c in chunks] == list(
        np.cumsum([0] + [c.time_s.size for c in chunks])[:-1]
    )


def _rows(n: int, bad: dict[int, str] | None = None) -> str:
    """``n`` invented rows at 1 kHz after a two-line head (data row i is line i + 3)."""
    lines = [f"{i / 1000!r},{1e-6 * (i % 7)!r}" for i in range(n)]
    for i, text in (bad or {}).items():
        lines[i] = text
    return "# invented\ntime_s,displacement_m\n" + "\n".join(lines) + "\n"


@pytest.mark.parametrize("chunk_chars", [1, 64, 1 << 22])
@pytest.mark.parametrize(
    ("bad", "line", "words"),
    [
        ({40: "0.039,1e-6"}, 43, "time_s 0.039 repeats that of line 42"),
        ({40: "0.01,1e-6"}, 43, "goes back from 0.039 (line 42) to 0.01"),
        ({40: "0.04,1e-6,9"}, 43, "has 3 fields; the header (line 2) has 2"),
        ({40: "0.04,abc"}, 43, "is not numbers in column displacement_m ('abc')"),
        ({40: ",1e-6"}, 43, "time_s must be a finite number, got"),
    ],
)
def test_refusals_name_the_same_line_whatever_the_chunk_size(
    tmp_path: Path, chunk_chars: int, bad: dict[int, str], line: int, words: str
) -> None:
    from daq.csvfile import iter_displacement_csv

    p = _file(tmp_path, _rows(100, bad))
    with pytest.raises(FramingError, match=re.escape(f"x.csv:{line}: ") + ".*" + re.escape(words)):
        for _ in iter_displacement_csv(p, chunk_chars=chunk_chars):
            pass


def test_a_file_that_is_not_utf8_is_named(tmp_path: Path) -> None:
    p = tmp_path / "x.csv"
    p.write_bytes(b"time_s,displacement_m\n0.0,1e-6\n0.001,\xff\xfe\n")
    with pytest.raises(SourceError, match=r"x\.csv: cannot read"):
        read_displacement_csv(p)


@pytest.mark.parametrize(
    ("rows", "line", "value"),
    [
        # found by hand after the long fuzz run (issue 15): a last time of 1.7e308 s made
        # the observer's sample interval overflow (exit 3); a first one of -1.7e308 s made
        # it say "-1.7e+308 does not come after -1.7e+308"
        ("0.0,1e-6\n0.0005,1e-6\n1.7e308,1e-6\n", 5, "1.7e+308"),
        ("-1.7e308,1e-6\n0.0005,1e-6\n0.001,1e-6\n", 3, "-1.7e+308"),
        ("0.0,1e-6\n1e12,1e-6\n", 4, "1000000000000.0"),
    ],
)
def test_a_time_beyond_any_record_is_refused_at_its_line(
    tmp_path: Path, rows: str, line: int, value: str
) -> None:
    p = _file(tmp_path, "# invented\ntime_s,displacement_m\n" + rows)
    with pytest.raises(
        FramingError, match=re.escape(f"x.csv:{line}: time_s = {value} s is 1e+12 s or more")
    ):
        read_displacement_csv(p)


def test_unix_times_are_times_of_a_record(tmp_path: Path) -> None:
    from datetime import UTC, datetime

    # reference: POSIX time of 2027-01-01T00:00:00Z as Python's datetime computes it
    start = datetime(2027, 1, 1, tzinfo=UTC).timestamp()
    p = _file(tmp_path, f"time_s,displacement_m\n{start!r},1e-6\n{start + 0.5!r},1e-6\n")
    t, _ = read_displacement_csv(p)
    np.testing.assert_array_equal(t, [start, start + 0.5])


@pytest.mark.parametrize(
    ("column", "value", "shown"),
    [("displacement_m", "1e308", "1e+308"), ("displacement_mm", "-1000", "-1000.0")],
)
def test_a_displacement_of_a_metre_is_refused_at_its_line(
    tmp_path: Path, column: str, value: str, shown: str
) -> None:
    # Found by the long fuzz run (issue 15): 'identify --test ringdown' on a record whose
    # first displacement is 1e308 m overflowed squaring it (exit 3 under the suite's
    # warnings-as-errors, Python warning lines on a terminal). The fuzz run's exact input:
    from tests.fuzz.test_fuzz_inputs import CSV

    if column == "displacement_m":
        data = CSV.replace(b"0.000000,2.500000000e-05\n", b"0.000000,1e308\n", 1)
        assert data != CSV
        line = 2
    else:  # invented: a metre in millimetres
        data = f"time_s,{column}\n0.0,0.025\n0.0005,{value}\n".encode()
        line = 3
    p = tmp_path / "x.csv"
    p.write_bytes(data)
    with pytest.raises(
        FramingError, match=re.escape(f"x.csv:{line}: {column} = {shown} is a metre or more")
    ):
        read_displacement_csv(p)


def test_a_decimal_comma_is_named_in_the_refusal(tmp_path: Path) -> None:
    # A spreadsheet in a decimal-comma locale writes "0,5;1,2e-6"; the refusal says what
    # the likely cause is instead of only "is not numbers".
    src = tmp_path / "comma.csv"
    src.write_text("time_s;displacement_m\n0,0;0,0\n0,5;1,2e-6\n", encoding="utf-8")
    with pytest.raises(FramingError, match=r":2: .*'0,0'\) \(a decimal comma\? write the decimal"):
        read_displacement_csv(src)
