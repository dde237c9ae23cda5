"""Coordinate ascent on log grids (estimator.loggrid)."""

from __future__ import annotations

import math

import pytest

from estimator.loggrid import ascend


def test_finds_the_peak_of_a_smooth_function_within_a_refined_step() -> None:
    # A separable peak at (3, 0.2) in log coordinates (closed form: the maximum of
    # −(ln a − ln 3)² − (ln b − ln 0.2)² is at a = 3, b = 0.2).
    def f(p: tuple[float, ...]) -> float:
        return -((math.log(p[0] / 3.0)) ** 2) - (math.log(p[1] / 0.2)) ** 2

    result = ascend(f, (100.0, 1.0), (4.0, 2.0))
    assert result.at_edge == (False, False)
    assert 3.0 / 2.0 <= result.point[0] <= 3.0 * 2.0  # √4: one refined step
    assert 0.2 / math.sqrt(2.0) <= result.point[1] <= 0.2 * math.sqrt(2.0)
    assert result.value == pytest.approx(f(result.point))


def test_a_function_still_rising_at_the_widest_search_is_reported_at_the_edge() -> None:
    result = ascend(lambda p: p[0], (1.0,), (2.0,), widen=5)
    assert result.at_edge == (True,)
    assert result.point[0] > 2.0**5  # widened 5 coarse steps, then refined upward


def test_bad_arguments_are_named() -> None:
    with pytest.raises(ValueError, match="one start > 0 and one step > 1"):
        ascend(lambda p: 0.0, (1.0,), (1.0,))


def test_a_parameter_stops_at_its_limit_and_is_reported_at_the_edge() -> None:
    # Definition: a function that keeps rising as its parameter falls, searched down to
    # 0.25 only; the other parameter, free, finds its own peak at 5 (closed form).
    def f(p: tuple[float, ...]) -> float:
        return -math.log(p[0]) - (math.log(p[1] / 5.0)) ** 2

    result = ascend(f, (1.0, 1.0), (2.0, 2.0), limits=[(0.25, math.inf), None])
    assert result.at_edge == (True, False)
    assert 0.25 <= result.point[0] <= 0.25 * math.sqrt(2.0)
    assert 5.0 / math.sqrt(2.0) <= result.point[1] <= 5.0 * math.sqrt(2.0)
    with pytest.raises(ValueError, match="one limit"):
        ascend(f, (1.0, 1.0), (2.0, 2.0), limits=[None])
