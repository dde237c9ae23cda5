"""Tests of daq.calsheet: the calibration sheet format of docs/calibration-sheet.md.

The expected values are the numbers written into each sheet; the SHA-256 is checked
against `hashlib` (FIPS 180-4 as implemented by Python).
"""

from __future__ import annotations

import csv
import hashlib
import io
import re
from pathlib import Path

import numpy as np
import pytest

from daq.calsheet import (
    CalibrationSheet,
    CalibrationSheetError,
    parse_calibration_sheet,
    read_calibration_sheet,
)
from daq.errors import FramingError, SourceError

DOC = Path(__file__).resolve().parents[2] / "docs" / "calibration-sheet.md"

HEADER = "series,direction,position,force_n,reading_mm\n"
GOOD_BODY = (
    "1,up,0,0,0.010\n"  # line 2
    "1,up,0,10,0.510\n"  # line 3
    "1,up,0,20,1.010\n"  # line 4
    "1,down,0,10,0.512\n"  # line 5
    "1,down,0,0,0.011\n"  # line 6
    "2,up,120,0,0.000\n"  # line 7
    "2,up,120,10,0.501\n"  # line 8
    "2,up,120,20,1.002\n"  # line 9
)


def _parse(text: str, **kwargs: object) -> CalibrationSheet:
    return parse_calibration_sheet(text.encode("utf-8"), name="bench.csv", **kwargs)


# ---------------------------------------------------------------------------- good


def test_documented_example_reads() -> None:
    # The invented example of docs/calibration-sheet.md must stay valid.
    block = re.search(
        r"<!-- example-begin -->\s*```csv\n(.*?)```\s*<!-- example-end -->",
        DOC.read_text(encoding="utf-8"),
        re.S,
    )
    assert block is not None
    sheet = parse_calibration_sheet(block.group(1).encode(), name="example.csv")
    assert sheet.series_labels == ("1", "2", "3", "4")
    assert sheet.load_column == "mass_kg"
    assert sheet.reading_column == "reading_mm"
    assert sheet.load.size == 24
    assert int(np.count_nonzero(sheet.is_zero)) == 8
    assert sheet.warnings == ()


def test_round_trip_of_seeded_rows() -> None:
    rng = np.random.default_rng(17)
    rows = []
    for s, pos in (("A", "0"), ("B", "0"), ("C", "120")):
        rows.append((s, "up", pos, 0.0, rng.normal(0.0, 1e-3)))
        for m in (1.0, 2.5, 5.0):
            rows.append((s, "up", pos, m, rng.uniform(0.0, 2.0)))
        rows.append((s, "down", pos, 2.5, rng.uniform(0.0, 2.0)))
        rows.append((s, "down", pos, 0.0, rng.normal(0.0, 1e-3)))
    buf = io.StringIO()
    buf.write("# written by the test\n\n")
    writer = csv.writer(buf, lineterminator="\n")
    # Mixed-case header, another column order and an ignored note column.
    writer.writerow(["Reading_MM", "Series", "note", "Direction", "Position", "Mass_kg"])
    for s, d, p, m, r in rows:
        writer.writerow([repr(r), s, "a, quoted note", d, p, repr(m)])
    data = buf.getvalue().encode("utf-8")
    sheet = parse_calibration_sheet(data, name="rt.csv")
    assert sheet.sha256 == hashlib.sha256(data).hexdigest()
    assert sheet.series == tuple(r[0] for r in rows)
    assert sheet.direction == tuple(r[1] for r in rows)
    assert sheet.position == tuple(r[2] for r in rows)
    assert sheet.load.tolist() == [r[3] for r in rows]  # repr round-trips a float exactly
    # mm → m is one multiplication by 1e-3: at most one rounding, 2e-16 relative.
    assert sheet.reading_m == pytest.approx([r[4] * 1e-3 for r in rows], rel=2e-16, abs=0)
    # Two comment/blank lines, then the header on line 3: rows start at line 4.
    assert sheet.line.tolist() == list(range(4, 4 + len(rows)))
    assert sheet.row_labels[0] == "rt.csv:4"
    with pytest.raises(ValueError):
        sheet.load[0] = 1.0  # read-only


