"""Arrays of a long record kept in a temporary folder and read or written a slice of rows
at a time, or in memory when no folder is given: the smoother's passes over a record too
long to hold (issue 12, big records).

A `SpillArray` has ``n`` rows of one dtype (a row may itself be an array, ``shape``).
Its file is read with ``readinto`` into a fresh array, never memory-mapped, so the pages of
the rows read do not stay in the process. The same code runs on both kinds, so a record
gives the same numbers whether its arrays were in memory or in files.
"""

from __future__ import annotations

import tempfile
from collections.abc import Iterator
from pathlib import Path
from typing import BinaryIO

import numpy as np
from numpy.typing import DTypeLike

__all__ = ["CHUNK", "SpillArray", "SpillFolder", "chunks", "chunks_backward"]

#: Rows per slice when a record is walked through: a 4×4 covariance per row is 8 MB a
#: slice. 262 144 rows took 375 MB for the smoothed replay of a 1 M-row CSV (a plain replay
#: 236 MB).
CHUNK = 65_536


class SpillArray:
    """``n`` rows of ``dtype`` (each of ``shape``), in ``folder`` or in memory (None)."""

    def __init__(
        self, folder: Path | None, name: str, n: int, dtype: DTypeLike, shape: tuple = ()
    ) -> None:
        self.n = int(n)
        self.dtype = np.dtype(dtype)
        self.shape = tuple(shape)
        self._row = self.dtype.itemsize * int(np.prod(self.shape, dtype=np.int64))
        self._memory: np.ndarray | None = None
        self._file: BinaryIO | None = None
        if folder is None:
            self._memory = np.zeros((self.n, *self.shape), self.dtype)
        else:
            self._file = open(Path(folder) / f"{name}.bin", "w+b")  # noqa: SIM115 (close)
            self._file.truncate(self.n * self._row)

    @property
    def size(self) -> int:
        """``n``: the rows so far (`estimator.columns.Column`)."""
        return self.n

    def read(self, start: int, stop: int) -> np.ndarray:
        """Rows ``start`` to ``stop`` (a fresh array)."""
        start, stop = max(start, 0), min(stop, self.n)
        count = max(stop - start, 0)
        if self._memory is not None:
            return self._memory[start : start + count].copy()
        assert self._file is not None
        out = np.empty((count, *self.shape), self.dtype)
        self._file.seek(start * self._row)
        got = self._file.readinto(out.reshape(-1).view(np.uint8))
        if got != count * self._row:
            raise OSError(f"{self._file.name}: short read ({got} of {count * self._row} bytes)")
        return out

    def write(self, start: int, rows: np.ndarray) -> None:
        """Rows ``start`` on ← ``rows``."""
        rows = np.ascontiguousarray(rows, dtype=self.dtype).reshape(-1, *self.shape)
        if start < 0 or start + rows.shape[0] > self.n:
            raise IndexError(f"rows {start}..{start + rows.shape[0]} beyond {self.n}")
        if self._memory is not None:
            self._memory[start : start + rows.shape[0]] = rows
            return
        assert self._file is not None
        self._file.seek(start * self._row)
        self._file.write(rows.reshape(-1).view(np.uint8).data)

    def append(self, rows: np.ndarray) -> None:
        """Rows ``n`` on ← ``rows`` (the array grows)."""
        rows = np.ascontiguousarray(rows, dtype=self.dtype).reshape(-1, *self.shape)
        if self._memory is not None:
            self._memory = np.concatenate([self._memory, rows])
            self.n += rows.shape[0]
            return
        self.n += rows.shape[0]
        self.write(self.n - rows.shape[0], rows)

    def close(self) -> None:
        """Close the file (the folder's owner removes it)."""
        if self._file is not None:
            self._file.close()
            self._file = None


class SpillFolder:
    """A temporary folder for `SpillArray` files, removed on `close` (or None: memory)."""

    def __init__(self, in_files: bool, parent: str | Path | None = None) -> None:
        self._tmp = (
            tempfile.TemporaryDirectory(prefix="forcelens-spill-", dir=parent)
            if in_files
            else None
        )
        self._arrays: dict[str, SpillArray] = {}

    def array(self, name: str, n: int, dtype: DTypeLike, shape: tuple = ()) -> SpillArray:
        """A new array of this folder (in memory when the folder keeps none)."""
        if name in self._arrays:
            raise ValueError(f"spill array {name!r} exists already")
        folder = Path(self._tmp.name) if self._tmp is not None else None
        array = SpillArray(folder, name, n, dtype, shape)
        self._arrays[name] = array
        return array

    def reused(self, name: str, n: int, dtype: DTypeLike, shape: tuple = ()) -> SpillArray:
        """The array ``name`` made by an earlier call with the same size and type (its
        rows as last written), or a new one."""
        old = self._arrays.get(name)
        if old is not None and (old.n, old.dtype, old.shape) == (n, np.dtype(dtype), shape):
            return old
        if old is not None:
            old.close()
            del self._arrays[name]
        return self.array(name, n, dtype, shape)

    def close(self) -> None:
        for array in self._arrays.values():
            array.close()
        if self._tmp is not None:
            self._tmp.cleanup()

    def __enter__(self) -> SpillFolder:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()


def chunks(start: int, stop: int, size: int = CHUNK) -> Iterator[tuple[int, int]]:
    """``(a, b)`` slices of ``start..stop``, first to last, ``size`` rows each (the last
    shorter)."""
    for a in range(start, stop, size):
        yield a, min(a + size, stop)


def chunks_backward(start: int, stop: int, size: int = CHUNK) -> Iterator[tuple[int, int]]:
    """The slices of `chunks`, last to first."""
    return reversed(list(chunks(start, stop, size)))
