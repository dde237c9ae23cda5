"""Second-order model of the force cell: a spring-mass-damper read as a displacement.

The cell obeys ``m·x'' + b·x' + k·x = F(t)``, or in standard form
``x'' + 2ζωn·x' + ωn²·x = ωn²·F/k`` with

* ``ωn = sqrt(k/m)``            natural frequency, rad/s,
* ``ζ  = b / (2·sqrt(k·m))``    damping ratio, dimensionless,
* ``ωd = ωn·sqrt(1 − ζ²)``      damped frequency, rad/s (ζ < 1 only).

Units are SI throughout: mass kg, damping N·s/m, stiffness N/m, force N,
displacement m, time s.

Step response (force step ``F0`` at t = 0, cell at rest, ``xs = F0/k``, ``τ = ωn·t``),
the textbook closed forms (Ogata, "Modern Control Engineering", chapter on transient
response of second-order systems; see docs/method-plant.md):

* ζ < 1:  ``x = xs·[1 − e^(−ζτ)·(cos βτ + (ζ/β)·sin βτ)]``,   ``β = sqrt(1 − ζ²)``
* ζ = 1:  ``x = xs·[1 − e^(−τ)·(1 + τ)]``
* ζ > 1:  ``x = xs·[1 − e^(−ζτ)·(cosh γτ + (ζ/γ)·sinh γτ)]``, ``γ = sqrt(ζ² − 1)``

The overdamped form is evaluated as
``½(e^(s1·τ) + e^(s2·τ)) + ζ·e^(s1·τ)·(−expm1(−2γτ))/(2γ)`` with the slow root
``s1 = −1/(ζ + γ)`` and the fast root ``s2 = −(ζ + γ)``: no overflow of cosh/sinh at
large τ, no cancellation in ``s1`` at large ζ, and no cancellation in the difference of
exponentials as γ → 0, so the response is continuous and accurate through ζ = 1.
The underdamped form keeps ``sin(βτ)/β`` which is accurate for small β as it stands.
``β`` and ``γ`` are computed as ``sqrt((1 − ζ)(1 + ζ))`` to keep their relative accuracy
near ζ = 1.

Settling time: common practice quotes about ``4/(ζωn)`` for an underdamped cell to
a 2 % band. This module does not use that rule; it computes the settling time exactly
as the last instant the closed-form step response is outside ``±band`` of its final
value (bracketing, then ``scipy.optimize.brentq``).

Discretisation: exact zero-order hold, ``Φ = e^(A·dt)``, ``Γ = ∫₀^dt e^(A·s) ds·B``,
both read off ``expm([[A, B], [0, 0]]·dt)`` (Franklin, Powell & Workman,
"Digital Control of Dynamic Systems"; Van Loan 1978).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
import scipy.linalg
import scipy.optimize
from numpy.typing import ArrayLike

from estimator.errors import ParameterError
from estimator.validation import finite_float as _finite_float

__all__ = [
    "CellDesign",
    "DiscretePlant",
    "Plant",
    "damping_ratio_for_overshoot",
    "design_cell",
    "normalised_settling_time",
]

#: |ζ − 1| at or below this counts as critically damped for `Plant.regime`.
CRITICAL_TOLERANCE = 1e-9

# brentq's smallest allowed relative tolerance is 4·eps; the absolute one is in τ units
# (dimensionless, settling τ is of order 1..1e6), so 1e-14 is below one ulp of τ ≈ 4.
_BRENTQ_RTOL = 4.0 * np.finfo(float).eps
_BRENTQ_XTOL = 1e-14
_BRENTQ_MAXITER = 500


# --------------------------------------------------------------------------- validation


def _positive(name: str, value: object, unit: str, what: str) -> float:
    fix = f"give {what} as a finite number > 0 {unit}".rstrip()
    number = _finite_float(name, value, fix)
    if not number > 0.0:
        raise ParameterError(f"{name} = {number!r} must be > 0; {fix}")
    return number


def _non_negative(name: str, value: object, unit: str, what: str) -> float:
    fix = f"give {what} as a finite number >= 0 {unit}".rstrip()
    number = _finite_float(name, value, fix)
    if not number >= 0.0:
        raise ParameterError(f"{name} = {number!r} must be >= 0; {fix}")
    return number


def _band(band: object) -> float:
    fix = "give the settling band as a fraction of the final value in (0, 1), e.g. 0.02 for 2 %"
    number = _finite_float("band", band, fix)
    if not 0.0 < number < 1.0:
        raise ParameterError(f"band = {number!r} is outside (0, 1); {fix}")
    return number


# ------------------------------------------------------------- normalised closed forms


def _residual(zeta: float, tau: np.ndarray) -> np.ndarray:
    """``1 − y(τ)`` of the unit step response ``y``, for ``τ ≥ 0`` (float64, same shape).

    The residual ``g(τ)`` is what is left to travel to the final value, as a fraction
    of it: ``g(0) = 1``, ``g(∞) = 0`` when ζ > 0.
    """
    if zeta < 1.0:
        beta = math.sqrt((1.0 - zeta) * (1.0 + zeta))
        return np.exp(-zeta * tau) * (np.cos(beta * tau) + zeta * np.sin(beta * tau) / beta)
    gamma = math.sqrt((zeta - 1.0) * (zeta + 1.0))
    slow = -1.0 / (zeta + gamma)  # s1 = −ζ + γ without cancellation (s1·s2 = 1)
    fast = -(zeta + gamma)  # s2
    e_slow = np.exp(slow * tau)
    # (e^(s1τ) − e^(s2τ)) / (2γ) = e^(s1τ)·(−expm1(−2γτ))/(2γ) → τ·e^(s1τ) as γ → 0
    sinh_term = tau if gamma == 0.0 else -np.expm1(-2.0 * gamma * tau) / (2.0 * gamma)
    return 0.5 * (e_slow + np.exp(fast * tau)) + zeta * e_slow * sinh_term


def _residual_scalar(zeta: float, tau: float) -> float:
    return float(_residual(zeta, np.asarray(tau, dtype=np.float64)))


def _normalised_settling(zeta: float, band: float) -> float:
    """Exact settling time in units of ``1/ωn`` (``ωn·ts``); ``inf`` for ζ = 0."""
    if zeta == 0.0:
        return math.inf  # undamped: oscillates for ever with amplitude 1 > band
    if zeta >= 1.0:
        # The residual decreases monotonically from 1 to 0 (impulse response > 0):
        # one crossing of g = band. Double the upper bracket until it is past it.
        hi = 1.0
        while _residual_scalar(zeta, hi) > band:
            hi *= 2.0
        lo = 0.0
        sign = 1.0
    else:
        # Extrema of g are exactly at τn = nπ/β (g' ∝ −e^(−ζτ)·sin βτ) where
        # |g(τn)| = e^(−ζnπ/β). The last extremum with |g| > band is number n; g is
        # monotone from τn to τn+1 and crosses (−1)^n·band exactly once there.
        beta = math.sqrt((1.0 - zeta) * (1.0 + zeta))

        def peak(k: int) -> float:
            return math.exp(-zeta * k * math.pi / beta)

        n = max(0, math.ceil(math.log(1.0 / band) * beta / (zeta * math.pi)) - 1)
        while peak(n + 1) > band:
            n += 1
        while n > 0 and peak(n) <= band:
            n -= 1
        lo = n * math.pi / beta
        # The envelope e^(−ζτ)/β bounds |g|; past τ_env it is below band.
        tau_env = math.log(1.0 / (beta * band)) / zeta
        hi = min((n + 1) * math.pi / beta, max(tau_env, lo))
        sign = -1.0 if n % 2 else 1.0

    def excess(tau: float) -> float:
        return sign * _residual_scalar(zeta, tau) - band

    if excess(hi) >= 0.0:  # only when the root sits on the bracket end itself
        return hi
    return float(
        scipy.optimize.brentq(
            excess, lo, hi, xtol=_BRENTQ_XTOL, rtol=_BRENTQ_RTOL, maxiter=_BRENTQ_MAXITER
        )
    )


# ---------------------------------------------------------------------------- the plant


@dataclass(frozen=True)
class Plant:
    """Continuous-time spring-mass-damper force cell, ``m·x'' + b·x' + k·x = F``.

    Attributes:
        mass_kg: moving mass ``m`` in kg, finite and > 0.
        damping_n_s_per_m: viscous damping ``b`` in N·s/m, finite and >= 0
            (0 is the undamped oscillator).
        stiffness_n_per_m: spring stiffness ``k`` in N/m, finite and > 0.

    Raises:
        ParameterError: a field is not a finite number or out of range; the message
            names the field, the value and the fix.
    """

    mass_kg: float
    damping_n_s_per_m: float
    stiffness_n_per_m: float

    def __post_init__(self) -> None:
        mass = _positive("mass_kg", self.mass_kg, "kg", "the cell's moving mass")
        damping = _non_negative(
            "damping_n_s_per_m", self.damping_n_s_per_m, "N·s/m", "the viscous damping"
        )
        stiffness = _positive(
            "stiffness_n_per_m", self.stiffness_n_per_m, "N/m", "the spring stiffness"
        )
        object.__setattr__(self, "mass_kg", mass)
        object.__setattr__(self, "damping_n_s_per_m", damping)
        object.__setattr__(self, "stiffness_n_per_m", stiffness)

    @classmethod
    def from_modal(
        cls, natural_freq_rad_s: float, damping_ratio: float, stiffness_n_per_m: float
    ) -> Plant:
        """Build a plant from ``ωn`` (rad/s, > 0), ``ζ`` (>= 0) and ``k`` (N/m, > 0).

        ``m = k/ωn²`` and ``b = 2ζ·sqrt(k·m) = 2ζ·k/ωn``.
        """
        wn = _positive("natural_freq_rad_s", natural_freq_rad_s, "rad/s", "the natural frequency")
        zeta = _non_negative("damping_ratio", damping_ratio, "", "the damping ratio ζ")
        k = _positive("stiffness_n_per_m", stiffness_n_per_m, "N/m", "the spring stiffness")
        return cls(
            mass_kg=k / (wn * wn),
            damping_n_s_per_m=2.0 * zeta * k / wn,
            stiffness_n_per_m=k,
        )

    # -------------------------------------------------------------- modal quantities

    @property
    def natural_freq_rad_s(self) -> float:
        """Undamped natural frequency ``ωn = sqrt(k/m)`` in rad/s."""
        return math.sqrt(self.stiffness_n_per_m / self.mass_kg)

    @property
    def natural_freq_hz(self) -> float:
        """Undamped natural frequency ``ωn/(2π)`` in Hz."""
        return self.natural_freq_rad_s / (2.0 * math.pi)

    @property
    def damping_ratio(self) -> float:
        """Damping ratio ``ζ = b/(2·sqrt(k·m))``, dimensionless, >= 0."""
        return self.damping_n_s_per_m / (
            2.0 * math.sqrt(self.stiffness_n_per_m) * math.sqrt(self.mass_kg)
        )

    @property
    def damped_freq_rad_s(self) -> float:
        """Damped frequency ``ωd = ωn·sqrt(1 − ζ²)`` in rad/s; 0.0 when ζ >= 1."""
        zeta = self.damping_ratio
        if zeta >= 1.0:
            return 0.0
        return self.natural_freq_rad_s * math.sqrt((1.0 - zeta) * (1.0 + zeta))

    @property
    def regime(self) -> str:
        """``"underdamped"``, ``"critically damped"`` (|ζ − 1| <= 1e-9) or ``"overdamped"``."""
        zeta = self.damping_ratio
        if abs(zeta - 1.0) <= CRITICAL_TOLERANCE:
            return "critically damped"
        return "underdamped" if zeta < 1.0 else "overdamped"

    # ------------------------------------------------------------------ state space

    def state_space(self) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """Return ``(A, B, C, D)`` of ``s' = A·s + B·F``, ``x = C·s + D·F``.

        State ``s = [x (m), v (m/s)]``, input force ``F`` (N), output displacement
        ``x`` (m). Shapes: A (2, 2) in [1/s², 1/s], B (2, 1) in [0, 1/kg],
        C (1, 2), D (1, 1); all float64, fresh arrays on each call.
        """
        m, b, k = self.mass_kg, self.damping_n_s_per_m, self.stiffness_n_per_m
        A = np.array([[0.0, 1.0], [-k / m, -b / m]], dtype=np.float64)
        B = np.array([[0.0], [1.0 / m]], dtype=np.float64)
        C = np.array([[1.0, 0.0]], dtype=np.float64)
        D = np.zeros((1, 1), dtype=np.float64)
        return A, B, C, D

    def discretize(self, sample_period_s: float) -> DiscretePlant:
        """Exact zero-order-hold model over ``sample_period_s`` seconds (finite, > 0).

        ``expm([[A, B], [0, 0]]·dt) = [[Φ, Γ], [0, 1]]`` (Van Loan's block form).
        """
        dt = _positive("sample_period_s", sample_period_s, "s", "the sample period")
        A, B, _, _ = self.state_space()
        augmented = np.zeros((3, 3), dtype=np.float64)
        augmented[:2, :2] = A
        augmented[:2, 2:] = B
        exp_m = scipy.linalg.expm(augmented * dt)
        return DiscretePlant(
            phi=exp_m[:2, :2].copy(),
            gamma=exp_m[:2, 2:].copy(),
            sample_period_s=dt,
            plant=self,
        )

    # ----------------------------------------------------------------- step response

    def step_response(self, t_s: ArrayLike, force_n: float = 1.0) -> np.ndarray:
        """Displacement in m for a force step of ``force_n`` N applied at t = 0.

        Closed form (module docstring), valid and numerically stable for every ζ >= 0,
        including ζ = 0 and ζ at or near 1. The cell is at rest before the step, so the
        result is 0 for ``t < 0``.

        Args:
            t_s: time(s) in s, scalar or array of any shape, finite.
            force_n: step height in N, finite.

        Returns:
            float64 array of the shape of ``t_s`` (0-d for a scalar).
        """
        force = _finite_float("force_n", force_n, "give the step force as a finite number in N")
        t = np.asarray(t_s, dtype=np.float64)
        if not np.all(np.isfinite(t)):
            raise ParameterError(
                f"t_s contains {int(np.count_nonzero(~np.isfinite(t)))} non-finite value(s); "
                "give finite times in s"
            )
        tau = np.maximum(t, 0.0) * self.natural_freq_rad_s
        y = 1.0 - _residual(self.damping_ratio, tau)
        x = (force / self.stiffness_n_per_m) * y
        return np.where(t < 0.0, 0.0, x).astype(np.float64, copy=False)

    def settling_time_s(self, band: float = 0.02) -> float:
        """Exact settling time in s to within ``±band`` (fraction, in (0, 1)) of the final value.

        The last instant the closed-form step response is outside the band, found by
        bracketing the last excursion (for ζ < 1 the extrema are exactly at ``nπ/ωd``)
        and refining with ``scipy.optimize.brentq``. Common practice quotes about
        ``4/(ζωn)`` for an underdamped cell at 2 %; that is an envelope estimate, not
        used here. Returns ``math.inf`` for the undamped cell (ζ = 0).
        """
        return _normalised_settling(self.damping_ratio, _band(band)) / self.natural_freq_rad_s

    def peak_overshoot(self) -> float:
        """Peak overshoot as a fraction of the final value: ``exp(−ζπ/sqrt(1 − ζ²))``, ζ < 1.

        0.0 for ζ >= 1 (no overshoot).
        """
        zeta = self.damping_ratio
        if zeta >= 1.0:
            return 0.0
        return math.exp(-zeta * math.pi / math.sqrt((1.0 - zeta) * (1.0 + zeta)))

    def peak_time_s(self) -> float:
        """Time of the first peak in s, ``π/ωd`` for ζ < 1, ``math.inf`` otherwise."""
        wd = self.damped_freq_rad_s
        if self.damping_ratio >= 1.0 or wd == 0.0:
            return math.inf
        return math.pi / wd


@dataclass(frozen=True, eq=False)
class DiscretePlant:
    """Zero-order-hold discrete model ``s[j+1] = Φ·s[j] + Γ·F[j]``.

    Attributes:
        phi: state transition ``Φ`` over one period, shape (2, 2), float64, read-only.
        gamma: force input matrix ``Γ``, shape (2, 1): m per N and m/s per N, read-only.
        sample_period_s: the period in s.
        plant: the continuous plant it came from.

    Equality is identity (arrays do not give a single truth value).
    """

    phi: np.ndarray
    gamma: np.ndarray
    sample_period_s: float
    plant: Plant = field(repr=False)

    def __post_init__(self) -> None:
        phi = np.array(self.phi, dtype=np.float64)
        gamma = np.array(self.gamma, dtype=np.float64)
        if phi.shape != (2, 2):
            raise ParameterError(f"phi has shape {phi.shape}; it must be (2, 2)")
        if gamma.shape != (2, 1):
            raise ParameterError(f"gamma has shape {gamma.shape}; it must be (2, 1)")
        phi.setflags(write=False)
        gamma.setflags(write=False)
        object.__setattr__(self, "phi", phi)
        object.__setattr__(self, "gamma", gamma)
        object.__setattr__(
            self,
            "sample_period_s",
            _positive("sample_period_s", self.sample_period_s, "s", "the sample period"),
        )


# ------------------------------------------------------------------- design helpers


def damping_ratio_for_overshoot(overshoot: float) -> float:
    """Damping ratio giving a peak overshoot ``overshoot`` (fraction in (0, 1)).

    ``ζ = −ln(OS)/sqrt(π² + ln²(OS))``, the inverse of ``Plant.peak_overshoot``.
    """
    fix = "give the peak overshoot as a fraction in (0, 1), e.g. 0.05 for 5 %"
    os_ = _finite_float("overshoot", overshoot, fix)
    if not 0.0 < os_ < 1.0:
        raise ParameterError(f"overshoot = {os_!r} is outside (0, 1); {fix}")
    log_os = math.log(os_)
    return -log_os / math.sqrt(math.pi**2 + log_os**2)


def normalised_settling_time(damping_ratio: float, band: float = 0.02) -> float:
    """Exact ``ωn·ts`` (dimensionless) of the step response to ``±band`` of final value.

    Depends on ζ and the band only. Common practice quotes about ``4/ζ`` at 2 %; this
    is the exact value from the closed-form response. ``math.inf`` for ζ = 0.
    """
    zeta = _non_negative("damping_ratio", damping_ratio, "", "the damping ratio ζ")
    return _normalised_settling(zeta, _band(band))


@dataclass(frozen=True)
class CellDesign:
    """A cell sized for a settling time and an overshoot (or damping ratio).

    Attributes:
        natural_freq_rad_s: ωn in rad/s.
        damping_ratio: ζ, dimensionless.
        stiffness_n_per_m: k in N/m.
        damping_n_s_per_m: b in N·s/m.
        mass_kg: m in kg (the given moving mass).
        settling_time_s: the target settling time in s.
        band: the settling band, fraction of the final value.
        overshoot: peak overshoot, fraction of the final value (0.0 when ζ >= 1).
    """

    natural_freq_rad_s: float
    damping_ratio: float
    stiffness_n_per_m: float
    damping_n_s_per_m: float
    mass_kg: float
    settling_time_s: float
    band: float
    overshoot: float

    @property
    def plant(self) -> Plant:
        """The designed cell as a `Plant`."""
        return Plant(
            mass_kg=self.mass_kg,
            damping_n_s_per_m=self.damping_n_s_per_m,
            stiffness_n_per_m=self.stiffness_n_per_m,
        )


def design_cell(
    settling_time_s: float,
    mass_kg: float,
    *,
    overshoot: float | None = None,
    damping_ratio: float | None = None,
    band: float = 0.02,
) -> CellDesign:
    """Size stiffness and damping for a moving mass, a settling time and a shape.

    Give exactly one of ``overshoot`` (fraction in (0, 1)) or ``damping_ratio`` (> 0).
    For a fixed ζ the product ``ωn·ts`` is a constant, so
    ``ωn = normalised_settling_time(ζ, band)/settling_time_s``, ``k = m·ωn²`` and
    ``b = 2ζ·sqrt(k·m) = 2ζ·m·ωn``. The settling time is the exact one (not the
    common-practice ``4/(ζωn)``).

    Args:
        settling_time_s: target settling time in s, finite and > 0.
        mass_kg: moving mass in kg, finite and > 0.
        overshoot: target peak overshoot, fraction.
        damping_ratio: target ζ, finite and > 0 (ζ = 0 never settles).
        band: settling band, fraction of the final value in (0, 1).

    Raises:
        ParameterError: both or neither of overshoot/damping_ratio, or a bad value.
    """
    if (overshoot is None) == (damping_ratio is None):
        raise ParameterError(
            f"overshoot = {overshoot!r} and damping_ratio = {damping_ratio!r}: give exactly "
            "one of them (overshoot as a fraction in (0, 1), or damping_ratio > 0)"
        )
    ts = _positive("settling_time_s", settling_time_s, "s", "the target settling time")
    mass = _positive("mass_kg", mass_kg, "kg", "the cell's moving mass")
    band_ = _band(band)
    if overshoot is not None:
        zeta = damping_ratio_for_overshoot(overshoot)
    else:
        zeta = _positive("damping_ratio", damping_ratio, "", "the damping ratio ζ")
    wn = _normalised_settling(zeta, band_) / ts
    stiffness = mass * wn * wn
    damping = 2.0 * zeta * mass * wn
    if not (math.isfinite(stiffness) and stiffness > 0.0 and math.isfinite(damping)):
        raise ParameterError(
            f"settling_time_s = {ts!r} with mass_kg = {mass!r} gives stiffness "
            f"{stiffness!r} N/m and damping {damping!r} N·s/m, outside float range; "
            "use a less extreme settling time or mass"
        )
    design_os = (
        math.exp(-zeta * math.pi / math.sqrt((1.0 - zeta) * (1.0 + zeta))) if zeta < 1.0 else 0.0
    )
    return CellDesign(
        natural_freq_rad_s=wn,
        damping_ratio=zeta,
        stiffness_n_per_m=stiffness,
        damping_n_s_per_m=damping,
        mass_kg=mass,
        settling_time_s=ts,
        band=band_,
        overshoot=design_os,
    )