@pytest.mark.parametrize(
    ("column", "value", "kwargs", "metres"),
    [
        ("reading_m", "0.0012", {}, 0.0012),
        ("reading_mm", "1.2", {}, 1.2e-3),
        ("reading_um", "1200", {}, 1.2e-3),
        ("reading_counts", "48000", {"metres_per_count": 2.5e-8}, 48000 * 2.5e-8),
        ("reading_counts", "-48000", {"metres_per_count": -2.5e-8}, 48000 * 2.5e-8),
    ],
)
def test_reading_units(column: str, value: str, kwargs: dict, metres: float) -> None:
    text = f"series,direction,position,force_n,{column}\n1,up,0,0,0\n1,up,0,5,{value}\n"
    sheet = _parse(text, **kwargs)
    # One multiplication by the unit factor: 1 ulp relative.
    assert sheet.reading_m[1] == pytest.approx(metres, rel=3e-16)
    assert sheet.reading_column == column


def test_utf8_bom_and_spaces_are_accepted() -> None:
    text = "\ufeff series , direction , position , mass_kg , reading_um \n 1 , UP , 0 , 0 , 3 \n"
    text += "1,up,0,2,103\n   # indented comment\n"
    sheet = _parse(text)
    assert sheet.direction == ("up", "up")
    assert sheet.reading_m.tolist() == pytest.approx([3e-6, 103e-6], rel=3e-16)


def test_suspect_metres_warns_but_reads() -> None:
    # 0.51 "m" of deflection on a force cell: almost surely millimetres (common practice).
    text = "series,direction,position,force_n,reading_m\n1,up,0,0,0.01\n1,up,0,10,0.51\n"
    sheet = _parse(text)
    assert len(sheet.warnings) == 1
    assert "reading_mm" in sheet.warnings[0] and "bench.csv" in sheet.warnings[0]
    assert sheet.reading_m[1] == 0.51


def test_read_from_file_and_missing_file(tmp_path: Path) -> None:
    path = tmp_path / "sheet.csv"
    data = (HEADER + GOOD_BODY).encode()
    path.write_bytes(data)
    sheet = read_calibration_sheet(path)
    assert sheet.path == str(path)
    assert sheet.sha256 == hashlib.sha256(data).hexdigest()
    assert sheet.line.tolist() == list(range(2, 10))
    with pytest.raises(SourceError, match="cannot read"):
        read_calibration_sheet(tmp_path / "absent.csv")


def test_sheet_feeds_the_estimator() -> None:
    # Glue as the command will do it (tests may import both packages).
    from estimator.calibration import CalibrationSet, calibrate_static, forces_from_sheet

    sheet = _parse(HEADER + GOOD_BODY + "2,down,120,0,0.001\n")
    forces = forces_from_sheet(sheet.load, sheet.load_column)
    cal = CalibrationSet.from_rows(
        sheet.series,
        sheet.direction,
        sheet.position,
        forces,
        sheet.reading_m,
        row_labels=sheet.row_labels,
    )
    # Series 1: zero before 0.010 mm, deflections 0.500 and 1.000 mm up, 0.502 mm down.
    assert cal.deflection_m[:3] == pytest.approx([0.5e-3, 1.0e-3, 0.502e-3], abs=1e-15)
    result = calibrate_static(cal, resolution_m=1e-7, data_sha256=sheet.sha256)
    assert result.data_sha256 == sheet.sha256


# ----------------------------------------------------------------------------- bad

