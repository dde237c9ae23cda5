"""Load programmes: segments, the text spec, CSV loading and their errors."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest

from daq.errors import FramingError
from daq.programme import (
    HalfSine,
    Hold,
    LoadProgramme,
    Ramp,
    Sine,
    Table,
    demo_programme,
    load_programme_csv,
    parse_programme,
)

SPEC = (
    "hold 0.3 0; hold 0.5 20; ramp 0.4 60; hold 0.5 60; sine 1 30 5 8; "
    "halfsine 0.3 40 0.005; hold 0.4 0"
)


def test_parse_example_spec_segments_and_duration() -> None:
    prog = parse_programme(SPEC)
    assert prog.segments == (
        Hold(0.3, 0.0),
        Hold(0.5, 20.0),
        Ramp(0.4, 60.0),
        Hold(0.5, 60.0),
        Sine(1.0, 30.0, 5.0, 8.0),
        HalfSine(0.3, 40.0, 0.005),
        Hold(0.4, 0.0),
    )
    assert prog.duration_s == pytest.approx(3.4, abs=1e-12)  # sum of durations


def test_force_values_piece_by_piece() -> None:
    prog = parse_programme(SPEC)
    t = np.array([0.1, 0.5, 0.8 + 0.1, 1.25, 1.7 + 0.25 / 8, 2.7 + 0.0025, 2.7 + 0.1, 3.3, 10.0])
    f = prog.force_at(t)
    expected = [
        0.0,
        20.0,
        20.0 + 40.0 * 0.1 / 0.4,  # ramp 20 → 60 over 0.4 s
        60.0,
        30.0 + 5.0 * math.sin(2 * math.pi * 8 * 0.25 / 8),  # sine at a quarter period
        # the half-sine sits on the level the sine ended at (mean + A·sin(2π·8·1) ≈ 30)
        30.0 + 5.0 * math.sin(2 * math.pi * 8.0) + 40.0,
        30.0 + 5.0 * math.sin(2 * math.pi * 8.0),
        0.0,
        0.0,  # after the end the last level is held
    ]
    # 1e-9 N: several times the float error of sin(2π·8·t) near t = 1 s (from memory ~1e-14).
    np.testing.assert_allclose(f, expected, rtol=0, atol=1e-9)


def test_steps_left_and_right_limits_and_step_changes() -> None:
    prog = LoadProgramme((Hold(1.0, 10.0), Hold(1.0, 10.0), Hold(0.5, -5.0), Ramp(1.0, 0.0)))
    t = np.array([0.0, 2.0, 3.5])
    np.testing.assert_array_equal(prog.force_at(t, side="right"), [10.0, -5.0, 0.0])
    np.testing.assert_array_equal(prog.force_at(t, side="left"), [0.0, 10.0, 0.0])
    assert prog.force_at(-1.0) == 0.0
    assert prog.step_changes() == [(0.0, 0.0, 10.0), (2.0, 10.0, -5.0)]
    assert prog.force_at(np.zeros((2, 3))).shape == (2, 3)


def test_halfsine_pulse_shape() -> None:
    prog = LoadProgramme((Hold(0.1, 5.0), HalfSine(0.05, 12.0, 0.01)))
    tau = np.linspace(0, 0.01, 11)[:-1]
    np.testing.assert_allclose(
        prog.force_at(0.1 + tau), 5.0 + 12.0 * np.sin(np.pi * tau / 0.01), rtol=0, atol=1e-9
    )
    assert prog.force_at(0.1 + 0.02) == 5.0


def test_table_interpolates_and_steps_from_base() -> None:
    prog = LoadProgramme((Hold(1.0, 3.0), Table([0.0, 1.0, 3.0], [10.0, 20.0, 0.0])))
    assert prog.duration_s == 4.0
    np.testing.assert_allclose(prog.force_at([1.0, 1.5, 3.0, 5.0]), [10.0, 15.0, 10.0, 0.0])
    assert prog.force_at(1.0, side="left") == 3.0
    assert Table([0, 1], [1, 2]) == Table([0.0, 1.0], [1.0, 2.0])


def test_demo_programme_scenario() -> None:
    prog = demo_programme()
    assert prog.duration_s <= 6.0
    levels = [s.force_n for s in prog.segments]
    assert levels == [0.0, 20.0, 50.0, 100.0, 40.0, 0.0]
    assert all(s.duration_s >= 0.6 for s in prog.segments)


@pytest.mark.parametrize(
    ("spec", "match"),
    [
        ("", "empty"),
        ("hold 1", "takes 2"),
        ("jump 1 2", "unknown keyword 'jump'"),
        ("hold 1 x", "force_n='x'"),
        ("hold -1 2", "duration_s"),
        ("hold 1 nan", "force_n"),
        ("sine 1 0 -2 5", "amplitude_n"),
        ("sine 1 0 2 0", "frequency_hz"),
        ("halfsine 0.1 5 0.2", "width_s"),
        ("hold 1 0; ramp 0 4", "segment 2"),
    ],
)
def test_spec_errors_name_the_problem(spec: str, match: str) -> None:
    with pytest.raises(FramingError, match=match):
        parse_programme(spec)


def test_spec_comments_and_newlines() -> None:
    prog = parse_programme("# warm up\nhold 1 0  # rest\nHOLD 1 5;\n\nramp 1 0;")
    assert prog.segments == (Hold(1.0, 0.0), Hold(1.0, 5.0), Ramp(1.0, 0.0))


def test_segment_validation() -> None:
    with pytest.raises(FramingError, match="duration_s"):
        Hold(0.0, 1.0)
    with pytest.raises(FramingError, match="increase"):
        Table([0.0, 1.0, 1.0], [0.0, 1.0, 2.0])
    with pytest.raises(FramingError, match="must be 0"):
        Table([0.5, 1.0], [0.0, 1.0])
    with pytest.raises(FramingError, match="equal lengths"):
        Table([0.0, 1.0], [0.0])
    with pytest.raises(FramingError, match="segments"):
        LoadProgramme(())
    with pytest.raises(FramingError, match="side"):
        demo_programme().force_at(0.0, side="middle")  # type: ignore[arg-type]


def test_load_programme_csv(tmp_path: Path) -> None:
    p = tmp_path / "prog.csv"
    p.write_text("# invented test programme\ntime_s,force_n\n0,0\n0.5,10\n\n1.5,-10\n")
    prog = load_programme_csv(p)
    assert prog.duration_s == 1.5
    np.testing.assert_allclose(prog.force_at([0.25, 1.0]), [5.0, 0.0])


@pytest.mark.parametrize(
    ("text", "match"),
    [
        ("t,f\n0,0\n", r"prog\.csv:1: header"),
        ("time_s,force_n\n0,0\n1,abc\n", r"prog\.csv:3: column 2 \(force_n\) = 'abc'"),
        ("time_s,force_n\n0,0\n1,2,3\n", r"prog\.csv:3: 3 column"),
        ("time_s,force_n\n0,0\n1,1\n1,2\n", r"prog\.csv:4: column 1 \(time_s\)"),
        ("time_s,force_n\n0,0\n", r"prog\.csv: Table: 1 point"),
        ("# nothing\n", r"prog\.csv: no header"),
        ("time_s,force_n\ninf,0\n1,0\n", r"prog\.csv:2: column 1 \(time_s\) = 'inf'"),
    ],
)
def test_csv_errors_name_file_line_column(tmp_path: Path, text: str, match: str) -> None:
    p = tmp_path / "prog.csv"
    p.write_text(text)
    with pytest.raises(FramingError, match=match):
        load_programme_csv(p)


def test_csv_missing_file(tmp_path: Path) -> None:
    with pytest.raises(FramingError, match="cannot read"):
        load_programme_csv(tmp_path / "absent.csv")
