"""A fixed-size history of what the dashboard draws, written by the worker thread.

`TraceBuffer` keeps the last `capacity` samples of five traces: device time,
displacement, estimated force, its standard uncertainty and the static force k·x. The
worker appends whole blocks; the window asks for the samples inside a time window. One
lock guards both; appends and reads copy only what they touch.
"""

from __future__ import annotations

import threading

import numpy as np

__all__ = ["TRACE_FIELDS", "TraceBuffer"]

#: The traces kept, in order: s, m, N, N (k = 1), N.
TRACE_FIELDS = ("time_s", "displacement_m", "force_n", "force_u_n", "static_force_n")


class TraceBuffer:
    """Ring buffer of the last `capacity` samples of `TRACE_FIELDS` (float64 each)."""

    def __init__(self, capacity: int) -> None:
        if capacity < 2:
            raise ValueError(f"TraceBuffer: capacity = {capacity}; need at least 2 samples")
        self.capacity = int(capacity)
        self._data = np.full((len(TRACE_FIELDS), self.capacity), np.nan)
        self._end = 0  # total samples ever appended
        self._lock = threading.Lock()

    @property
    def total(self) -> int:
        """Samples appended since creation (or `clear`)."""
        return self._end

    def clear(self) -> None:
        """Forget everything."""
        with self._lock:
            self._data.fill(np.nan)
            self._end = 0

    def append(self, columns: np.ndarray) -> None:
        """Append `columns`, shape (len(TRACE_FIELDS), n), oldest sample first."""
        n = columns.shape[1]
        if columns.shape[0] != len(TRACE_FIELDS):
            raise ValueError(f"TraceBuffer.append: expected {len(TRACE_FIELDS)} rows")
        skipped = max(0, n - self.capacity)  # older than the buffer can hold
        if skipped:
            columns, n = columns[:, skipped:], self.capacity
        with self._lock:
            start = (self._end + skipped) % self.capacity
            first = min(n, self.capacity - start)
            self._data[:, start : start + first] = columns[:, :first]
            self._data[:, : n - first] = columns[:, first:]
            self._end += skipped + n

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
        with self._lock:
            need = min(n, self._end, self.capacity)
            ranges = []
            for a, b in reversed(self._segments()):
                take = min(need, b - a)
                ranges.insert(0, (b - take, b))
                need -= take
            return self._take(ranges)

    def window(self, span_s: float, end_s: float | None = None) -> np.ndarray:
        """Samples with time in [end − span, end] (end: the latest time); shape (5, m).

        Times must increase through the buffer (the worker keeps them so).
        """
        with self._lock:
            segs = self._segments()
            if self._end == 0:
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