BAD = [
    # (sheet text, line, column, value, words in the message)
    ("series,direction,mass_kg,reading_mm\n1,up,0,0\n", 1, "position", None, "missing"),
    (
        "series,direction,position,mass_kg,force_n,reading_mm\n1,up,0,0,0,0\n",
        1,
        None,
        None,
        "load columns mass_kg, force_n;",
    ),
    ("series,direction,position,reading_mm\n1,up,0,0\n", 1, None, None, "no load column"),
    (
        "series,direction,position,force_n,reading_mm,reading_um\n1,up,0,0,0,0\n",
        1,
        None,
        None,
        "reading columns reading_mm, reading_um;",
    ),
    (
        "series,direction,position,force_n,reading_in\n1,up,0,0,0\n",
        1,
        None,
        None,
        "no reading column",
    ),
    ("series,series,direction,position,force_n,reading_mm\n", 1, "series", None, "twice"),
    (HEADER + "1,upward,0,0,0\n", 2, "direction", "upward", "'up'"),
    (HEADER + "1,up,0,0,0\n1,up,0,ten,0.5\n", 3, "force_n", "ten", "finite number"),
    (HEADER + "1,up,0,0,0\n1,up,0,10,0.5mm\n", 3, "reading_mm", "0.5mm", "finite number"),
    (HEADER + "1,up,0,0,0\n1,up,0,10,nan\n", 3, "reading_mm", "nan", "finite number"),
    (HEADER + "1,up,0,0,0\n1,up,0,10,\n", 3, "reading_mm", "", "finite number"),
    (HEADER + "1,up,0,0,0\n1,up,0,-10,0.5\n", 3, "force_n", "-10", "negative"),
    (HEADER + "1,up,0,0,0\n1,up,0,10\n", 3, None, None, "4 fields"),
    (HEADER + "1,up,,0,0\n", 2, "position", "", "empty"),
    (HEADER + "1,up,0,10,0.5\n1,up,0,20,1.0\n", 2, "force_n", "10", "no zero reading before"),
    (HEADER + GOOD_BODY + "3,up,0,10,0.5\n", 10, "force_n", "10", "no zero reading before"),
    (HEADER + "1,up,0,0,0\n1,up,0,0,0\n", None, None, None, "no loaded row"),
    (HEADER + GOOD_BODY + "3,up,0,0,0\n", 10, "series", "3", "only zero readings"),
    (HEADER + GOOD_BODY + "1,up,0,30,1.5\n", 10, "series", "1", "keep the rows"),
    (HEADER + "1,up,0,0,0\n1,up,0,10,0.5\n1,up,120,20,1\n", 4, "position", "120", "one mount"),
    (HEADER + "1,up,0,0,0\n1,up,0,10,0.5\n1,up,0,0,0\n1,up,0,20,1\n", 4, "force_n", "0", "betw"),
    (HEADER + "1,up,0,0,0\n1,up,0,20,1\n1,up,0,10,0.5\n", 4, "force_n", "10", "must rise"),
    (HEADER + "1,up,0,0,0\n1,up,0,20,1\n1,up,0,20,1.1\n", 4, "force_n", "20", "must rise"),
    (HEADER + "1,up,0,0,0\n1,up,0,20,1\n1,down,0,30,1.5\n", 4, "force_n", "30", "must fall"),
    (
        HEADER + "1,up,0,0,0\n1,up,0,20,1\n1,down,0,10,.5\n1,down,0,15,.7\n",
        5,
        "force_n",
        "15",
        "must fall",
    ),
    (
        HEADER + "1,up,0,0,0\n1,up,0,20,1\n1,down,0,10,.5\n1,up,0,15,.7\n",
        5,
        "direction",
        "up",
        "up again",
    ),
    # issue 15 (found by the fuzzing suite): 1e308 made the fit overflow
    (HEADER + "1,up,0,0,1e308\n1,up,0,10,0.5\n", 2, "reading_mm", "1e308", "beyond any"),
    (HEADER + "1,up,0,0,0\n1,up,0,1e300,0.5\n", 3, "force_n", "1e300", "no deadweight"),
    (HEADER, 1, None, None, "no rows"),
    ("# only a comment\n\n", None, None, None, "no header"),
    ("", None, None, None, "no header"),
]


@pytest.mark.parametrize(("text", "line", "column", "value", "words"), BAD)
def test_bad_sheets_are_refused_with_place(
    text: str, line: int | None, column: str | None, value: str | None, words: str
) -> None:
    with pytest.raises(CalibrationSheetError) as info:
        _parse(text)
    err = info.value
    assert isinstance(err, FramingError) and isinstance(err, ValueError)
    assert err.path == "bench.csv"
    assert err.line == line
    assert err.column == column
    assert err.value == value
    message = str(err)
    assert message.startswith("bench.csv" if line is None else f"bench.csv:{line}: ")
    assert words in message
    if column is not None:
        assert repr(column) in message
    if value is not None:
        assert repr(value) in message


def test_not_utf8_is_refused() -> None:
    with pytest.raises(CalibrationSheetError, match="UTF-8"):
        parse_calibration_sheet(b"series,direction\n\xff\xfe\x00", name="bench.csv")


def test_counts_need_a_scale_and_only_counts_take_one() -> None:
    counts = "series,direction,position,force_n,reading_counts\n1,up,0,0,0\n1,up,0,5,100\n"
    with pytest.raises(CalibrationSheetError, match="metres_per_count") as info:
        _parse(counts)
    assert info.value.column == "reading_counts"
    for bad in (0.0, float("nan"), float("inf"), "fine", True):
        with pytest.raises(CalibrationSheetError, match="finite, non-zero"):
            _parse(counts, metres_per_count=bad)
    with pytest.raises(CalibrationSheetError, match="reading_counts' only"):
        _parse(HEADER + GOOD_BODY, metres_per_count=1e-8)
