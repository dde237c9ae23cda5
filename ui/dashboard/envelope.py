"""Min/max envelopes: draw N samples with ~2 points per pixel column, keeping every peak.

A trace of n samples shown in `bins` columns is reduced to the minimum and maximum of
each column (both, in time order), so a spike of a single sample is still drawn and the
drawing cost depends on the column count only. The uncertainty band is reduced the same
way: the highest upper edge and the lowest lower edge of each column.
"""

from __future__ import annotations

import numpy as np

__all__ = ["band_envelope", "bin_edges", "line_envelope"]


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
