"""Columns of float64 values spilled to files in a temporary folder while a record is
replayed, then read back a slice at a time (issue 12, big records).

`ColumnFiles` appends blocks to one file per column and hands out `FileColumn` readers
(``estimator.columns.Column``): each slice is read with ``numpy.fromfile`` into a fresh
array, never memory-mapped, so the pages of a column that were read do not stay in the
process. The folder (in the OS temporary folder unless told) is removed by `close` or,
failing that, when the object is collected or the process ends.
"""

from __future__ import annotations

import math
import tempfile
from collections.abc import Callable, Iterable
from pathlib import Path
from typing import BinaryIO

import numpy as np

from estimator.columns import Column

__all__ = ["ColumnFiles", "DerivedColumn", "FileColumn", "searchsorted"]

_ITEM = 8  # bytes of a float64


class FileColumn:
    """One column file: ``size`` float64 values (`estimator.columns.Column`)."""

    def __init__(self, path: Path, size: int) -> None:
        self.path = path
        self._size = size

    @property
    def size(self) -> int:
        return self._size

    def read(self, start: int, stop: int) -> np.ndarray:
        start, stop = max(start, 0), min(stop, self._size)
        if stop <= start:
            return np.zeros(0)
        with open(self.path, "rb") as handle:
            return np.fromfile(handle, np.float64, count=stop - start, offset=start * _ITEM)


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
        self._tmp = tempfile.TemporaryDirectory(prefix="forcelens-columns-", dir=folder)
        self.folder = Path(self._tmp.name)
        self._files: dict[str, BinaryIO] = {
            name: open(self.folder / f"{name}.f8", "wb")  # noqa: SIM115 (closed in finish)
            for name in names
        }
        self._sizes = dict.fromkeys(self._files, 0)

    def append(self, **values: np.ndarray) -> None:
        """Add one block to each named column (float64)."""
        for name, block in values.items():
            self._files[name].write(np.ascontiguousarray(block, dtype=np.float64).tobytes())
            self._sizes[name] += int(np.size(block))

    def finish(self) -> None:
        """Flush and close the files; only then can they be read."""
        for handle in self._files.values():
            handle.close()

    def column(self, name: str) -> FileColumn:
        """The reader of column ``name`` (after `finish`)."""
        return FileColumn(self.folder / f"{name}.f8", self._sizes[name])

    def close(self) -> None:
        """Remove the folder and its files."""
        self.finish()
        self._tmp.cleanup()


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
