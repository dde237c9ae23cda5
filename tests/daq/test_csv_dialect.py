"""The numbers the CSV writer spells: every double reads back as itself. Reference:
Python's own ``float()`` parser and NumPy's ``loadtxt``; values are invented."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np

from daq.csv_dialect import CsvTableWriter, number_texts, rows_text


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
    assert number_texts(np.array([2**64 - 1], dtype=np.uint64)) == [b"18446744073709551615"]
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


def _random_block(rng: np.random.Generator, n: int) -> list[np.ndarray]:
    """Columns of every kind the writers hand over, invented."""
    kinds = [
        lambda: rng.normal(size=n) * 10.0 ** rng.integers(-300, 300, n),
        lambda: rng.integers(-(2**40), 2**40, n),
        lambda: rng.integers(0, 2**32, n).astype(np.uint32),
        lambda: rng.random(n).astype(np.float32),
        lambda: rng.random(n) > 0.5,
        lambda: np.round(rng.normal(size=n) * 1e6),  # integral floats: "3.0", not "3"
        lambda: rng.integers(-(2**62), 2**62, n),  # beyond 2**53: joined field by field
        lambda: rng.integers(2**62, 2**63, n).astype(np.uint64) * np.uint64(2),  # > int64
    ]
    return [kinds[int(k)]() for k in rng.integers(0, len(kinds), int(rng.integers(1, 13)))]


def test_block_rows_are_the_fields_joined_and_read_back_exactly() -> None:
    # rows_text writes most blocks by one 2-D dump rewritten in a compiled pass; each row
    # must be the columns' texts joined by commas, and every field must read back as the
    # value written (reference: Python's float() and int() parsers).
    rng = np.random.default_rng(11)
    fast_path_blocks = 0
    for trial in range(200):
        n = int(rng.integers(1, 300))
        columns = _random_block(rng, n)
        if trial % 4 == 0:  # a non-finite value or a signed zero somewhere
            columns.append(rng.normal(size=n))
            columns[-1][int(rng.integers(0, n))] = rng.choice([math.nan, math.inf, -0.0, 5e-324])
        text = rows_text(columns)
        texts = [number_texts(np.asarray(c)) for c in columns]
        assert text == b"".join(b",".join(row) + b"\n" for row in zip(*texts, strict=True))
        rows = text.decode("ascii").splitlines()
        assert len(rows) == n
        for k, column in enumerate(columns):
            fields = [row.split(",")[k] for row in rows]
            if column.dtype.kind == "f":
                back = np.array([float(f) for f in fields])
                assert np.array_equal(back.astype(column.dtype), column, equal_nan=True)
            else:
                assert [int(f) for f in fields] == [int(v) for v in column.tolist()]
        fast_path_blocks += all(np.isfinite(np.asarray(c, float)).all() for c in columns)
    assert fast_path_blocks > 50  # the compiled pass was exercised
    assert rows_text([np.empty(0)]) == b""
