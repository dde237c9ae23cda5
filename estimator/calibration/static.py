"""The static calibration as a whole: `calibrate_static` and its result."""

from __future__ import annotations

import math
import re
from dataclasses import dataclass

import numpy as np

from estimator.calibration.data import CalibrationSet
from estimator.calibration.e74 import E74Limits, e74_limits
from estimator.calibration.fit import StaticFit, fit_static
from estimator.calibration.iso376 import Iso376Result, evaluate_iso376
from estimator.errors import ParameterError
from estimator.validation import finite_float as _finite

# ------------------------------------------------------------------------- the bundle

_SHA256 = re.compile(r"[0-9a-f]{64}")


@dataclass(frozen=True, eq=False)
class StaticCalibration:
    """Result of a static calibration.

    Attributes:
        fit: the curve fitted on the increasing-force points.
        iso376: ISO 376:2011-style per-step errors and class.
        e74: ASTM E74-style standard deviation, LLF and lower force limits.
        stiffness_n_per_m: ``1/c1`` for a straight line, N/m; None for degree 2 and 3.
        stiffness_u_n_per_m: its standard uncertainty (k = 1), N/m; None likewise.
        data_sha256: SHA-256 of the calibration data, 64 lower-case hex digits.
    """

    fit: StaticFit
    iso376: Iso376Result
    e74: E74Limits
    stiffness_n_per_m: float | None
    stiffness_u_n_per_m: float | None
    data_sha256: str

    def __post_init__(self) -> None:
        if not isinstance(self.data_sha256, str) or not _SHA256.fullmatch(self.data_sha256):
            raise ParameterError(
                f"data_sha256 = {self.data_sha256!r}; give the SHA-256 of the data as 64 "
                "lower-case hex digits"
            )

    def text(self) -> str:
        """Plain-text summary: fit, stiffness, per-step table (%), class, E74 limits."""
        fit = self.fit
        terms = " + ".join(
            f"c{j}·F^{j}" if j > 1 else ("c1·F" if j == 1 else "c0")
            for j in range(0 if fit.intercept else 1, fit.degree + 1)
        )
        lines = [
            f"data SHA-256: {self.data_sha256}",
            f"fit: deflection = {terms}  (degree {fit.degree}, "
            f"{'with' if fit.intercept else 'without'} constant term, increasing loads)",
            f"  {fit.force_n.size} points, {fit.dof} degrees of freedom, "
            f"residual standard deviation s = {fit.residual_std_m * 1e6:.4g} µm",
        ]
        se = fit.standard_errors
        for j in range(0 if fit.intercept else 1, fit.degree + 1):
            unit = "m" if j == 0 else ("m/N" if j == 1 else f"m/N^{j}")
            lines.append(f"  c{j} = {fit.coefficients[j]:.9g} {unit}  (u = {se[j]:.3g} {unit})")
        if self.stiffness_n_per_m is not None:
            lines.append(
                f"stiffness k = 1/c1 = {self.stiffness_n_per_m:.7g} N/m, standard "
                f"uncertainty u(k) = {self.stiffness_u_n_per_m:.3g} N/m (coverage factor 1)"
            )
        lines.append("")
        lines.append("ISO 376:2011-style relative errors (%; class limits quoted from memory)")
        header = (
            f"{'force/N':>12} {'mean defl/mm':>13} {'b/%':>8} {'b′/%':>8} {'fc/%':>8} "
            f"{'v/%':>8}  class"
        )
        lines.append(header)

        def pct(value: float) -> str:
            return f"{'—':>8}" if math.isnan(value) else f"{value * 100:8.4f}"

        for st in self.iso376.steps:
            lines.append(
                f"{st.force_n:12.6g} {st.mean_deflection_m * 1e3:13.6f} "
                f"{pct(st.reproducibility)} {pct(st.repeatability)} {pct(st.interpolation)} "
                f"{pct(st.reversibility)}  {st.class_name or '—'}"
            )
        zero = ", ".join(
            f"{label}: {'—' if math.isnan(f) else f'{f * 100:.4f}'}"
            for label, f in zip(self.iso376.series_labels, self.iso376.zero_errors, strict=True)
        )
        lines.append(f"zero error f0 per series (%): {zero}")
        lines.append(
            f"class: {self.iso376.class_name or 'none (a step or f0 not met or not evaluated)'}"
        )
        e = self.e74
        lines.append("")
        lines.append("ASTM E74-style limits (factors 2.4, 400, 2000 from memory)")
        lines.append(
            f"  s = {e.std_dev_n:.4g} N ({e.dof} degrees of freedom), resolution "
            f"{e.resolution_n:.4g} N, LLF = {e.llf_n:.4g} N"
        )
        for name, limit in (("A", e.class_a_lower_n), ("AA", e.class_aa_lower_n)):
            note = " (above the largest calibrated force)" if limit > e.max_force_n else ""
            lines.append(f"  class {name} lower force limit: {limit:.6g} N{note}")
        return "\n".join(lines) + "\n"


def calibrate_static(
    cal: CalibrationSet,
    *,
    resolution_m: float,
    data_sha256: str,
    degree: int = 1,
    intercept: bool = True,
    step_rtol: float = 1e-6,
) -> StaticCalibration:
    """Fit the increasing-force points and evaluate ISO 376- and E74-style errors.

    Args:
        cal: the calibration set.
        resolution_m: resolution of the reading in m, > 0. E74 takes it in force units
            as ``resolution_m / min |dX/dF|`` over the calibrated range (the largest force
            step it can hide, evaluated at the fitted points).
        data_sha256: SHA-256 of the calibration data (64 lower-case hex digits).
        degree, intercept: as `fit_static`.
        step_rtol: as `evaluate_iso376`.

    Raises:
        ParameterError: from the steps named above.
    """
    res = _finite("resolution_m", resolution_m, "give the reading's resolution in m, > 0")
    if res <= 0.0:
        raise ParameterError(f"resolution_m = {res!r} must be > 0 m")
    up = cal.up
    if not np.any(up):
        raise ParameterError("the set has no increasing-force ('up') points to fit")
    loaded = up & (cal.force_n != 0.0)
    if not np.any(cal.deflection_m[loaded] != 0.0):
        raise ParameterError(
            "the cell did not deflect: every reading under load equals its zero reading, so "
            "no stiffness can be fitted; check that the transducer reads the cell and that "
            "the sheet holds its readings"
        )
    fit = fit_static(cal.force_n[up], cal.deflection_m[up], degree=degree, intercept=intercept)
    iso = evaluate_iso376(cal, fit, resolution_m=res, step_rtol=step_rtol)
    slope = float(np.min(np.abs(fit.sensitivity_m_per_n(fit.force_n))))
    if slope == 0.0:
        raise ParameterError("the fit has zero slope at a data point; check the readings")
    e74 = e74_limits(fit, res / slope)
    return StaticCalibration(
        fit=fit,
        iso376=iso,
        e74=e74,
        stiffness_n_per_m=fit.stiffness_n_per_m,
        stiffness_u_n_per_m=fit.stiffness_u_n_per_m,
        data_sha256=data_sha256,
    )
