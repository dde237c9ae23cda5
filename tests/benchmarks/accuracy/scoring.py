"""Scores of a force estimate against the true force: RMSE, ±2σ coverage, the median of
``|error|/σ``, settling time.

All are computed plainly on the samples a mask selects (the start-up is left
out by the caller): no trimming, no weighting.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np

from accuracy.loads import SettlingEvent


def rmse(estimate_n: np.ndarray, truth_n: np.ndarray, mask: np.ndarray) -> float:
    """Root-mean-square error (N) of the estimate over the masked samples."""
    err = np.asarray(estimate_n)[mask] - np.asarray(truth_n)[mask]
    return float(np.sqrt(np.mean(err * err)))


def coverage(
    estimate_n: np.ndarray,
    sigma_n: np.ndarray,
    truth_n: np.ndarray,
    mask: np.ndarray,
    k: float = 2.0,
) -> float:
    """Share (0–1) of the masked samples with ``|estimate − truth| ≤ k·σ`` (σ in N)."""
    err = np.abs(np.asarray(estimate_n)[mask] - np.asarray(truth_n)[mask])
    return float(np.mean(err <= k * np.asarray(sigma_n)[mask]))


def median_z(
    estimate_n: np.ndarray, sigma_n: np.ndarray, truth_n: np.ndarray, mask: np.ndarray
) -> float:
    """Median of ``|estimate − truth| / σ`` over the masked samples: 0.674 for a Gaussian
    error of standard deviation σ (handbook value, the normal distribution's quartile).
    Less sensitive than coverage to the few large errors a record's load changes make."""
    err = np.abs(np.asarray(estimate_n)[mask] - np.asarray(truth_n)[mask])
    return float(np.median(err / np.asarray(sigma_n)[mask]))


def coverage_near_steps(
    t_s: np.ndarray,
    estimate_n: np.ndarray,
    sigma_n: np.ndarray,
    truth_n: np.ndarray,
    step_times_s: Sequence[float],
    offsets: range,
    k: float = 2.0,
) -> tuple[int, int]:
    """``(covered, rows)``: of the rows at ``offsets`` from each step (offset 0 is the
    first sample at or after the step's instant), how many have ``|error| ≤ k·σ``."""
    t_s = np.asarray(t_s)
    first = np.searchsorted(t_s, np.asarray(step_times_s, dtype=float))
    rows = (first[:, None] + np.asarray(offsets)[None, :]).ravel()
    rows = rows[(rows >= 0) & (rows < t_s.size)]
    err = np.abs(np.asarray(estimate_n)[rows] - np.asarray(truth_n)[rows])
    return int(np.count_nonzero(err <= k * np.asarray(sigma_n)[rows])), int(rows.size)


def settling_times(
    t_s: np.ndarray,
    estimate_n: np.ndarray,
    events: Sequence[SettlingEvent],
    band: float = 0.02,
) -> list[float]:
    """Settling time (s) after each event: until the estimate stays within the band.

    The band is ``±band × height`` around the new level; only samples in the hold after
    the event count. The time is from the event to the first sample after the last
    one outside the band; ``inf`` if the estimate is outside the band at the end of
    the hold, ``nan`` if the hold has no sample.
    """
    t_s = np.asarray(t_s)
    out: list[float] = []
    for ev in events:
        inside = (t_s >= ev.time_s) & (t_s < ev.until_s)
        tw, ew = t_s[inside], np.asarray(estimate_n)[inside]
        if tw.size == 0:
            out.append(math.nan)
            continue
        outside = np.abs(ew - ev.level_n) > band * ev.height_n
        if outside[-1]:
            out.append(math.inf)
        elif not outside.any():
            out.append(float(tw[0] - ev.time_s))
        else:
            last = int(np.nonzero(outside)[0][-1])
            out.append(float(tw[last + 1] - ev.time_s))
    return out
