"""Arrays kept in files or in memory (`estimator.spill`): the same rows either way."""

from __future__ import annotations

import os

import numpy as np
import pytest

from estimator.observer import ESTIMATE_DTYPE
from estimator.spill import SpillFolder, chunks, chunks_backward


@pytest.mark.parametrize("in_files", [False, True])
def test_rows_written_are_read_back_exactly(in_files: bool) -> None:
    rng = np.random.default_rng(1)
    with SpillFolder(in_files) as folder:
        cov = folder.array("cov", 50, np.float64, (4, 4))
        values = rng.normal(size=(50, 4, 4))
        cov.write(0, values[:20])
        cov.write(20, values[20:])
        assert np.array_equal(cov.read(0, 50), values)
        assert np.array_equal(cov.read(13, 37), values[13:37])
        rows = folder.array("rows", 0, ESTIMATE_DTYPE)
        block = np.zeros(7, ESTIMATE_DTYPE)
        block["force_n"] = np.arange(7.0)
        rows.append(block)
        rows.append(block[:3])
        assert rows.n == 10
        assert rows.read(5, 10)["force_n"].tolist() == [5.0, 6.0, 0.0, 1.0, 2.0]


def test_files_are_removed_on_close() -> None:
    folder = SpillFolder(in_files=True)
    folder.array("x", 10, np.float64).write(0, np.ones(10))
    path = folder._tmp.name  # type: ignore[union-attr]
    folder.close()
    assert not os.path.exists(path)


def test_a_row_beyond_the_end_is_refused() -> None:
    with SpillFolder(in_files=True) as folder:
        x = folder.array("x", 4, np.float64)
        with pytest.raises(IndexError, match="beyond 4"):
            x.write(2, np.ones(3))


def test_reused_keeps_an_array_of_the_same_size_and_replaces_another() -> None:
    with SpillFolder(in_files=True) as folder:
        a = folder.reused("a", 5, np.float64)
        a.write(0, np.arange(5.0))
        assert folder.reused("a", 5, np.float64) is a
        b = folder.reused("a", 6, np.float64)
        assert b is not a and b.n == 6


def test_slices_cover_the_range_once_in_both_directions() -> None:
    assert list(chunks(3, 12, 4)) == [(3, 7), (7, 11), (11, 12)]
    assert list(chunks_backward(3, 12, 4)) == [(11, 12), (7, 11), (3, 7)]
    assert list(chunks(5, 5, 4)) == []
