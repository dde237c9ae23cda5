"""The numbers the CSV writer spells: every double reads back as itself. Reference:
Python's own ``float()`` parser and NumPy's ``loadtxt``; values are invented."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np

from daq.csv_dialect import CsvTableWriter, number_texts


def test_every_double_reads_back_as_itself() -> None:
    rng = np.random.default_rng(5)
    special = [0.0, -0.0, 1.0, 0.1, 1e-5, 4.5e-6, 1e16, 1e22, 5e-324, 2.2250738585072014e-308,
               1.7976931348623157e308, math.pi, -2.5, 123456789.125]  # fmt: skip
    values = np.concatenate([special, rng.normal(size=2000) * 10.0 ** rng.integers(-12, 12, 2000)])
    texts = number_texts(values)
    back = np.array([float(t) for t in texts])
    assert np.array_equal(back.view(np.int64), values.view(np.int64))  # bit for bit, -0.0 too


def test_non_finite_floats_are_spelled_as_python_does() -> None:
    texts = number_texts(np.array([1.5, math.nan, math.inf, -math.inf, 2.0]))
    assert texts == [b"1.5", b"nan", b"inf", b"-inf", b"2.0"]


def test_integers_flags_and_float32_columns(tmp_path: Path) -> None:
    assert number_texts(np.array([0, 7, 2**40], dtype=np.uint64)) == [b"0", b"7", b"1099511627776"]
    assert number_texts(np.array([True, False])) == [b"1", b"0"]
    assert number_texts(np.array([], dtype=float)) == []
    # a float32 column is written as the double it converts to, so it reads back exact
    p32 = np.array([0.1, 1 / 3], dtype=np.float32)
    path = tmp_path / "t.csv"
    with CsvTableWriter(path, title="test", columns=[("p", "1"), ("flags", "1")]) as out:
        out.write([p32, np.array([3, 40], dtype=np.uint32)])
    table = np.loadtxt(path, delimiter=",", comments="#", skiprows=2)
    assert np.array_equal(table[:, 0].astype(np.float32), p32)
    assert table[:, 1].tolist() == [3.0, 40.0]
    assert path.read_text(encoding="utf-8").splitlines()[1] == "p [1],flags [1]"
