"""The force observer: a multiple-model Kalman filter on the cell's plant model.

State ``s = [x, v, F, Ḟ]``: displacement (m), velocity (m/s), the applied force (N)
and its rate (N/s). The plant is ``m·x'' + b·x' + k·x = F``; the only measurement is
the displacement, ``z = x + noise``. No single prior for the force fits a bench, so
several run at once (:mod:`estimator.force_models`): a held load, smooth loads at
several intensities, and a sudden jump. They are combined by their innovation
likelihoods with the interacting multiple model (IMM) estimator, and an isolated
outlier is told from a load change by the next sample (:mod:`estimator.mm_kernel`).

Discretisation is exact: ``Φ = exp(A·dt)`` and each model's process noise by Van
Loan's method, computed once per distinct step length. The measurement variance is the
transducer's white-noise variance plus the quantisation variance ``LSB²/12``.

The reported force is the mean of the mixture of models and ``force_u_n`` its standard
deviation: it contains each model's covariance *and the spread between the models*, so
the lag of a prior that no longer fits shows as uncertainty, and, when one smooth-load
model leads, how far the next faster one differs from it (the lag of the leading prior;
docs/method-observer.md, section 7), and what averaging cannot remove from readings
quantised more coarsely than their noise (`estimator.quantisation`). Models whose probability
is below ``ObserverTuning.prune`` are left out of that mixture and pass nothing on to
the others (a standard reduction of Gaussian mixtures; with ``prune = 0`` the estimator
is the textbook IMM).

Every decision depends only on past samples and the per-sample work is one compiled
kernel, so the estimates are bit-identical whatever the sizes of the blocks the samples
arrive in.

References: R. E. Kalman (1960), "A new approach to linear filtering and prediction
problems", J. Basic Eng. 82(1); H. A. P. Blom, Y. Bar-Shalom (1988), "The interacting
multiple model algorithm for systems with Markovian switching coefficients", IEEE
Trans. Automatic Control 33(8); Y. Bar-Shalom, X. R. Li, T. Kirubarajan (2001),
"Estimation with Applications to Tracking and Navigation" (IMM, NIS).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import TYPE_CHECKING

import numpy as np

from estimator.errors import EstimatorError, ParameterError
from estimator.force_models import (
    FAMILY_HOLD,
    FAMILY_JUMP,
    FAMILY_RATE,
    ForceModels,
    model_tables,
    scaling,
)
from estimator.mm_kernel import (
    FLAG_OUT_DEFERRED,
    FLAG_OUT_REJECTED_BEFORE,
    FLAG_OUT_SUSPECT,
    FLAG_OUT_UNUSED,
    LANES,
    imm_block,
)
from estimator.plant import Plant
from estimator.quantisation import residual_bias_sd_m

if TYPE_CHECKING:
    from estimator.profile import CellProfile

__all__ = [
    "ESTIMATE_DTYPE",
    "FLAG_DEFERRED",
    "FLAG_GAP",
    "FLAG_JUMP",
    "FLAG_MISSING",
    "FLAG_OUTLIER_BEFORE",
    "FLAG_REJECTED",
    "ForceObserver",
    "ObserverTuning",
    "concat_estimates",
    "judged_outliers",
    "process_noise_for_bandwidth",
]

#: One row per input sample. Units: s, N, N (standard uncertainty, k = 1), m, m/s, m,
#: 1, flags, then the probabilities of the hold, rate (all intensities) and jump models.
#: ``innovation_m`` and ``nis`` are those of the model most probable before the sample.
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
        ("p_hold", "<f4"),
        ("p_rate", "<f4"),
        ("p_jump", "<f4"),
    ]
)

#: the innovation was beyond the gate: the sample is held as a possible outlier, and the
#: row shows both hypotheses; a later sample decides (see FLAG_OUTLIER_BEFORE). Up to three
#: consecutive samples can be held together as one burst.
FLAG_REJECTED = 1
FLAG_MISSING = 2  #: no measurement (NaN); predict only
FLAG_GAP = 4  #: the time step before this sample was longer than 1.5 nominal periods
FLAG_JUMP = 8  #: the jump model is the most probable: the load is changing suddenly
#: the sample is used, but the decision on the held samples before it waits for the next
#: (the odds were short of 19 to 1 either way); the row shows both hypotheses, as a held
#: row does
FLAG_DEFERRED = 16
#: the held samples just before this row (the run of FLAG_REJECTED rows, before any
#: FLAG_DEFERRED row) were judged outliers and not used; or, when the row before was not
#: held, that sample was judged an outlier in hindsight and its effect taken back
#: (`judged_outliers` finds them)
FLAG_OUTLIER_BEFORE = 32

_TABLE_CACHE = 256  # distinct step lengths kept
_DISPLACEMENT_MAX_M = 1.0  # a reading this far from zero is a unit error
_START_MOVING = 0.03  # start-up probability that the cell is already moving (_start)


@dataclass(frozen=True)
class ObserverTuning:
    """How the observer weighs its force priors and treats bad samples.

    Attributes:
        force_bandwidth_hz: sets the hold model's random-walk intensity ``q`` as the
            bandwidth a single random-walk filter would have in the quasi-static limit
            (see `process_noise_for_bandwidth`), unless ``process_noise_n2_per_s``
            is given.
        process_noise_n2_per_s: the hold model's intensity ``q`` (N²/s) directly.
        rate_scale: factor on the intensities of the default bank's rate models.
        gate_sigma: innovation (in standard deviations of the most probable model)
            beyond which a sample is held as a possible outlier until the next sample.
        outlier_probability: prior probability that a sample is an outlier.
        outlier_spread: spread (scale) of an outlier about the prediction, in standard
            deviations of the measurement noise.
        outlier_tail: share of the outliers drawn from a Cauchy distribution of the same
            scale (the rest Gaussian), so that a spike of any size keeps a density and is
            rejected once the next sample is in. With a Gaussian alone a spike beyond
            about ten times the spread had none, and two load jumps, out and back,
            explained it better.
        prune: models less probable than this pass nothing on and are left out of the
            reported mixture (0: the textbook IMM).
        jump_prune: the same for the jump model. Its one-sample signature at high
            sample rates is barely above the noise, so an ordinary 3–5σ sample gives it a
            probability of 10⁻³–10⁻²; mixed into the other models, its span-sized
            covariance would shake the estimate by newtons. A real load change takes it
            to near 1 within a few samples.
        shown_tail: the least probable models, up to this total probability, are also
            left out of the reported mixture (they still interact). A few models that
            together hold 1–2 % can carry covariances hundreds of times the leading
            model's and double the stated σ, while the ±2σ interval of the whole mixture
            barely moves: leaving them out states the coverage interval, not the tail
            (GUM Supplement 1, JCGM 101:2008, on coverage intervals of non-Gaussian
            distributions). 0 reports the whole mixture. At 0.02, a slow rate model
            holding 1.8 % beside the hold model on the overdamped benchmark cell's
            holds made σ 1.3 times the error's spread and the ±2σ coverage 0.992;
            0.04 leaves it out (0.988), and no record's coverage fell below 0.918.
        timing_tolerance: a step within this fraction of the nominal period counts
            as uniform and uses the nominal model.
        initial_force_sigma_n: prior standard deviation of the force at start-up (N);
            default: the rated range given to the observer.
        restart_gap_s: a silence longer than this (s) between two samples starts the
            observer afresh at the second one, as at the first sample of a record
            (default: the longer of 60 s and 100 periods of the cell). Nothing of the
            state is worth predicting across it, and the smooth-load priors' variance,
            growing as the cube of the step, overflowed across silences of hours.
        constant_floor: see `ForceModels.constant_floor` (default bank only).
        models: the bank of force priors; default `ForceModels.for_cell`.
    """

    force_bandwidth_hz: float = 10.0
    process_noise_n2_per_s: float | None = None
    gate_sigma: float = 5.0
    outlier_probability: float = 1e-3
    outlier_spread: float = 35.0
    outlier_tail: float = 0.1
    rate_scale: float = 1.0
    prune: float = 1e-2
    jump_prune: float = 0.05
    shown_tail: float = 0.04
    timing_tolerance: float = 0.01
    initial_force_sigma_n: float | None = None
    restart_gap_s: float | None = None
    constant_floor: bool = True
    models: ForceModels | None = None

    def __post_init__(self) -> None:
        _positive("force_bandwidth_hz", self.force_bandwidth_hz)
        if self.process_noise_n2_per_s is not None:
            _positive("process_noise_n2_per_s", self.process_noise_n2_per_s)
        _positive("gate_sigma", self.gate_sigma)
        _positive("rate_scale", self.rate_scale)
        _positive("outlier_spread", self.outlier_spread)
        if not (0.0 <= self.outlier_tail < 1.0):
            raise ParameterError(f"outlier_tail = {self.outlier_tail!r}: must be in [0, 1)")
        if not (0.0 < self.outlier_probability < 0.5):
            raise ParameterError(
                f"outlier_probability = {self.outlier_probability!r}: must be in (0, 0.5)"
            )
        if not (0.0 <= self.prune < 0.1):
            raise ParameterError(f"prune = {self.prune!r}: must be in [0, 0.1)")
        if not (0.0 <= self.jump_prune < 0.5):
            raise ParameterError(f"jump_prune = {self.jump_prune!r}: must be in [0, 0.5)")
        if not (0.0 <= self.shown_tail < 0.05):
            raise ParameterError(f"shown_tail = {self.shown_tail!r}: must be in [0, 0.05)")
        _positive("timing_tolerance", self.timing_tolerance)
        if self.timing_tolerance >= 0.5:
            raise ParameterError(
                f"timing_tolerance = {self.timing_tolerance!r}: must be below 0.5 of a period"
            )
        if self.initial_force_sigma_n is not None:
            _positive("initial_force_sigma_n", self.initial_force_sigma_n)
        if self.restart_gap_s is not None:
            _positive("restart_gap_s", self.restart_gap_s)


def _positive(name: str, value: float) -> None:
    if not (isinstance(value, int | float) and math.isfinite(value) and value > 0):
        raise ParameterError(f"{name} = {value!r}: must be a finite number > 0")


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
class _Counters:
    samples: int = 0
    rejected: int = 0  # samples judged outliers
    suspect: int = 0  # samples held for the next one to decide
    missing: int = 0
    gaps: int = 0
    jumps: int = 0  # times the jump model became the most probable
    restarts: int = 0  # fresh starts after a silence longer than restart_gap_s


@dataclass
class _State:
    """Everything the kernel carries from one block to the next (scaled units)."""

    # branch "used", branch "outlier", the prediction before the last sample (mm_kernel)
    x: np.ndarray  # (3, r, 4)
    P: np.ndarray  # (3, r, 4, 4)
    PD: np.ndarray  # (3, r, 4, 4) design covariances of the floor models
    mu: np.ndarray  # (3, r)
    pend: np.ndarray = field(default_factory=lambda: np.zeros(8))
    t_last: float | None = None
    jump_last: bool = False


class ForceObserver:
    """Multiple-model Kalman observer turning displacement samples into force.

    Feed it blocks with :meth:`process`; each call returns one ``ESTIMATE_DTYPE`` row
    per input sample. The observer keeps its state between calls.

    Args:
        plant: the cell's identified second-order model.
        sample_period_s: nominal sampling period (s).
        noise_m: standard deviation of the transducer's white noise (m).
        resolution_m: one ADC count in metres; adds ``LSB²/12`` to the noise variance.
        tuning: see :class:`ObserverTuning`.
        force_range_n: rated span of the cell (N): the start-up prior and the scale
            of the force priors.
        mass_u_kg, damping_u_n_s_per_m: standard uncertainties of the plant's mass and
            damping (a profile's, from identification); the force they carry, ``m·ẍ``
            and ``b·ẋ``, is uncertain by ``u(m)·|ẍ|`` and ``u(b)·|ẋ|``, which ``force_u_n``
            then includes (0 on a held load). 0 by default: the plant taken as exact.
    """

    def __init__(
        self,
        plant: Plant,
        sample_period_s: float,
        noise_m: float,
        resolution_m: float = 0.0,
        tuning: ObserverTuning | None = None,
        force_range_n: float | None = None,
        *,
        mass_u_kg: float = 0.0,
        damping_u_n_s_per_m: float = 0.0,
    ) -> None:
        _positive("sample_period_s", sample_period_s)
        given_u = (("mass_u_kg", mass_u_kg), ("damping_u_n_s_per_m", damping_u_n_s_per_m))
        for name, value in given_u:
            if not (math.isfinite(value) and value >= 0):
                raise ParameterError(f"{name} = {value!r}: must be a finite number >= 0")
        #: standard uncertainties of the plant's mass (kg) and damping (N·s/m)
        self.mass_u_kg = float(mass_u_kg)
        self.damping_u_n_s_per_m = float(damping_u_n_s_per_m)
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
        #: the force variance (N²) no averaging removes: the bias of readings quantised more
        #: coarsely than their noise (estimator.quantisation); 0.0 when the noise dithers them
        self.quantisation_var_n2 = (k * residual_bias_sd_m(resolution_m, noise_m)) ** 2
        if self.tuning.process_noise_n2_per_s is not None:
            q_hold = float(self.tuning.process_noise_n2_per_s)
        else:
            q_hold = process_noise_for_bandwidth(
                self.tuning.force_bandwidth_hz, k, self.R, self.dt_s
            )
        span = self.tuning.initial_force_sigma_n or force_range_n or 1e4 * k * math.sqrt(self.R)
        _positive("force span", span)
        self.force_span_n = float(span)
        #: a silence longer than this (s) restarts the observer (ObserverTuning.restart_gap_s)
        self.restart_gap_s = float(
            self.tuning.restart_gap_s or max(60.0, 100.0 / plant.natural_freq_hz)
        )
        #: the bank of force priors in use
        self.models = self.tuning.models or ForceModels.for_cell(
            plant,
            span,
            q_hold,
            rate_scale=self.tuning.rate_scale,
            constant_floor=self.tuning.constant_floor,
            dt_s=self.dt_s,
            noise_sd_m=math.sqrt(self.R),
        )
        if self.models.count > LANES:
            raise ParameterError(
                f"the force model bank has {self.models.count} models; the kernel takes at "
                f"most {LANES} (fewer rate models: ForceModels.for_cell(rates=...))"
            )
        self._families = self.models.families
        # the jump model is broad: below `jump_prune` it passes nothing on (see ObserverTuning)
        self._prune = np.where(
            self._families == FAMILY_JUMP, max(self.tuning.jump_prune, self.tuning.prune),
            self.tuning.prune,
        )  # fmt: skip
        self._D = scaling(plant)
        self._tables: dict[float, int] = {}
        self._floors = self.models.floors
        self._phi, self._q, self._pi = model_tables(plant, self.models, np.array([self.dt_s]))
        self._q_prior = self._prior(self._q)
        self._tables[self.dt_s] = 0
        self.counters = _Counters()
        #: When True, `process` keeps every sample's per-model posteriors and the
        #: table row used (for the smoother) in `log`.
        self.keep_log = False
        self.log: list[tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]] = []
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
            rate_scale=obs.rate_scale,
        )
        span = profile.limits.force_max_n - profile.limits.force_min_n
        return cls(
            profile.plant.plant(),
            1.0 / profile.acquisition.sample_rate_hz,
            profile.transducer.noise_m,
            profile.transducer.resolution_m,
            tuning,
            force_range_n=span,
            mass_u_kg=profile.plant.mass_u_kg,
            damping_u_n_s_per_m=profile.plant.damping_u_n_s_per_m,
        )

    def reset(self) -> None:
        """Forget every sample: the next one starts the observer afresh."""
        r = self.models.count
        self._state = _State(
            np.zeros((3, r, 4)), np.zeros((3, r, 4, 4)), np.zeros((3, r, 4, 4)), np.zeros((3, r))
        )
        self.counters = _Counters()
        self.log = []
        #: Σ log predictive density of the samples used so far (nats): the innovation
        #: likelihood that tuning and the smoother maximise
        self.log_likelihood = 0.0

    def _start(self, z0: float) -> None:
        """The first sample (scaled units). The cell is taken at rest: x̃ = F = k·z0, both
        known to that reading's noise and fully correlated (F = k·x at rest), ṽ within one
        noise σ of 0, Ḟ within one span per second. The first force jump model carries the
        other possibility, a cell already moving (ṽ, F and Ḟ/ωn each within one span), at
        `_START_MOVING` of the probability: below its prune level, so it passes nothing on
        unless the next samples raise it (docs/method-observer.md, section 8)."""
        st = self._state
        k = self.plant.stiffness_n_per_m
        f0 = 0.0 if math.isnan(z0) else k * z0
        s = self.force_span_n
        st.x[:] = np.array([f0, 0.0, f0, 0.0])
        r = k * k * self.R
        at_rest = np.zeros((4, 4))
        at_rest[0, 0] = at_rest[0, 2] = at_rest[2, 0] = at_rest[2, 2] = at_rest[1, 1] = r
        at_rest[3, 3] = (s / self.plant.natural_freq_rad_s) ** 2
        st.P[:] = at_rest
        n_reg = self.models.regular
        moving = self.models.count > max(n_reg, 2)
        if moving:
            st.P[:, n_reg] = np.diag([r, s * s, s * s, s * s])
        st.PD[:] = st.P
        st.mu[:] = 0.0
        st.mu[:, 0] = 0.5
        st.mu[:, 1:n_reg] = 0.5 / max(n_reg - 1, 1)
        if self.models.count == 1:
            st.mu[:, 0] = 1.0
        elif self.models.count == 2:
            st.mu[:, 0] = 0.9
            st.mu[:, 1] = 0.1
        if moving:
            st.mu[:, :n_reg] *= 1.0 - _START_MOVING
            st.mu[:, n_reg] = _START_MOVING
        st.pend[:] = 0.0

    def warm_up(self) -> None:
        """Compile (or load from numba's cache) the per-sample kernel now.

        The first call of the kernel in a process costs 0.2 s from the cache and
        several seconds without it; a live session calls this before it opens the
        port, so no sample waits for the compiler. The observer's state is untouched.
        """
        spare = ForceObserver(
            self.plant, self.dt_s, math.sqrt(self.R), 0.0, self.tuning, self.force_span_n
        )
        spare.process(np.array([0.0, self.dt_s]), np.zeros(2))

    # ------------------------------------------------------------ properties

    @property
    def measurement_sd_m(self) -> float:
        """Standard deviation of one measurement, noise and quantisation, m."""
        return math.sqrt(self.R)

    # -------------------------------------------------------------- processing

    def stated_variance_n2(
        self,
        force_var_n2: np.ndarray,
        force_n: np.ndarray,
        displacement_m: np.ndarray,
        velocity_m_s: np.ndarray,
    ) -> np.ndarray:
        """``force_u_n²`` (N²) of estimates whose own force variance is ``force_var_n2``:
        plus the bias of coarse quantisation (`quantisation_var_n2`) and the force carried
        through the uncertain mass and damping, ``(u(m)·ẍ)² + (u(b)·ẋ)²`` with
        ``ẍ = (F − b·ẋ − k·x)/m`` (JCGM 100:2008, eq. 10, inputs uncorrelated). Arrays of
        one shape; the live and the smoothed estimate both state their σ through this."""
        var = force_var_n2 + self.quantisation_var_n2
        if self.mass_u_kg > 0.0 or self.damping_u_n_s_per_m > 0.0:
            p = self.plant
            accel = (
                force_n - p.damping_n_s_per_m * velocity_m_s - p.stiffness_n_per_m * displacement_m
            ) / p.mass_kg
            damping = self.damping_u_n_s_per_m * velocity_m_s
            with np.errstate(over="ignore"):  # absurd stated uncertainties: an infinite σ
                var = var + (self.mass_u_kg * accel) ** 2 + damping**2
        return var

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
        if np.any(np.abs(z) >= _DISPLACEMENT_MAX_M):
            bad = int(np.nonzero(np.abs(z) >= _DISPLACEMENT_MAX_M)[0][0])
            raise EstimatorError(
                f"displacement_m[{bad}] = {float(z[bad])!r}: a metre or more from zero, beyond "
                "any transducer on a force cell; check the unit (a reading in mm or µm "
                "given as m?)"
            )
        st = self._state
        t_before = t[0] - self.dt_s if st.t_last is None else st.t_last
        dt = np.empty_like(t)
        dt[0] = t[0] - t_before
        np.subtract(t[1:], t[:-1], out=dt[1:])
        if not (dt.min() > 0 and math.isfinite(t[0]) and math.isfinite(t[-1])):
            self._raise_bad_times(t, dt, t_before)
        if dt.max() > self.restart_gap_s:
            return self._restart_across(t, z, int(np.argmax(dt > self.restart_gap_s)))
        if st.t_last is None:
            self._start(float(z[0]))
        table = self._table_rows(dt)
        n = t.size
        k = self.plant.stiffness_n_per_m
        r = self.models.count
        ox = np.empty((n, 4))
        ov = np.empty((n, 4))
        oy = np.empty(n)
        os_ = np.empty(n)
        of = np.empty(n, np.int64)
        om = np.empty((n, r))
        oll = np.empty(n)
        lx = np.empty((n if self.keep_log else 0, r, 4))
        lP = np.empty((n if self.keep_log else 0, r, 4, 4))
        tun = self.tuning
        self.counters.rejected += imm_block(
            k * z,
            table,
            self._phi,
            self._q_prior,
            self._q,
            self._pi,
            k * k * self.R,
            tun.gate_sigma**2,
            tun.outlier_probability,
            tun.outlier_spread * k * math.sqrt(self.R),
            tun.outlier_tail,
            self._prune,
            tun.shown_tail,
            self.models.regular if self.models.count > self.models.regular else -1,
            self.models.regular + len(self.models.jump_timing),
            self._floors,
            st.x,
            st.P,
            st.PD,
            st.mu,
            st.pend,
            ox,
            ov,
            oy,
            os_,
            of,
            om,
            oll,
            lx,
            lP,
        )
        self.log_likelihood += float(oll.sum())
        if self.keep_log:
            self.log.append((table, lx, lP, om))
        D = self._D
        out["time_s"] = t
        out["force_n"] = ox[:, 2]
        out["displacement_m"] = ox[:, 0] / D[0]
        out["velocity_m_s"] = ox[:, 1] / D[1]
        out["force_u_n"] = np.sqrt(
            self.stated_variance_n2(
                ov[:, 2], out["force_n"], out["displacement_m"], out["velocity_m_s"]
            )
        )
        out["innovation_m"] = oy / k
        out["nis"] = oy * oy / os_
        fam = self._families
        p_jump = om[:, fam == FAMILY_JUMP].sum(axis=1)
        out["p_hold"] = om[:, fam == FAMILY_HOLD].sum(axis=1)
        out["p_rate"] = om[:, fam == FAMILY_RATE].sum(axis=1)
        out["p_jump"] = p_jump
        jump = fam[om.argmax(axis=1)] == FAMILY_JUMP
        gap = dt > 1.5 * self.dt_s
        if st.t_last is None:
            gap[0] = False
        flags = np.where(gap, FLAG_GAP, 0).astype(np.uint32)
        flags |= np.where(of & FLAG_OUT_UNUSED, FLAG_MISSING, 0).astype(np.uint32)
        flags |= np.where(of & FLAG_OUT_SUSPECT, FLAG_REJECTED, 0).astype(np.uint32)
        flags |= np.where(of & FLAG_OUT_REJECTED_BEFORE, FLAG_OUTLIER_BEFORE, 0).astype(np.uint32)
        flags |= np.where(of & FLAG_OUT_DEFERRED, FLAG_DEFERRED, 0).astype(np.uint32)
        flags |= np.where(jump, FLAG_JUMP, 0).astype(np.uint32)
        out["flags"] = flags
        c = self.counters
        c.samples += n
        c.missing += int(np.count_nonzero(of & FLAG_OUT_UNUSED))
        c.suspect += int(np.count_nonzero(of & FLAG_OUT_SUSPECT))
        c.gaps += int(np.count_nonzero(gap))
        entered = jump.copy()
        entered[1:] &= ~jump[:-1]
        entered[0] &= not st.jump_last
        c.jumps += int(np.count_nonzero(entered))
        st.jump_last = bool(jump[-1])
        st.t_last = float(t[-1])
        return out

    def _restart_across(self, t: np.ndarray, z: np.ndarray, k: int) -> np.ndarray:
        """Samples ``t[k]`` on come after a silence longer than ``restart_gap_s``: estimate
        the samples before it, then start afresh at sample k (flagged as after a gap)."""
        head = self.process(t[:k], z[:k])
        st = self._state
        st.t_last = None
        st.jump_last = False
        self.counters.restarts += 1
        tail = self.process(t[k:], z[k:])
        tail["flags"][0] |= FLAG_GAP
        self.counters.gaps += 1
        return np.concatenate([head, tail])

    def _table_rows(self, dt: np.ndarray) -> np.ndarray:
        """Row of the model tables for each step: 0 for nominal, others added as met."""
        tol = self.tuning.timing_tolerance * self.dt_s
        rows = np.zeros(dt.size, np.int64)
        off = np.abs(dt - self.dt_s) > tol
        if not off.any():
            return rows
        keys = np.unique(dt[off])
        if len(self._tables) + keys.size > _TABLE_CACHE:
            self._drop_tables()
        for i in np.flatnonzero(off):
            key = float(dt[i])
            row = self._tables.get(key)
            if row is None:
                phi, q, pi = model_tables(self.plant, self.models, np.array([key]))
                row = self._phi.shape[0]
                self._phi = np.concatenate([self._phi, phi])
                self._q = np.concatenate([self._q, q])
                self._q_prior = np.concatenate([self._q_prior, self._prior(q)])
                self._pi = np.concatenate([self._pi, pi])
                self._tables[key] = row
            rows[i] = row
        return rows

    def _prior(self, q: np.ndarray) -> np.ndarray:
        """The priors' process noise from the gains' (``q``): none for the floor models."""
        return np.where(self._floors[None, :, None, None], 0.0, q)

    def _drop_tables(self) -> None:
        """Keep only the nominal step's tables (bounded memory under jittery clocks)."""
        self._phi, self._q, self._pi = self._phi[:1], self._q[:1], self._pi[:1]
        self._q_prior = self._q_prior[:1]
        self._tables = {self.dt_s: 0}

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


def judged_outliers(flags: np.ndarray) -> np.ndarray:
    """Which rows' samples the observer judged outliers, as bools: the run of held rows
    (``FLAG_REJECTED``) just before each row flagged ``FLAG_OUTLIER_BEFORE`` (past the
    ``FLAG_DEFERRED`` rows between, whose samples were used), or, where the row before it
    was neither, that one row (judged in hindsight)."""
    flags = np.asarray(flags)
    held = (flags & FLAG_REJECTED) != 0
    deferred = (flags & FLAG_DEFERRED) != 0
    out = np.zeros(flags.shape, np.bool_)
    for row in np.flatnonzero(flags & FLAG_OUTLIER_BEFORE).tolist():
        j = row - 1
        while j >= 0 and deferred[j]:
            j -= 1
        if j == row - 1 and j >= 0 and not held[j]:
            out[j] = True
        while j >= 0 and held[j]:
            out[j] = True
            j -= 1
    return out


def concat_estimates(blocks: list[np.ndarray]) -> np.ndarray:
    """Join estimate blocks into one ``ESTIMATE_DTYPE`` array (empty when none)."""
    return np.concatenate(blocks) if blocks else np.empty(0, ESTIMATE_DTYPE)
