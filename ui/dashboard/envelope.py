"""Min/max envelopes: draw N samples with ~2 points per pixel column, keeping every peak.

A trace of n samples shown in `bins` columns is reduced to the minimum and maximum of
each column (both, in time order), so a spike of a single sample is still drawn and the
drawing cost depends on the column count only. The uncertainty band is reduced the same
way: the highest upper edge and the lowest lower edge of each column.

Live, `RunningEnvelope` keeps the same per-column extremes up to date from the new
samples only, with the columns fixed in device time, so a frame costs the samples that
arrived since the last one instead of the whole window.
"""

from __future__ import annotations

import numpy as np

__all__ = ["RunningEnvelope", "band_envelope", "bin_edges", "line_envelope"]


def bin_edges(time_s: np.ndarray, t0: float, t1: float, bins: int) -> np.ndarray:
    """Indices into the sorted `time_s` (n,) that split [t0, t1] into `bins` equal spans.

    Returns int64 (bins + 1,): samples of column j are ``edges[j]:edges[j + 1]``.
    """
    if bins < 1 or not t1 > t0:
        raise ValueError(f"bin_edges: need bins >= 1 and t1 > t0 (got {bins}, {t0}, {t1})")
    bounds = np.linspace(t0, t1, bins + 1)
    edges = np.searchsorted(time_s, bounds, side="left").astype(np.int64)
    edges[-1] = np.searchsorted(time_s, t1, side="right")  # the window includes t1
    return edges


def _reduce(values: np.ndarray, edges: np.ndarray, how: np.ufunc) -> tuple[np.ndarray, np.ndarray]:
    """Per-column reduction over non-empty columns; returns (column indices, values)."""
    counts = np.diff(edges)
    full = np.flatnonzero(counts > 0)
    if full.size == 0:
        return full, np.zeros(0)
    return full, how.reduceat(values, edges[full])


def line_envelope(
    time_s: np.ndarray, value: np.ndarray, t0: float, t1: float, bins: int
) -> tuple[np.ndarray, np.ndarray]:
    """Min/max envelope of `value` over [t0, t1]; returns x, y of length ≤ 2·bins.

    When the window holds at most 2·bins samples they are returned as they are.
    Otherwise each non-empty column gives two points at its middle sample time, its
    minimum then its maximum (a vertical stroke one pixel wide, as peak-preserving
    decimation draws it). NaN values are dropped first.
    """
    keep = np.isfinite(value)
    if not keep.all():
        time_s, value = time_s[keep], value[keep]
    edges = bin_edges(time_s, t0, t1, bins)
    lo_i, hi_i = int(edges[0]), int(edges[-1])
    if hi_i - lo_i <= 2 * bins:  # already sparse: draw the samples themselves
        return time_s[lo_i:hi_i].copy(), value[lo_i:hi_i].copy()
    full, vmin = _reduce(value, edges, np.minimum)
    _, vmax = _reduce(value, edges, np.maximum)
    mid = time_s[(edges[full] + edges[full + 1] - 1) // 2]
    return np.repeat(mid, 2), np.column_stack([vmin, vmax]).ravel()


def band_envelope(
    time_s: np.ndarray,
    lower: np.ndarray,
    upper: np.ndarray,
    t0: float,
    t1: float,
    bins: int,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Per column: the lowest `lower` and highest `upper`; returns x, low, high (m ≤ bins).

    x is the middle time of each non-empty column's samples. Columns without samples
    are left out, so a gap in the data shows as a straight stretch of the band.
    """
    keep = np.isfinite(lower) & np.isfinite(upper)
    if not keep.all():
        time_s, lower, upper = time_s[keep], lower[keep], upper[keep]
    edges = bin_edges(time_s, t0, t1, bins)
    full, low = _reduce(lower, edges, np.minimum)
    _, high = _reduce(upper, edges, np.maximum)
    if full.size == 0:
        return np.zeros(0), np.zeros(0), np.zeros(0)
    mid = (edges[full] + edges[full + 1] - 1) // 2
    return time_s[mid], low, high


class RunningEnvelope:
    """Per-column minimum and maximum of k traces over the last `span_s` of device time.

    Columns are fixed in device time: column j covers [j·w, (j + 1)·w) with w =
    `column_s`, so a column once complete never changes and each `add` only reduces
    the new samples (and merges the first of them into the last, partial column). NaN
    values are ignored (a column with no finite value of a trace is NaN in that trace).

    Args:
        column_s: column width w, s (> 0): the window's span over the plot's pixels.
        span_s: device time kept before the newest sample, s (> 0).
    """

    def __init__(self, column_s: float, span_s: float) -> None:
        if not (column_s > 0.0 and span_s > 0.0):
            raise ValueError(f"RunningEnvelope: column_s={column_s}, span_s={span_s}; both > 0")
        self.column_s = float(column_s)
        self.span_s = float(span_s)
        self.t_last = float("nan")
        self._col = np.zeros(0, np.int64)
        self._lo = np.zeros((0, 0))
        self._hi = np.zeros((0, 0))

    def add(self, time_s: np.ndarray, values: np.ndarray) -> None:
        """Add samples: times (n,), increasing and after the last ones; values (k, n)."""
        if time_s.size == 0:
            return
        if time_s[0] < self.t_last:
            raise ValueError(
                f"RunningEnvelope.add: time goes back ({time_s[0]} s after {self.t_last} s)"
            )
        col = np.floor(time_s / self.column_s).astype(np.int64)
        starts = np.concatenate([[0], np.flatnonzero(np.diff(col)) + 1])
        lo = np.fmin.reduceat(values, starts, axis=1)
        hi = np.fmax.reduceat(values, starts, axis=1)
        cols = col[starts]
        if self._col.size == 0:
            self._col, self._lo, self._hi = cols, lo, hi
        else:
            if cols[0] == self._col[-1]:  # the partial column goes on
                self._lo[:, -1] = np.fmin(self._lo[:, -1], lo[:, 0])
                self._hi[:, -1] = np.fmax(self._hi[:, -1], hi[:, 0])
                cols, lo, hi = cols[1:], lo[:, 1:], hi[:, 1:]
            self._col = np.concatenate([self._col, cols])
            self._lo = np.concatenate([self._lo, lo], axis=1)
            self._hi = np.concatenate([self._hi, hi], axis=1)
        self.t_last = float(time_s[-1])
        first = int(np.floor((self.t_last - self.span_s) / self.column_s))
        drop = int(np.searchsorted(self._col, first, side="left"))
        if drop:
            self._col, self._lo, self._hi = (
                self._col[drop:],
                self._lo[:, drop:],
                self._hi[:, drop:],
            )

    def columns(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """(middle time of each column (m,), minima (k, m), maxima (k, m)), oldest first.

        Only columns with samples are listed, so a gap in the data has no columns.
        """
        mid = (self._col + 0.5) * self.column_s
        return mid, self._lo, self._hi
