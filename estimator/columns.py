"""A column of float64 values read a slice at a time (`Column`), and one held in memory.

Functions that must not hold a whole record (``estimator.metrics.changes_in_blocks``) take
columns: the caller decides where the values live (an array, a file read slice by
slice). `blocks` cuts a stretch of a column into `BLOCK` values at a time.
"""

from __future__ import annotations

from collections.abc import Iterator
from typing import Protocol

import numpy as np
from numpy.typing import ArrayLike

__all__ = ["BLOCK", "ArrayColumn", "Column", "blocks"]

#: Values per block when a column is walked through.
BLOCK = 65_536


class Column(Protocol):
    """``size`` values, of which ``read(start, stop)`` returns a fresh float64 array."""

    @property
    def size(self) -> int: ...

    def read(self, start: int, stop: int) -> np.ndarray: ...


class ArrayColumn:
    """A column over an array in memory (a copy of each slice read)."""

    def __init__(self, values: ArrayLike) -> None:
        self._values = np.asarray(values, dtype=np.float64).ravel()

    @property
    def size(self) -> int:
        return int(self._values.size)

    def read(self, start: int, stop: int) -> np.ndarray:
        return np.array(self._values[max(start, 0) : max(stop, 0)])


def blocks(
    column: Column, start: int = 0, stop: int | None = None, block: int = BLOCK
) -> Iterator[tuple[int, np.ndarray]]:
    """``(first index, values)`` of ``column[start:stop]``, ``block`` values at a time."""
    stop = column.size if stop is None else min(stop, column.size)
    for a in range(max(start, 0), stop, block):
        yield a, column.read(a, min(a + block, stop))
