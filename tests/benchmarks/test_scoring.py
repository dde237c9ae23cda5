"""The benchmark's scores on hand-made arrays (their definitions, counted by hand)."""

from __future__ import annotations

import numpy as np
from accuracy.scoring import coverage, coverage_near_steps


def test_coverage_counts_errors_within_two_sigma() -> None:
    est, sigma, truth = np.array([0.0, 1.0, 3.0, -2.5]), np.ones(4), np.zeros(4)
    assert coverage(est, sigma, truth, np.ones(4, bool)) == 0.5  # |e| 0, 1 in; 3, 2.5 out


def test_rows_near_steps_start_at_the_first_sample_at_or_after_each_step() -> None:
    t = np.arange(10) * 0.1
    truth = np.zeros(10)
    est = np.zeros(10)
    est[[3, 7]] = 5.0  # off by 5 at rows 3 and 7 only
    sigma = np.ones(10)
    # steps at 0.25 s (first row at or after: 3) and at 0.7 s (row 7)
    assert coverage_near_steps(t, est, sigma, truth, [0.25, 0.7], range(0, 1)) == (0, 2)
    assert coverage_near_steps(t, est, sigma, truth, [0.25, 0.7], range(1, 3)) == (4, 4)
    # rows before the record's start or past its end are left out: rows 0-3 and 6-9,
    # of which 3 and 7 are off
    assert coverage_near_steps(t, est, sigma, truth, [0.05, 0.9], range(-3, 3)) == (6, 8)
