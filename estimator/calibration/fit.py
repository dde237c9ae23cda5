"""Least-squares polynomial of deflection against force, with its covariance."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import scipy.linalg
from numpy.typing import ArrayLike

from estimator.calibration.checks import _finite_array, _frozen
from estimator.errors import ParameterError

# ------------------------------------------------------------------------------- fit


@dataclass(frozen=True, eq=False)
class StaticFit:
    """Least-squares polynomial ``deflection = Σ c_j·F^j`` (j = 0..degree).

    Equality is identity (arrays inside). Arrays are read-only.

    Attributes:
        degree: 1, 2 or 3.
        intercept: whether ``c0`` was fitted (otherwise it is fixed at 0).
        coefficients: ``c_j`` ascending, shape (degree + 1,), units m/N^j.
        covariance: covariance of ``c``, shape (degree + 1, degree + 1); row and column
            0 are zero without an intercept.
        force_n: the fitted forces, N, shape (n,).
        deflection_m: the fitted deflections, m, shape (n,).
        residuals_m: deflection minus fitted value, m, shape (n,).
        residual_std_m: ``s = sqrt(Σ r²/ν)``, m.
        dof: ``ν = n − p``, ``p`` the number of fitted coefficients.
    """

    degree: int
    intercept: bool
    coefficients: np.ndarray
    covariance: np.ndarray
    force_n: np.ndarray
    deflection_m: np.ndarray
    residuals_m: np.ndarray
    residual_std_m: float
    dof: int

    def __post_init__(self) -> None:
        for name in ("coefficients", "covariance", "force_n", "deflection_m", "residuals_m"):
            object.__setattr__(self, name, _frozen(getattr(self, name)))

    @property
    def standard_errors(self) -> np.ndarray:
        """Standard uncertainties of ``c_j``, shape (degree + 1,) (0 for a fixed ``c0``)."""
        return np.sqrt(np.diag(self.covariance))

    @property
    def force_range_n(self) -> tuple[float, float]:
        """The calibrated range: smallest and largest fitted force in N."""
        return float(self.force_n.min()), float(self.force_n.max())

    @property
    def stiffness_n_per_m(self) -> float | None:
        """``k = 1/c1`` in N/m for a straight line; None for degree 2 and 3."""
        if self.degree != 1:
            return None
        return 1.0 / float(self.coefficients[1])

    @property
    def stiffness_u_n_per_m(self) -> float | None:
        """Standard uncertainty ``u(k) = u(c1)/c1²`` in N/m (GUM 5.1.2); None if degree > 1."""
        if self.degree != 1:
            return None
        c1 = float(self.coefficients[1])
        return float(self.standard_errors[1]) / (c1 * c1)

    def deflection_at(self, force_n: ArrayLike) -> np.ndarray:
        """Fitted deflection in m at ``force_n`` (N, any shape; 0-d array for a scalar)."""
        f = np.asarray(force_n, dtype=np.float64)
        return np.polynomial.polynomial.polyval(f, self.coefficients)

    def sensitivity_m_per_n(self, force_n: ArrayLike) -> np.ndarray:
        """Slope ``dX/dF`` of the fit in m/N at ``force_n`` (N, any shape)."""
        f = np.asarray(force_n, dtype=np.float64)
        return np.polynomial.polynomial.polyval(
            f, np.polynomial.polynomial.polyder(self.coefficients)
        )

    @property
    def residuals_n(self) -> np.ndarray:
        """Residuals converted to force, ``r_i/(dX/dF at F_i)``, N, shape (n,)."""
        return self.residuals_m / self.sensitivity_m_per_n(self.force_n)

    def force_at(
        self, deflection_m: ArrayLike, *, allow_extrapolation: bool = False
    ) -> np.ndarray:
        """Force in N whose fitted deflection is ``deflection_m`` (m, any shape).

        Degree 1 inverts in closed form; degrees 2 and 3 take the real root of the
        polynomial (``numpy.polynomial.polynomial.polyroots`` on the force scaled to the
        range, then two Newton steps) that lies in the calibrated range.

        Raises:
            ParameterError: the force would be outside `force_range_n` (unless
                ``allow_extrapolation``), no real root, or more than one root in range
                (the fit is not monotonic there).
        """
        x = np.asarray(deflection_m, dtype=np.float64)
        if not np.all(np.isfinite(x)):
            raise ParameterError("deflection_m holds NaN or inf; give finite deflections in m")
        flat = x.reshape(-1)
        out = np.array([self._force_one(float(v), allow_extrapolation) for v in flat])
        return out.reshape(x.shape)

    def _force_one(self, x: float, extrapolate: bool) -> float:
        lo, hi = self.force_range_n
        tol = 1e-9 * max(abs(hi), hi - lo)
        fix = (
            f"the calibrated range is {lo:.6g}..{hi:.6g} N (deflections "
            f"{float(self.deflection_at(lo)):.6g}..{float(self.deflection_at(hi)):.6g} m); "
            "pass allow_extrapolation=True to go beyond it"
        )
        c = self.coefficients
        if self.degree == 1:
            if c[1] == 0.0:
                raise ParameterError("the fitted slope is 0; the force cannot be recovered")
            f = (x - c[0]) / c[1]
            if not extrapolate and not lo - tol <= f <= hi + tol:
                raise ParameterError(f"deflection {x!r} m gives {f:.6g} N, outside range; {fix}")
            return float(f)
        scale = max(abs(lo), abs(hi))
        scaled = c * scale ** np.arange(c.size)
        scaled[0] -= x
        roots = np.polynomial.polynomial.polyroots(scaled)
        real = [r.real * scale for r in roots if abs(r.imag) <= 1e-7 * max(1.0, abs(r))]
        real = [self._newton(x, f) for f in real]
        if not real:
            raise ParameterError(f"deflection {x!r} m is never reached by the fit; {fix}")
        inside = [f for f in real if lo - tol <= f <= hi + tol]
        if len(inside) > 1:
            raise ParameterError(
                f"deflection {x!r} m is reached at {len(inside)} forces in range "
                f"({', '.join(f'{f:.6g}' for f in inside)} N): the fit is not monotonic; "
                "use a lower degree or check the data"
            )
        if inside:
            return inside[0]
        if not extrapolate:
            raise ParameterError(f"deflection {x!r} m is outside the calibrated range; {fix}")
        return min(real, key=lambda f: max(lo - f, f - hi))

    def _newton(self, x: float, f: float) -> float:
        for _ in range(2):
            slope = float(self.sensitivity_m_per_n(f))
            if slope == 0.0:
                break
            f -= (float(self.deflection_at(f)) - x) / slope
        return float(f)


def fit_static(
    force_n: ArrayLike, deflection_m: ArrayLike, *, degree: int = 1, intercept: bool = True
) -> StaticFit:
    """Least-squares fit of the deflection as a polynomial of the force (as ISO 376 does).

    The design matrix holds the powers of ``F/F_max`` (scaled for conditioning) and is
    solved by QR; the coefficient covariance is ``s²·(XᵀX)⁻¹`` mapped back to ``c_j``.

    Args:
        force_n: forces in N, shape (n,), finite.
        deflection_m: deflections in m, shape (n,), finite.
        degree: 1, 2 or 3.
        intercept: fit ``c0`` (True) or force the curve through the origin (False).

    Raises:
        ParameterError: bad shapes or values, a degree outside 1..3, fewer distinct forces
            than coefficients, or no degree of freedom left for the residual variance.
    """
    if (
        isinstance(degree, bool)
        or not isinstance(degree, int | np.integer)
        or not (1 <= degree <= 3)
    ):
        raise ParameterError(f"degree = {degree!r}; it must be 1, 2 or 3")
    degree = int(degree)
    force = _finite_array("force_n", force_n, "N")
    defl = _finite_array("deflection_m", deflection_m, "m")
    if force.size != defl.size:
        raise ParameterError(
            f"force_n has {force.size} values and deflection_m {defl.size}; give one each"
        )
    powers = np.arange(0 if intercept else 1, degree + 1)
    p = powers.size
    distinct = np.unique(force).size
    if distinct < p or (not intercept and distinct == 1 and force[0] == 0.0):
        raise ParameterError(
            f"{distinct} distinct force(s) cannot fix {p} coefficients; give at least {p} "
            "different loads or lower the degree"
        )
    if force.size <= p:
        raise ParameterError(
            f"{force.size} points for {p} coefficients leave no degree of freedom; give at "
            f"least {p + 1} points"
        )
    scale = float(np.max(np.abs(force)))
    if scale == 0.0:
        raise ParameterError("every force is 0; give loaded points")
    X = (force[:, None] / scale) ** powers[None, :]
    Q, R = np.linalg.qr(X)
    if np.min(np.abs(np.diag(R))) <= 1e-12 * np.max(np.abs(np.diag(R))):
        raise ParameterError(
            "the forces do not fix the coefficients (rank-deficient design); give more "
            "different loads or lower the degree"
        )
    a = scipy.linalg.solve_triangular(R, Q.T @ defl)
    residuals = defl - X @ a
    dof = force.size - p
    s2 = float(residuals @ residuals) / dof
    R_inv = scipy.linalg.solve_triangular(R, np.eye(p))
    cov_a = s2 * (R_inv @ R_inv.T)
    unscale = scale ** (-powers.astype(np.float64))
    coefficients = np.zeros(degree + 1)
    coefficients[powers] = a * unscale
    covariance = np.zeros((degree + 1, degree + 1))
    covariance[np.ix_(powers, powers)] = cov_a * np.outer(unscale, unscale)
    return StaticFit(
        degree=degree,
        intercept=bool(intercept),
        coefficients=coefficients,
        covariance=covariance,
        force_n=force,
        deflection_m=defl,
        residuals_m=residuals,
        residual_std_m=math.sqrt(s2),
        dof=dof,
    )
