"""The force's combined uncertainty against the GUM law of propagation, done independently."""

from __future__ import annotations

import math

import numpy as np
import pytest

from estimator.errors import ParameterError
from estimator.profile import default_demo_profile
from estimator.uncertainty import COVERAGE_FACTOR, ForceUncertainty


def test_budget_matches_a_numerical_law_of_propagation() -> None:
    # JCGM 100:2008 eq. 10 with sensitivity coefficients taken by central differences of
    # the measurement model F = k·x (an independent route to F·u(k)/k), plus the
    # rectangular resolution term of 4.3.7: a/√3 with half-width a = k·r/2 (= k·r/√12).
    k, uk, r, w = 4.0e5, 800.0, 5.96e-11, 1e-4
    x = 1.25e-4  # m, the displacement attributed to the force
    force = k * x
    h = 1e-3 * k
    c_k = ((k + h) * x - (k - h) * x) / (2 * h)  # ∂F/∂k
    half_width = k * r / 2
    expected = math.sqrt(0.004**2 + (c_k * uk) ** 2 + (half_width / math.sqrt(3)) ** 2
                         + (w * force) ** 2)  # fmt: skip
    fu = ForceUncertainty(k, uk, r, w)
    assert float(fu.combined_n(force, 0.004)) == pytest.approx(expected, rel=1e-9)
    b = fu.budget(force, 0.004)
    assert b.combined_n == pytest.approx(expected, rel=1e-12)
    assert b.expanded_n == pytest.approx(2.0 * expected, rel=1e-12) and COVERAGE_FACTOR == 2.0
    assert "expanded U (k = 2" in b.text()


def test_vectorised_and_from_the_profile() -> None:
    p = default_demo_profile()
    fu = ForceUncertainty.from_profile(p)
    f = np.array([0.0, 50.0, 100.0])
    u = np.array([0.005, 0.005, 0.006])
    got = fu.expanded_n(f, u)
    want = [2 * fu.budget(fi, ui).combined_n for fi, ui in zip(f, u, strict=True)]
    np.testing.assert_allclose(got, want, rtol=1e-12)
    # At 100 N the demo cell's stiffness uncertainty (800 N/m of 4e5, 0.2 %) dominates:
    assert fu.budget(100.0, 0.006).calibration_n == pytest.approx(0.2, rel=1e-12)


def test_bad_inputs_are_named() -> None:
    with pytest.raises(ParameterError, match="stiffness_n_per_m"):
        ForceUncertainty(0.0)
    with pytest.raises(ParameterError, match="model_rel"):
        ForceUncertainty(1.0, model_rel=-1.0)
