"""Columns of float64 values spilled to files in a temporary folder while a record is
replayed, then read back a slice at a time (issue 12, big records).

`ColumnFiles` appends blocks to one `estimator.spill.SpillArray` per column (each an
``estimator.columns.Column``): a slice is read into a fresh array, never memory-mapped, so
the pages of a column that were read do not stay in the process. The folder (in the OS
temporary folder unless told) is removed by `close` or, failing that, when the object is
collected or the process ends.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Iterable
from pathlib import Path

import numpy as np

from estimator.columns import Column
from estimator.spill import SpillArray, SpillFolder

__all__ = ["ColumnFiles", "DerivedColumn", "searchsorted"]


class DerivedColumn:
    """A column computed slice by slice from others: ``fn(*[c.read(a, b) for c in ...])``."""

    def __init__(self, fn: Callable[..., np.ndarray], *columns: Column) -> None:
        self._fn = fn
        self._columns = columns

    @property
    def size(self) -> int:
        return self._columns[0].size

    def read(self, start: int, stop: int) -> np.ndarray:
        return self._fn(*(c.read(start, stop) for c in self._columns))


class ColumnFiles:
    """Named float64 columns, filled a block at a time with `append`, read with `column`."""

    def __init__(self, names: Iterable[str], folder: str | Path | None = None) -> None:
        self._spill = SpillFolder(in_files=True, parent=folder)
        self._columns = {name: self._spill.array(name, 0, np.float64) for name in names}

    def append(self, **values: np.ndarray) -> None:
        """Add one block to each named column (float64)."""
        for name, block in values.items():
            self._columns[name].append(np.ravel(block))

    def column(self, name: str) -> SpillArray:
        """Column ``name`` as appended so far."""
        return self._columns[name]

    def close(self) -> None:
        """Remove the folder and its files."""
        self._spill.close()


def searchsorted(column: Column, value: float) -> int:
    """``numpy.searchsorted(values, value)`` (side "left") of an ascending column, by
    bisection on single values; NaN values must not be present."""
    lo, hi = 0, column.size
    if math.isnan(value):
        return hi
    while lo < hi:
        mid = (lo + hi) // 2
        if column.read(mid, mid + 1)[0] < value:
            lo = mid + 1
        else:
            hi = mid
    return lo
