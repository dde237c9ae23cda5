"""ASTM E74-style lower limit factor and class lower force limits."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from estimator.calibration.fit import StaticFit
from estimator.errors import ParameterError
from estimator.validation import finite_float as _finite

#: ASTM E74 (from memory): lower limit factor = 2.4 × standard deviation of the fit.
E74_LLF_FACTOR = 2.4
#: ASTM E74 (from memory): class A lower force limit = 400 × LLF.
E74_CLASS_A_FACTOR = 400.0
#: ASTM E74 (from memory): class AA lower force limit = 2000 × LLF.
E74_CLASS_AA_FACTOR = 2000.0


# ------------------------------------------------------------------------ ASTM E74


@dataclass(frozen=True)
class E74Limits:
    """ASTM E74-style limits from the fit (factors from memory).

    Attributes:
        std_dev_n: standard deviation of the fit in force units,
            ``s = sqrt(Σ (r_i/(dX/dF)_i)²/ν)``, N.
        dof: ``ν = n − p``.
        resolution_n: the resolution in N the LLF may not go below.
        llf_n: lower limit factor ``max(2.4·s, resolution)``, N.
        class_a_lower_n: class A lower force limit ``400·LLF``, N.
        class_aa_lower_n: class AA lower force limit ``2000·LLF``, N.
        max_force_n: the largest calibrated force, N; a lower limit above it means the
            class cannot be reached with this calibration.
    """

    std_dev_n: float
    dof: int
    resolution_n: float
    llf_n: float
    class_a_lower_n: float
    class_aa_lower_n: float
    max_force_n: float


def e74_limits(fit: StaticFit, resolution_n: float) -> E74Limits:
    """ASTM E74-style standard deviation, LLF and class A/AA lower force limits.

    The deflection residuals are turned into force through the fit's local slope.

    Args:
        fit: the fitted curve (deflection as a function of force).
        resolution_n: the smallest force step the reading resolves, N, finite and >= 0.

    Raises:
        ParameterError: a bad resolution or a fit whose slope is 0 at a data point.
    """
    fix = "give the resolution in N, finite and >= 0"
    res = _finite("resolution_n", resolution_n, fix)
    if res < 0.0:
        raise ParameterError(f"resolution_n = {res!r} is negative; {fix}")
    if np.any(fit.sensitivity_m_per_n(fit.force_n) == 0.0):
        raise ParameterError("the fit has zero slope at a data point; no force residuals")
    r_f = fit.residuals_n
    s = math.sqrt(float(r_f @ r_f) / fit.dof)
    llf = max(E74_LLF_FACTOR * s, res)
    return E74Limits(
        std_dev_n=s,
        dof=fit.dof,
        resolution_n=res,
        llf_n=llf,
        class_a_lower_n=E74_CLASS_A_FACTOR * llf,
        class_aa_lower_n=E74_CLASS_AA_FACTOR * llf,
        max_force_n=fit.force_range_n[1],
    )
