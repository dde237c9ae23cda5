"""A fixed-size history of what the dashboard draws, written by the acquisition process.

`TraceBuffer` keeps the last `capacity` samples of five traces: device time,
displacement, estimated force, its standard uncertainty and the static force k·x. The
acquisition worker appends whole blocks; the window asks for the samples inside a time
window. The storage is shared memory and the lock a process lock, so the writer may be
another process (the buffer is handed to it when that process starts) or a thread. One
lock guards both; appends and reads copy only what they touch.

No call waits on the lock for more than `LOCK_TIMEOUT_S`: an append holds it for
microseconds, so a longer wait means the process on the other side died holding it.
Then a read returns no samples and an append is skipped (the display only; recordings
are written elsewhere), instead of hanging the window or the worker for good.
"""

from __future__ import annotations

import multiprocessing
from collections.abc import Iterator
from contextlib import contextmanager
from typing import Any

import numpy as np

__all__ = ["LOCK_TIMEOUT_S", "PROCESS_CONTEXT", "TRACE_FIELDS", "TraceBuffer", "holding"]

#: The traces kept, in order: s, m, N, N (k = 1), N.
TRACE_FIELDS = ("time_s", "displacement_m", "force_n", "force_u_n", "static_force_n")

#: The way worker processes are started: "spawn" is safe beside Qt's threads everywhere.
PROCESS_CONTEXT = multiprocessing.get_context("spawn")

#: Longest wait for a lock shared with another process, s (see the module text).
LOCK_TIMEOUT_S = 0.2


@contextmanager
def holding(lock: Any, timeout_s: float = LOCK_TIMEOUT_S) -> Iterator[bool]:
    """Hold `lock` if it can be had within `timeout_s`; yields whether it was."""
    got = lock.acquire(timeout=timeout_s)
    try:
        yield got
    finally:
        if got:
            lock.release()


class TraceBuffer:
    """Ring buffer of the last `capacity` samples of `TRACE_FIELDS` (float64 each)."""

    def __init__(self, capacity: int) -> None:
        if capacity < 2:
            raise ValueError(f"TraceBuffer: capacity = {capacity}; need at least 2 samples")
        self.capacity = int(capacity)
        self._raw = PROCESS_CONTEXT.RawArray("d", len(TRACE_FIELDS) * self.capacity)
        self._count = PROCESS_CONTEXT.RawArray("q", 1)  # total samples ever appended
        self._lock = PROCESS_CONTEXT.Lock()
        self._attach()
        self._data.fill(np.nan)

    def _attach(self) -> None:
        self._data = np.frombuffer(self._raw, dtype=np.float64).reshape(len(TRACE_FIELDS), -1)
        self._counter = np.frombuffer(self._count, dtype=np.int64)

    def __getstate__(self) -> dict[str, Any]:
        """What a starting worker process receives: the shared memory, not a copy."""
        return {k: self.__dict__[k] for k in ("capacity", "_raw", "_count", "_lock")}

    def __setstate__(self, state: dict[str, Any]) -> None:
        self.__dict__.update(state)
        self._attach()

    @property
    def _end(self) -> int:
        return int(self._counter[0])

    @property
    def total(self) -> int:
        """Samples appended since creation (or `clear`)."""
        return self._end

    def clear(self) -> None:
        """Forget everything."""
        with holding(self._lock) as got:
            if not got:
                raise RuntimeError("TraceBuffer.clear: the lock is held by a process that died")
            self._data.fill(np.nan)
            self._counter[0] = 0

    def append(self, columns: np.ndarray) -> bool:
        """Append `columns`, shape (len(TRACE_FIELDS), n), oldest sample first.

        Returns False when the block was skipped (the lock could not be had in time).
        """
        n = columns.shape[1]
        if columns.shape[0] != len(TRACE_FIELDS):
            raise ValueError(f"TraceBuffer.append: expected {len(TRACE_FIELDS)} rows")
        skipped = max(0, n - self.capacity)  # older than the buffer can hold
        if skipped:
            columns, n = columns[:, skipped:], self.capacity
        with holding(self._lock) as got:
            if not got:
                return False
            start = (self._end + skipped) % self.capacity
            first = min(n, self.capacity - start)
            self._data[:, start : start + first] = columns[:, :first]
            self._data[:, : n - first] = columns[:, first:]
            self._counter[0] += skipped + n
        return True

    def _segments(self) -> list[tuple[int, int]]:
        """The filled part of the ring as (start, stop) column ranges, oldest first."""
        m = min(self._end, self.capacity)
        head = self._end % self.capacity
        if m < self.capacity:
            return [(0, m)]
        return [(head, self.capacity), (0, head)]

    def _take(self, ranges: list[tuple[int, int]]) -> np.ndarray:
        parts = [self._data[:, a:b] for a, b in ranges if b > a]
        if not parts:
            return np.zeros((len(TRACE_FIELDS), 0))
        return np.concatenate(parts, axis=1)  # a copy

    def latest(self, n: int) -> np.ndarray:
        """The last `n` samples (fewer if not yet there), shape (5, m), oldest first."""
        with holding(self._lock) as got:
            if not got:
                return self._take([])
            need = min(n, self._end, self.capacity)
            ranges = []
            for a, b in reversed(self._segments()):
                take = min(need, b - a)
                ranges.insert(0, (b - take, b))
                need -= take
            return self._take(ranges)

    def since(self, total: int, span_s: float | None = None) -> tuple[np.ndarray, int]:
        """The samples appended after the first `total`, and the new total, read together.

        Only samples still held are returned, and with `span_s` only those with time
        ≥ (newest time − span_s). Feeding the returned total back in gives each sample
        once: what a drawing kept up to date incrementally needs. Shape (5, m).
        """
        with holding(self._lock) as got:
            end = self._end
            if not got:
                return self._take([]), total
            start = max(int(total), end - min(end, self.capacity), 0)
            if start >= end:
                return self._take([]), end
            a, b = start % self.capacity, (end - 1) % self.capacity + 1
            ranges = [(a, b)] if a < b else [(a, self.capacity), (0, b)]
            if span_s is not None:
                t_from = float(self._data[0, b - 1]) - span_s
                ranges = [
                    (lo + int(np.searchsorted(self._data[0, lo:hi], t_from, side="left")), hi)
                    for lo, hi in ranges
                ]
            return self._take(ranges), end

    def window(self, span_s: float, end_s: float | None = None) -> np.ndarray:
        """Samples with time in [end − span, end] (end: the latest time); shape (5, m).

        Times must increase through the buffer (the worker keeps them so).
        """
        with holding(self._lock) as got:
            segs = self._segments()
            if self._end == 0 or not got:
                return np.zeros((len(TRACE_FIELDS), 0))
            last = (self._end - 1) % self.capacity
            t_end = float(self._data[0, last]) if end_s is None else end_s
            ranges = []
            for a, b in segs:
                t = self._data[0, a:b]
                lo = a + int(np.searchsorted(t, t_end - span_s, side="left"))
                hi = a + int(np.searchsorted(t, t_end, side="right"))
                ranges.append((lo, hi))
            return self._take(ranges)
