"""The force observer: an augmented-state Kalman filter on the cell's plant model.

State ``s = [x, v, F]``: displacement (m), velocity (m/s) and the applied force (N).
The plant is ``m·x'' + b·x' + k·x = F``; the force is a random walk,
``dF/dt = w`` with ``w`` white noise of intensity ``q`` (N²/s). The only measurement
is the displacement, ``z = x + noise``, ``H = [1, 0, 0]``.

Discretisation is exact: ``Φ = exp(A·dt)`` and the process noise ``Qd`` by Van Loan's
method (see :mod:`estimator.discretization`). The measurement variance is the
transducer's white-noise variance plus the quantisation variance ``LSB²/12``.

Two paths compute the same filter:

* the **time-varying path** runs filterpy's ``KalmanFilter`` one sample at a time
  (Joseph-form covariance update). It serves the start-up transient, gaps in time,
  missing samples, rejected outliers and re-acquisition after a load jump;
* the **steady-state path** serves long stretches of uniform sampling. Once the
  covariance has converged to the solution of the discrete algebraic Riccati
  equation, the filter is the fixed linear recursion
  ``s[n] = (I − K H) Φ s[n−1] + K z[n]``. It is run in the complex Schur basis of
  that matrix, where it becomes a chain of first-order recursions, each applied by
  ``scipy.signal.lfilter`` (compiled), so millions of samples cost milliseconds.

The observer switches between the two whenever the data require it; every decision
depends only on past samples, so the estimates are bit-identical whatever the sizes
of the blocks the samples arrive in.

Outliers: a sample whose innovation exceeds ``gate_sigma`` standard deviations is
not used (predict only) and is counted. A single random-walk intensity cannot follow
a sudden load change of many standard deviations, so after ``reacquire_after``
consecutive gated samples the observer concludes that the load has jumped: it reopens
its velocity and force uncertainty to the start-up prior, uses the sample, and
counts a re-acquisition.

References: R. E. Kalman (1960), "A new approach to linear filtering and prediction
problems", J. Basic Eng. 82(1); Y. Bar-Shalom, X. R. Li, T. Kirubarajan (2001),
"Estimation with Applications to Tracking and Navigation" (innovation gating, NIS).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import TYPE_CHECKING

import numpy as np
import scipy.linalg
import scipy.optimize
import scipy.signal
from filterpy.kalman import KalmanFilter

from estimator.discretization import van_loan
from estimator.errors import EstimatorError, ParameterError
from estimator.plant import Plant

if TYPE_CHECKING:
    from estimator.profile import CellProfile

__all__ = [
    "ESTIMATE_DTYPE",
    "FLAG_GAP",
    "FLAG_MISSING",
    "FLAG_REACQUIRED",
    "FLAG_REJECTED",
    "FLAG_STEADY",
    "ForceObserver",
    "ObserverTuning",
    "augmented_model",
    "concat_estimates",
    "process_noise_for_bandwidth",
]

#: One row per input sample. Units: s, N, N (standard uncertainty, k = 1), m, m/s, m.
ESTIMATE_DTYPE = np.dtype(
    [
        ("time_s", "<f8"),
        ("force_n", "<f8"),
        ("force_u_n", "<f8"),
        ("displacement_m", "<f8"),
        ("velocity_m_s", "<f8"),
        ("innovation_m", "<f8"),
        ("nis", "<f8"),
        ("flags", "<u4"),
    ]
)

FLAG_REJECTED = 1  #: innovation outside the gate; the sample was not used
FLAG_MISSING = 2  #: no measurement (NaN); predict only
FLAG_GAP = 4  #: the time step before this sample was longer than 1.5 nominal periods
FLAG_REACQUIRED = 8  #: force uncertainty reopened after consecutive gated samples
FLAG_STEADY = 16  #: computed on the steady-state path

_CHUNK = 65536  # longest steady-state stretch computed at once (bounds wasted work)
_CONVERGED = 1e-10  # covariance distance from steady state at which the paths switch
# Above ~10 kHz the time-varying recursion settles on a rounding floor up to ~1e-7 away
# from the steady-state solution; it switches there once P stops moving.
_NEAR = 1e-6
_STALLED = 1e-13


@dataclass(frozen=True)
class ObserverTuning:
    """How the observer trades noise against speed, and how it treats bad samples.

    Attributes:
        force_bandwidth_hz: −3 dB bandwidth of the force estimate in the quasi-static
            limit (well below the cell's natural frequency); sets ``q`` unless
            ``process_noise_n2_per_s`` is given.
        process_noise_n2_per_s: random-walk intensity ``q`` of the force (N²/s);
            overrides the bandwidth when set.
        gate_sigma: innovation gate, in standard deviations of the innovation.
        reacquire_after: consecutive gated samples after which a load jump is assumed.
        timing_tolerance: a step within this fraction of the nominal period counts
            as uniform and uses the nominal model.
        initial_force_sigma_n: prior standard deviation of the force at start-up and
            at re-acquisition (N); default: the rated range given to the observer.
        steady_path: use the steady-state fast path when it applies; ``False`` keeps
            every sample on the time-varying path (a reference for tests and
            benchmarks; same results to about 1e-12, about 1000 times slower).
    """

    force_bandwidth_hz: float = 20.0
    process_noise_n2_per_s: float | None = None
    gate_sigma: float = 5.0
    reacquire_after: int = 3
    timing_tolerance: float = 0.01
    initial_force_sigma_n: float | None = None
    steady_path: bool = True

    def __post_init__(self) -> None:
        _positive("force_bandwidth_hz", self.force_bandwidth_hz)
        if self.process_noise_n2_per_s is not None:
            _positive("process_noise_n2_per_s", self.process_noise_n2_per_s)
        _positive("gate_sigma", self.gate_sigma)
        if not (isinstance(self.reacquire_after, int) and self.reacquire_after >= 1):
            raise ParameterError(
                f"reacquire_after = {self.reacquire_after!r}: must be an integer >= 1"
            )
        _positive("timing_tolerance", self.timing_tolerance)
        if self.timing_tolerance >= 0.5:
            raise ParameterError(
                f"timing_tolerance = {self.timing_tolerance!r}: must be below 0.5 of a period"
            )
        if self.initial_force_sigma_n is not None:
            _positive("initial_force_sigma_n", self.initial_force_sigma_n)


def _positive(name: str, value: float) -> None:
    if not (isinstance(value, int | float) and math.isfinite(value) and value > 0):
        raise ParameterError(f"{name} = {value!r}: must be a finite number > 0")


def augmented_model(plant: Plant) -> tuple[np.ndarray, np.ndarray]:
    """Continuous model of the augmented state ``[x, v, F]``.

    Returns ``(A, L)``: ``A`` (3, 3) with ``x' = v``, ``v' = (F − k x − b v)/m``,
    ``F' = w``; ``L`` (3, 1) routes the force noise ``w`` into ``F'``.
    """
    m, b, k = plant.mass_kg, plant.damping_n_s_per_m, plant.stiffness_n_per_m
    A = np.array([[0.0, 1.0, 0.0], [-k / m, -b / m, 1.0 / m], [0.0, 0.0, 0.0]])
    L = np.array([[0.0], [0.0], [1.0]])
    return A, L


def process_noise_for_bandwidth(
    bandwidth_hz: float, stiffness_n_per_m: float, measurement_var_m2: float, dt_s: float
) -> float:
    """Random-walk intensity ``q`` (N²/s) that gives a force bandwidth of ``bandwidth_hz``.

    In the quasi-static limit the cell is a gain ``1/k`` and the force is seen through
    white noise of spectral density ``r = k²·R·dt`` (N²·s). The steady Kalman–Bucy
    filter of a random walk of intensity ``q`` seen through noise of density ``r`` is a
    first-order low-pass with corner ``ωc = √(q/r)``, hence ``q = ωc²·k²·R·dt``.
    """
    _positive("bandwidth_hz", bandwidth_hz)
    omega_c = 2.0 * math.pi * bandwidth_hz
    return omega_c**2 * stiffness_n_per_m**2 * measurement_var_m2 * dt_s


@dataclass
class _SteadyState:
    """The converged filter and its Schur-basis recursion (all for the nominal step)."""

    P_prior: np.ndarray  # (3, 3)
    P_post: np.ndarray  # (3, 3)
    K: np.ndarray  # (3, 1)
    S: float  # innovation variance, m²
    T: np.ndarray  # (3, 3) complex upper-triangular: Qᴴ (I − KH) Φ Q
    Z: np.ndarray  # (3, 3) complex unitary Schur vectors
    g: np.ndarray  # (3,) complex: Zᴴ K
    c: np.ndarray  # (3,) complex: H Φ Z, maps u[n−1] to the predicted measurement
    # Modal (eigenvector) form, used when the eigenvectors are well conditioned:
    lam: np.ndarray | None = None  # (3,) eigenvalues of (I − KH)Φ
    V: np.ndarray | None = None  # (3, 3) eigenvectors (columns)
    h: np.ndarray | None = None  # (3,) V⁻¹ K
    modes: tuple[tuple[int, bool], ...] = ()  # (eigen index, is real) filtered; pairs once
    phi_row: np.ndarray | None = None  # (3,) first row of Φ: predicted displacement


@dataclass
class _Counters:
    samples: int = 0
    rejected: int = 0
    missing: int = 0
    gaps: int = 0
    reacquired: int = 0
    steady: int = 0


@dataclass
class _Stepper:
    """Model for one time step, cached by step length."""

    phi: np.ndarray
    Q: np.ndarray
    cache: dict[float, tuple[np.ndarray, np.ndarray]] = field(default_factory=dict)


class ForceObserver:
    """Augmented-state Kalman observer turning displacement samples into force.

    Feed it blocks with :meth:`process`; each call returns one ``ESTIMATE_DTYPE`` row
    per input sample. The observer keeps its state between calls.

    Args:
        plant: the cell's identified second-order model.
        sample_period_s: nominal sampling period (s).
        noise_m: standard deviation of the transducer's white noise (m).
        resolution_m: one ADC count in metres; adds ``LSB²/12`` to the noise variance.
        tuning: see :class:`ObserverTuning`.
        force_range_n: rated span of the cell (N); the default start-up prior.
    """

    def __init__(
        self,
        plant: Plant,
        sample_period_s: float,
        noise_m: float,
        resolution_m: float = 0.0,
        tuning: ObserverTuning | None = None,
        force_range_n: float | None = None,
    ) -> None:
        _positive("sample_period_s", sample_period_s)
        if not (math.isfinite(noise_m) and noise_m >= 0):
            raise ParameterError(f"noise_m = {noise_m!r}: must be a finite number >= 0")
        if not (math.isfinite(resolution_m) and resolution_m >= 0):
            raise ParameterError(f"resolution_m = {resolution_m!r}: must be a finite number >= 0")
        self.plant = plant
        self.tuning = tuning or ObserverTuning()
        self.dt_s = float(sample_period_s)
        #: measurement variance R (m²): white noise plus quantisation LSB²/12
        self.R = noise_m**2 + resolution_m**2 / 12.0
        if self.R <= 0:
            raise ParameterError(
                "noise_m and resolution_m are both 0: the measurement variance must be > 0; "
                "give the transducer noise or the ADC resolution"
            )
        k = plant.stiffness_n_per_m
        if self.tuning.process_noise_n2_per_s is not None:
            self.q = float(self.tuning.process_noise_n2_per_s)
        else:
            self.q = process_noise_for_bandwidth(
                self.tuning.force_bandwidth_hz, k, self.R, self.dt_s
            )
        sigma_f = self.tuning.initial_force_sigma_n or force_range_n or 1e4 * k * math.sqrt(self.R)
        _positive("initial force sigma", sigma_f)
        sigma_v = sigma_f / math.sqrt(k * plant.mass_kg)  # velocity of that energy
        self._reopen = np.diag([0.0, sigma_v**2, sigma_f**2])
        self.A, self.L = augmented_model(plant)
        self.H = np.array([[1.0, 0.0, 0.0]])
        phi, Q = van_loan(self.A, self.L, self.q, self.dt_s)
        self._nominal = _Stepper(phi, Q)
        self._ss = self._steady_state(phi, Q)
        self.counters = _Counters()
        #: When a dict, every time-varying sample's (Φ, P prior, P posterior) is kept
        #: under its index since the last reset (the smoother needs them).
        self.covariance_log: dict[int, tuple[np.ndarray, np.ndarray, np.ndarray]] | None = None
        self.reset()

    # ------------------------------------------------------------------ set-up

    @classmethod
    def from_profile(cls, profile: CellProfile) -> ForceObserver:
        """Build the observer a cell profile describes."""
        obs = profile.observer
        tuning = ObserverTuning(
            force_bandwidth_hz=obs.force_bandwidth_hz,
            process_noise_n2_per_s=obs.process_noise_n2_per_s,
            gate_sigma=obs.gate_sigma,
            reacquire_after=obs.reacquire_after,
        )
        span = profile.limits.force_max_n - profile.limits.force_min_n
        return cls(
            profile.plant.plant(),
            1.0 / profile.acquisition.sample_rate_hz,
            profile.transducer.noise_m,
            profile.transducer.resolution_m,
            tuning,
            force_range_n=span,
        )

    def _steady_state(self, phi: np.ndarray, Q: np.ndarray) -> _SteadyState:
        """Solve the DARE, polish it into a fixed point of our own update, Schur-split it."""
        H, R = self.H, self.R
        # Scale the state to comparable magnitudes for the Riccati solver.
        d = np.sqrt(np.maximum(np.diag(Q), 0.0)) + np.array([math.sqrt(R), 0.0, 0.0])
        d[d == 0] = 1.0
        Di = np.diag(1.0 / d)
        D = np.diag(d)
        phi_s, Q_s, H_s = Di @ phi @ D, Di @ Q @ Di, H @ D
        try:
            P_s = scipy.linalg.solve_discrete_are(phi_s.T, H_s.T, Q_s, np.array([[R]]))
        except (np.linalg.LinAlgError, ValueError) as exc:  # pragma: no cover - defensive
            raise EstimatorError(
                f"no steady-state filter for this cell and tuning: {exc}"
            ) from exc
        P = D @ P_s @ D
        # Polish: iterate exactly the recursion the time-varying path runs until it
        # stops moving, so that path converges onto this very matrix.
        for _ in range(200):
            P_new = self._riccati_step(P, phi, Q)
            delta = _relative_distance(P_new, P)
            P = P_new
            if delta < 1e-15:
                break
        S = float((H @ P @ H.T)[0, 0] + R)
        K = P @ H.T / S
        I_KH = np.eye(3) - K @ H
        P_post = I_KH @ P @ I_KH.T + K * R @ K.T
        A_cl = I_KH @ phi
        T, Z = scipy.linalg.schur(A_cl.astype(complex), output="complex")
        g = Z.conj().T @ K[:, 0]
        c = (H @ phi @ Z)[0]
        ss = _SteadyState(P, P_post, K, S, T, Z, g, c, phi_row=phi[0].copy())
        lam, V = np.linalg.eig(A_cl)
        # Conjugate pairs are run once (the partner is the complex conjugate);
        # an ill-conditioned basis falls back to the Schur chain.
        modes = tuple((i, bool(lam[i].imag == 0)) for i in range(3) if lam[i].imag >= 0)
        paired = sum(2 if real is False else 1 for _, real in modes) == 3
        if paired and np.linalg.cond(V) < 1e6:
            ss.lam, ss.V, ss.h, ss.modes = lam, V, np.linalg.solve(V, K[:, 0]), modes
        return ss

    def _riccati_step(self, P_prior: np.ndarray, phi: np.ndarray, Q: np.ndarray) -> np.ndarray:
        """One update (Joseph form) and predict of the covariance; returns the next prior."""
        H, R = self.H, self.R
        S = (H @ P_prior @ H.T)[0, 0] + R
        K = P_prior @ H.T / S
        I_KH = np.eye(3) - K @ H
        P_post = I_KH @ P_prior @ I_KH.T + K * R @ K.T
        return phi @ P_post @ phi.T + Q

    def reset(self) -> None:
        """Forget every sample: the next one starts the observer afresh."""
        kf = KalmanFilter(dim_x=3, dim_z=1)
        kf.H = self.H.copy()
        kf.R = np.array([[self.R]])
        kf.F = self._nominal.phi
        kf.Q = self._nominal.Q
        self._kf = kf
        self._t_last: float | None = None
        self._steady = False
        self._u = np.zeros(3, complex)  # state in the Schur basis (steady path)
        self._s_last = np.zeros(3)  # last posterior state on the steady path
        self._zf: list[np.ndarray] = []  # lfilter states of the three modes
        self._held: list[tuple[float, np.ndarray, np.ndarray, float]] = []  # samples since _anchor
        self._held_rejected = 0
        if self.covariance_log is not None:
            self.covariance_log = {}
        self._anchor: tuple[np.ndarray, np.ndarray] = (np.zeros((3, 1)), np.eye(3))
        self._P_last: np.ndarray | None = None  # last time-varying posterior covariance
        self.counters = _Counters()

    # ------------------------------------------------------------ properties

    @property
    def steady_force_u_n(self) -> float:
        """Standard uncertainty (k = 1) of the force once converged, N."""
        return math.sqrt(self._ss.P_post[2, 2])

    @property
    def steady_gain(self) -> np.ndarray:
        """Steady-state Kalman gain K, shape (3, 1)."""
        return self._ss.K.copy()

    @property
    def steady_covariance(self) -> np.ndarray:
        """Steady-state posterior covariance P, shape (3, 3), units m, m/s, N."""
        return self._ss.P_post.copy()

    @property
    def innovation_variance_m2(self) -> float:
        """Steady-state innovation variance S = H P⁻ Hᵀ + R, m²."""
        return self._ss.S

    @property
    def is_steady(self) -> bool:
        """True while the observer runs on the steady-state path."""
        return self._steady

    def force_response(self, freq_hz: np.ndarray) -> np.ndarray:
        """Complex response from applied force to estimated force at ``freq_hz``.

        The plant (exactly discretised) in series with the steady-state filter; its
        magnitude is 1 at DC when the model is right.
        """
        w = 2.0 * math.pi * np.atleast_1d(np.asarray(freq_hz, float)) * self.dt_s
        phi, ss = self._nominal.phi, self._ss
        # plant x[n] from force (held over each step): the 2-state corner of Φ and its input
        Ap, Bp = phi[:2, :2], phi[:2, 2:3]
        I_KH_phi = (np.eye(3) - ss.K @ self.H) @ phi
        out = np.empty(w.shape, complex)
        for i, wi in enumerate(w):
            zinv = np.exp(-1j * wi)
            G = (np.linalg.solve(np.eye(2) - Ap * zinv, Bp * zinv))[0, 0]
            Hf = np.linalg.solve(np.eye(3) - I_KH_phi * zinv, ss.K)[2, 0]
            out[i] = G * Hf
        return out

    def force_bandwidth_hz(self) -> float:
        """Measured −3 dB bandwidth of the steady force estimate (Hz)."""
        nyquist = 0.5 / self.dt_s
        grid = np.geomspace(nyquist * 1e-7, nyquist * 0.999, 2000)
        mag = np.abs(self.force_response(grid))
        below = np.nonzero(mag < 1.0 / math.sqrt(2.0))[0]
        if below.size == 0:
            return nyquist
        i = int(below[0])
        if i == 0:
            return float(grid[0])

        def f(x: float) -> float:
            return float(np.abs(self.force_response(np.array([x])))[0]) - 1.0 / math.sqrt(2.0)

        return float(scipy.optimize.brentq(f, grid[i - 1], grid[i], xtol=1e-9 * grid[i]))

    # -------------------------------------------------------------- processing

    def process(self, time_s: np.ndarray, displacement_m: np.ndarray) -> np.ndarray:
        """Estimate force for a block of samples.

        Args:
            time_s: sample times (s), shape (n,), strictly increasing across calls.
            displacement_m: measured displacement (m), shape (n,); NaN marks a
                sample known to be missing (predict only).

        Returns:
            An ``ESTIMATE_DTYPE`` array of shape (n,).
        """
        t = np.ascontiguousarray(time_s, dtype=float).reshape(-1)
        z = np.ascontiguousarray(displacement_m, dtype=float).reshape(-1)
        if t.shape != z.shape:
            raise EstimatorError(
                f"time_s has {t.size} samples but displacement_m has {z.size}: they must match"
            )
        out = np.empty(t.size, ESTIMATE_DTYPE)
        if t.size == 0:
            return out
        if np.any(np.isinf(z)):
            bad = int(np.nonzero(np.isinf(z))[0][0])
            raise EstimatorError(
                f"displacement_m[{bad}] = {float(z[bad])!r}: use NaN for a missing sample, not inf"
            )
        t_before = t[0] - self.dt_s if self._t_last is None else self._t_last
        dt = np.empty_like(t)
        dt[0] = t[0] - t_before
        np.subtract(t[1:], t[:-1], out=dt[1:])
        # min() propagates NaN, so one reduction screens for NaN and for order; finite
        # ends of a strictly increasing series make every time finite.
        if not (dt.min() > 0 and math.isfinite(t[0]) and math.isfinite(t[-1])):
            self._raise_bad_times(t, dt, t_before)
        tol = self.tuning.timing_tolerance * self.dt_s
        if dt.min() >= self.dt_s - tol and dt.max() <= self.dt_s + tol:
            uniform = None  # every step is nominal: the common case, no mask needed
        else:
            uniform = np.abs(dt - self.dt_s) <= tol
        i = 0
        n = t.size
        while i < n:
            if self._steady:
                i = self._run_steady(t, z, uniform, i, out)
            else:
                is_uniform = True if uniform is None else bool(uniform[i])
                self._step_varying(t[i], z[i], dt[i], is_uniform, out, i)
                i += 1
        self._t_last = float(t[-1])
        self.counters.samples += n
        return out

    def _raise_bad_times(self, t: np.ndarray, dt: np.ndarray, t_before: float) -> None:
        """Name the first sample time that is not finite or does not increase."""
        finite = np.isfinite(t)
        if not finite.all():
            bad = int(np.nonzero(~finite)[0][0])
            raise EstimatorError(f"time_s[{bad}] = {float(t[bad])!r}: sample times must be finite")
        bad = int(np.nonzero(~(dt > 0))[0][0])
        prev = t_before if bad == 0 else t[bad - 1]
        raise EstimatorError(
            f"time_s[{bad}] = {float(t[bad])!r} does not come after {float(prev)!r}: "
            "sample times must strictly increase"
        )

    def _step_varying(
        self, t: float, z: float, dt: float, uniform: bool, out: np.ndarray, i: int
    ) -> None:
        """One sample on the time-varying path (filterpy predict/update)."""
        kf = self._kf
        flags = 0
        first = self._t_last is None and i == 0
        before = (kf.x, kf.P)  # filterpy replaces, never mutates, these arrays
        phi, Q = self._nominal.phi, self._nominal.Q
        if first:
            self._start(z)
        else:
            if not uniform:
                phi, Q = self._model_for(dt)
                if dt > 1.5 * self.dt_s:
                    flags |= FLAG_GAP
                    self.counters.gaps += 1
            kf.predict(F=phi, Q=Q)
        y = nis = math.nan
        if math.isnan(z):
            kf.update(None)
            flags |= FLAG_MISSING
            self.counters.missing += 1
            if self._held:
                self._held.append((z, phi, Q, dt))
        else:
            S = kf.P[0, 0] + self.R
            y = z - kf.x[0, 0]
            nis = y * y / S
            if first or nis <= self.tuning.gate_sigma**2:
                kf.update(z)
                self._held.clear()
                self._held_rejected = 0
            else:
                if not self._held:
                    self._anchor = before  # the state before the first gated sample
                if self._held_rejected + 1 >= self.tuning.reacquire_after:
                    self._reacquire(z, phi, Q, dt)
                    flags |= FLAG_REACQUIRED
                    self.counters.reacquired += 1
                else:
                    kf.update(None)
                    self._held.append((z, phi, Q, dt))
                    self._held_rejected += 1
                    flags |= FLAG_REJECTED
                    self.counters.rejected += 1
        x, P = kf.x[:, 0], kf.P
        out[i] = (t, x[2], math.sqrt(P[2, 2]), x[0], x[1], y, nis, flags)
        if self.covariance_log is not None:
            prior = self._ss.P_prior if first else kf.P_prior
            self.covariance_log[self.counters.samples + i] = (phi, prior, P)
        P_last, self._P_last = self._P_last, P
        if self.tuning.steady_path and uniform and not flags and not first:
            dist = _relative_distance(P, self._ss.P_post)
            # Converged; or, at high rates, settled on its own rounding floor (P no longer
            # moves) close to the steady-state solution.
            if dist < _CONVERGED or (
                dist < _NEAR and P_last is not None and _relative_distance(P, P_last) < _STALLED
            ):
                self._enter_steady(x)

    def _reacquire(self, z: float, phi: np.ndarray, Q: np.ndarray, dt: float) -> None:
        """Assume the load jumped just before the run of gated samples began.

        Go back to the state before the first gated sample, predict over that
        interval, then open the covariance of a force jump of unknown size (standard
        deviation: the start-up force prior) at an unknown instant, uniformly
        distributed within the interval, plus the start-up velocity prior; then run
        the held samples and this one through the filter without the gate.
        """
        kf = self._kf
        kf.x, kf.P = self._anchor
        steps = [*self._held, (z, phi, Q, dt)]
        for j, (z_h, phi_h, Q_h, dt_h) in enumerate(steps):
            kf.predict(F=phi_h, Q=Q_h)
            if j == 0:
                kf.P = kf.P + self._jump_covariance(dt_h)
            kf.update(None if math.isnan(z_h) else z_h)
        self._held.clear()
        self._held_rejected = 0

    def _jump_covariance(self, dt: float) -> np.ndarray:
        """Covariance at the end of a step of a force jump at a uniform random instant.

        A jump ΔF at time ``u`` before the end of the step moves the state by about
        ``ΔF·[u²/2m, u/m, 1]``; averaging ``g gᵀ`` over ``u ~ U(0, dt)`` gives the
        moments below (the spring's effect within one step is neglected).
        """
        m = self.plant.mass_kg
        g = np.array(
            [
                [dt**4 / (20 * m * m), dt**3 / (8 * m * m), dt**2 / (6 * m)],
                [dt**3 / (8 * m * m), dt**2 / (3 * m * m), dt / (2 * m)],
                [dt**2 / (6 * m), dt / (2 * m), 1.0],
            ]
        )
        return self._reopen[2, 2] * g + np.diag([0.0, self._reopen[1, 1], 0.0])

    def _start(self, z: float) -> None:
        """Initialise at the first sample: at rest, force = k·z, broad prior."""
        kf = self._kf
        z0 = 0.0 if math.isnan(z) else z
        kf.x = np.array([[z0], [0.0], [self.plant.stiffness_n_per_m * z0]])
        kf.P = self._reopen + np.diag([self.R, 0.0, 0.0])
        kf.x_prior, kf.P_prior = kf.x.copy(), kf.P.copy()

    def _model_for(self, dt: float) -> tuple[np.ndarray, np.ndarray]:
        cache = self._nominal.cache
        hit = cache.get(dt)
        if hit is None:
            if len(cache) > 4096:
                cache.clear()
            hit = cache[dt] = van_loan(self.A, self.L, self.q, dt)
        return hit

    def _enter_steady(self, x: np.ndarray) -> None:
        ss = self._ss
        self._steady = True
        self._s_last = np.array(x, dtype=float)
        if ss.V is not None:
            w = np.linalg.solve(ss.V, x.astype(complex))
            self._zf = [
                np.array([ss.lam[i].real * w[i].real]) if real else np.array([ss.lam[i] * w[i]])
                for i, real in ss.modes
            ]
            return
        self._u = ss.Z.conj().T @ x.astype(complex)
        self._zf = [np.array([ss.T[j, j] * self._u[j]]) for j in range(3)]

    def _leave_steady(self) -> None:
        ss = self._ss
        x = self._s_last if ss.V is not None else (ss.Z @ self._u).real
        self._kf.x = x.reshape(3, 1).copy()
        self._kf.P = ss.P_post.copy()
        self._P_last = None
        self._steady = False

    def _run_steady(
        self,
        t: np.ndarray,
        z: np.ndarray,
        uniform: np.ndarray | None,
        i0: int,
        out: np.ndarray,
    ) -> int:
        """Run the steady path from ``i0``; return the index of the first sample not done.

        ``uniform`` is None when every step of the block is nominal.
        """
        n = t.size
        stop = min(n, i0 + _CHUNK)
        unusable = np.isnan(z[i0:stop])
        if uniform is not None:
            unusable |= ~uniform[i0:stop]
        if unusable.any():
            stop = i0 + int(np.argmax(unusable))
        if stop == i0:
            self._leave_steady()
            return i0
        ss = self._ss
        zc = z[i0:stop]
        if ss.V is not None:
            return self._run_modal(t, zc, i0, out)
        u3, zf3 = scipy.signal.lfilter([ss.g[2]], [1.0, -ss.T[2, 2]], zc, zi=self._zf[2])
        u3_prev = _shift(u3, self._u[2])
        e2 = ss.T[1, 2] * u3_prev + ss.g[1] * zc
        u2, zf2 = scipy.signal.lfilter([1.0], [1.0, -ss.T[1, 1]], e2, zi=self._zf[1])
        u2_prev = _shift(u2, self._u[1])
        e1 = ss.T[0, 1] * u2_prev + ss.T[0, 2] * u3_prev + ss.g[0] * zc
        u1, zf1 = scipy.signal.lfilter([1.0], [1.0, -ss.T[0, 0]], e1, zi=self._zf[0])
        u1_prev = _shift(u1, self._u[0])
        innov = zc - (ss.c[0] * u1_prev + ss.c[1] * u2_prev + ss.c[2] * u3_prev).real
        nis = innov * innov / ss.S
        gated = np.nonzero(nis > self.tuning.gate_sigma**2)[0]
        m = stop - i0
        if gated.size:
            m = int(gated[0])
        if m:
            Zr = ss.Z
            seg = out[i0 : i0 + m]
            seg["time_s"] = t[i0 : i0 + m]
            seg["displacement_m"] = (
                Zr[0, 0] * u1[:m] + Zr[0, 1] * u2[:m] + Zr[0, 2] * u3[:m]
            ).real
            seg["velocity_m_s"] = (Zr[1, 0] * u1[:m] + Zr[1, 1] * u2[:m] + Zr[1, 2] * u3[:m]).real
            seg["force_n"] = (Zr[2, 0] * u1[:m] + Zr[2, 1] * u2[:m] + Zr[2, 2] * u3[:m]).real
            seg["force_u_n"] = math.sqrt(ss.P_post[2, 2])
            seg["innovation_m"] = innov[:m]
            seg["nis"] = nis[:m]
            seg["flags"] = FLAG_STEADY
            self.counters.steady += m
            # After a gated sample the path is left, so these states matter only
            # when the whole stretch was accepted.
            self._zf = [zf1, zf2, zf3]
            self._u = np.array([u1[m - 1], u2[m - 1], u3[m - 1]])
        if m < stop - i0:
            self._leave_steady()
        return i0 + m

    def _run_modal(self, t: np.ndarray, zc: np.ndarray, i0: int, out: np.ndarray) -> int:
        """Steady path in the eigenvector basis: one first-order recursion per mode."""
        ss = self._ss
        V = ss.V
        n = zc.size
        rows: list[np.ndarray] = []  # x, v, F posterior, shape (n,) each
        zf_new = []
        for (i, real), zi in zip(ss.modes, self._zf, strict=True):
            if real:
                w, zf = scipy.signal.lfilter([ss.h[i].real], [1.0, -ss.lam[i].real], zc, zi=zi)
                parts = [V[r, i].real * w for r in range(3)]
            else:
                w, zf = scipy.signal.lfilter([ss.h[i]], [1.0, -ss.lam[i]], zc, zi=zi)
                wr, wi = np.ascontiguousarray(w.real), np.ascontiguousarray(w.imag)
                parts = []
                for r in range(3):
                    part = (2.0 * V[r, i].real) * wr
                    part -= (2.0 * V[r, i].imag) * wi
                    parts.append(part)
            if rows:
                for r in range(3):
                    rows[r] += parts[r]
            else:
                rows = parts
            zf_new.append(zf)
        x, v, f = rows
        # Predicted displacement of sample n from the posterior at n − 1.
        ahead = ss.phi_row[0] * x
        ahead += ss.phi_row[1] * v
        ahead += ss.phi_row[2] * f
        innov = np.empty(n)
        s0 = self._s_last  # same operations, in the same order, as for `ahead`
        innov[0] = zc[0] - (ss.phi_row[0] * s0[0] + ss.phi_row[1] * s0[1] + ss.phi_row[2] * s0[2])
        np.subtract(zc[1:], ahead[:-1], out=innov[1:])
        nis = innov * innov / ss.S
        gated = np.nonzero(nis > self.tuning.gate_sigma**2)[0]
        m = int(gated[0]) if gated.size else n
        if m:
            seg = out[i0 : i0 + m]
            seg["time_s"] = t[i0 : i0 + m]
            seg["displacement_m"] = x[:m]
            seg["velocity_m_s"] = v[:m]
            seg["force_n"] = f[:m]
            seg["force_u_n"] = math.sqrt(ss.P_post[2, 2])
            seg["innovation_m"] = innov[:m]
            seg["nis"] = nis[:m]
            seg["flags"] = FLAG_STEADY
            self.counters.steady += m
            self._zf = zf_new  # used only when the whole stretch was accepted
            self._s_last = np.array([x[m - 1], v[m - 1], f[m - 1]])
        if m < n:
            self._leave_steady()
        return i0 + m


def _shift(u: np.ndarray, before: complex) -> np.ndarray:
    """``u`` delayed by one sample, ``before`` first."""
    prev = np.empty_like(u)
    prev[0] = before
    prev[1:] = u[:-1]
    return prev


def _relative_distance(P: np.ndarray, P_ref: np.ndarray) -> float:
    """Largest ``|P − P_ref|ᵢⱼ / √(P_refᵢᵢ P_refⱼⱼ)``: a unit-free covariance distance."""
    d = np.sqrt(np.diag(P_ref))
    return float(np.max(np.abs(P - P_ref) / np.outer(d, d)))


def concat_estimates(blocks: list[np.ndarray]) -> np.ndarray:
    """Join estimate blocks into one ``ESTIMATE_DTYPE`` array (empty when none)."""
    return np.concatenate(blocks) if blocks else np.empty(0, ESTIMATE_DTYPE)
