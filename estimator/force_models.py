"""The force priors of the multiple-model observer, and their discrete tables.

Every model shares the state ``s = [x, v, F, Ḟ]`` (m, m/s, N, N/s) and the cell's
plant ``m·x'' + b·x' + k·x = F``. They differ in what they assume of the force:

* **hold** — ``F`` is a random walk of small intensity ``q_hold`` (N²/s) and ``Ḟ`` is
  pinned to 0: deadweights, held loads, slow drift;
* **rate ×n** — ``Ḟ`` is a random walk (the force an integrated random walk) of
  intensity ``q_rate`` (N²/s³): ramps, sines and other smooth loads. Several
  intensities, a factor apart, cover slow to fast loads; the model probabilities pick
  the ones the record supports;
* **jump ×3** — within one sample period the force may jump (standard deviation
  ``jump_sd_n``) and so may its rate (``jump_rate_sd_n_per_s``): a step, a release, the
  corner of a ramp. It lasts one step and then hands over to the others. One model per
  instant of the jump within the step (``jump_timing``, just after the previous sample,
  half way, just before this one): a cell responds within the step, so the first
  sample after a jump says ``J·s(instant)``, and one model averaging over the instant
  misjudged ``J`` (on the demo cell, a step just after a sample: 82 N read for 50 N
  after one sample, still 2 N off after three);
* **kink** — within one sample period the force's *rate* may change at once (standard
  deviation ``kink_rate_sd_n_per_s``) while the force itself stays continuous: the
  corner of a ramp, the start of a sine or a pulse. It belongs to the jump family (one
  step, then hands over). Without it the first samples after a kink had only the force
  jumps to explain them, and a jump's size is barely known one sample after it: on the
  lightly damped benchmark cell at 10 kHz a sine starting at full slope put 78 % on the
  jump models after one sample and the next row 4.9 N off. A second kink model, of a
  tenth of the size (``kink_small_ratio``), takes the gentle corners: a kink's size
  spans decades, and one wide Gaussian gives a small one a tenth of the density a model
  of its size would (an invented 770 Hz, ζ 0.34 cell at 5 kHz: a sine starting at
  0.75 % of the span per period went to the jump models and an outlier hold, and its
  first rows cost the record 1.16 times the error of the fitted integrated random walk;
  with it 1.10).

A jump at an unknown instant within a step of ``dt`` has the same first two moments as
a random walk of intensity ``σ²/dt`` over that step, so the regular models' noise is a
sum ``Q = q_F·Q_F + q_Ḟ·Q_Ḟ`` of two unit-intensity Van Loan integrals (Van Loan 1978;
see :mod:`estimator.discretization`); a timed jump model has the rank-one covariance of
a jump at its instant plus ``jump_spread`` times that averaged one.

**Scaled state.** The kernel works in ``s̃ = D s`` with
``D = diag(k, k/ωn, 1, 1/ωn)``: all four components in newtons, so the covariances
stay well conditioned at any sample rate. ``z̃ = k·z``, ``R̃ = k²·R``.

**Mode switching** (per step of ``dt``): the regular models (hold and rates) switch to
each other at a total rate ``1/dwell_s`` and to a jump at the rate ``1/jump_interval_s``;
a jump stays a jump with probability ``jump_stay`` and otherwise goes to hold (share
``jump_to_hold``) or to a rate model. From hold, the rate models are entered in the ratio
``1 : γ : γ² …`` (slow to fast, ``γ = start_ratio``): a load at rest starts to move
slowly more often than fast, and the first samples of a step must not be taken for the
start of a very fast ramp (measured on the stiff benchmark cell: the fastest rate model
took 58–80 % of the first two samples after each step and overshot by 60 % of the step;
with ``γ = 0.5`` the staircase's live RMSE fell from 1.24 to 1.12 times the fitted
random walk's, pulses 0.61 → 0.68, nothing else moved). A jump's exits into the rate
models follow the same kind of ladder, ``1 : ρ : ρ² …`` (``ρ = exit_ratio``): after an
even split the fastest rate model, the widest, kept a few per cent for samples after a
corner, long enough to explain a spike as motion (on 585 invented records a sine on a
lightly damped 1 kHz cell was followed 1.26 times worse than by the fitted integrated
random walk, with ``ρ = 0.7`` 1.05; beside the small kink, which does that too, its share is
within a few per cent either way, method-observer section 4).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import scipy.linalg

from estimator.discretization import van_loan
from estimator.errors import ParameterError
from estimator.plant import Plant

__all__ = ["FAMILY_HOLD", "FAMILY_JUMP", "FAMILY_RATE", "ForceModels", "model_tables"]

FAMILY_HOLD, FAMILY_RATE, FAMILY_JUMP = 0, 1, 2


@dataclass(frozen=True)
class ForceModels:
    """Intensities and switching of the force priors (SI units).

    Attributes:
        q_hold_n2_per_s: random-walk intensity of the hold model, N²/s.
        q_rate_n2_per_s3: intensities of the rate models, N²/s³, increasing.
        jump_sd_n: standard deviation of a force jump, N.
        jump_rate_sd_n_per_s: standard deviation of a jump of the force rate, N/s.
        dwell_s: mean time between switches among the regular models, s.
        jump_interval_s: mean time between load jumps, s.
        jump_stay: probability that a jump continues for another step.
        jump_to_hold: share of the jump's exits that go to the hold model.
        start_ratio: ratio between the probabilities of entering successive rate models
            (slow to fast) from hold; 1 enters them all alike.
        exit_ratio: the same for a jump's exits into the rate models.
        jump_timing: one jump model per entry: the instant of the jump within the step,
            as a fraction of it (0 just after the previous sample, 1 at this one).
        jump_spread: share of the timing-averaged jump covariance added to each timed
            jump model (what a single model would assume), so that an instant between
            the listed ones is still covered.
        kink_rate_sd_n_per_s: standard deviation of a kink, a sudden change of the
            force rate with the force continuous, N/s; 0 leaves the kink model out.
        kink_share: how often a kink is entered, against a force jump at one of the
            ``jump_timing`` instants.
        kink_small_ratio: a second kink model, of this fraction of
            ``kink_rate_sd_n_per_s``, entered as often as the first (0: none).
        kink_onsets: one more kink model per entry ``m``: a kink in the step that ended
            ``m`` steps ago, seen only now (a rate change moves a soft or heavy cell so
            little at first that its first samples stay within the noise).
        constant_floor: the hold model assumes a constant force and the slowest rate
            model a constant rate; their intensities then set only their gains (how
            fast they follow), and their covariances are those of that gain on a
            constant force or rate (see `floors`). False: every model's covariance is
            that of its random-walk prior.
    """

    q_hold_n2_per_s: float
    q_rate_n2_per_s3: tuple[float, ...]
    jump_sd_n: float
    jump_rate_sd_n_per_s: float
    dwell_s: float = 0.5
    jump_interval_s: float = 2.0
    jump_stay: float = 0.2
    jump_to_hold: float = 0.5
    start_ratio: float = 0.5
    exit_ratio: float = 0.7
    jump_timing: tuple[float, ...] = (0.02, 0.5, 0.98)
    jump_spread: float = 0.2
    kink_rate_sd_n_per_s: float = 0.0
    kink_share: float = 2.0
    kink_small_ratio: float = 0.1
    kink_onsets: tuple[int, ...] = ()
    late_kink_share: float = 0.3
    constant_floor: bool = True

    def __post_init__(self) -> None:
        for name in ("q_hold_n2_per_s", "jump_sd_n", "jump_rate_sd_n_per_s", "dwell_s"):
            _positive(name, getattr(self, name))
        _positive("jump_interval_s", self.jump_interval_s)
        kink = self.kink_rate_sd_n_per_s
        if not (isinstance(kink, int | float) and math.isfinite(kink) and kink >= 0.0):
            raise ParameterError(
                f"kink_rate_sd_n_per_s = {kink!r}: must be a finite number >= 0 (0: no kink model)"
            )
        _positive("kink_share", self.kink_share)
        if not self.q_rate_n2_per_s3:
            raise ParameterError("q_rate_n2_per_s3 is empty: give at least one rate intensity")
        for q in self.q_rate_n2_per_s3:
            _positive("q_rate_n2_per_s3", q)
        if not self.jump_timing or not all(
            isinstance(v, int | float) and 0.0 <= v <= 1.0 for v in self.jump_timing
        ):
            raise ParameterError(
                f"jump_timing = {self.jump_timing!r}: give one or more fractions of a step "
                "in [0, 1]"
            )
        if not (isinstance(self.jump_spread, int | float) and 0.0 <= self.jump_spread <= 1.0):
            raise ParameterError(f"jump_spread = {self.jump_spread!r}: must be in [0, 1]")
        for name in ("start_ratio", "exit_ratio"):
            v = getattr(self, name)
            if not (isinstance(v, int | float) and 0.0 < v <= 1.0):
                raise ParameterError(f"{name} = {v!r}: must be in (0, 1]")
        small = self.kink_small_ratio
        if not (isinstance(small, int | float) and 0.0 <= small < 1.0):
            raise ParameterError(f"kink_small_ratio = {small!r}: must be in [0, 1) (0: none)")
        for name in ("jump_stay", "jump_to_hold"):
            v = getattr(self, name)
            if not (isinstance(v, int | float) and 0.0 <= v < 1.0):
                raise ParameterError(f"{name} = {v!r}: must be a probability in [0, 1)")

    @property
    def count(self) -> int:
        """Number of models: hold, the rate models, the jump models (the timed force
        jumps, then the kinks when there are)."""
        return self.regular + len(self.jump_timing) + self.kinks

    @property
    def kinks(self) -> int:
        """Number of kink models (the last ones): within this step, the small one within
        this step when there is one, then each onset."""
        if self.kink_rate_sd_n_per_s == 0.0:
            return 0
        return 1 + (self.kink_small_ratio > 0.0) + len(self.kink_onsets)

    @property
    def regular(self) -> int:
        """Number of regular models (hold and the rates); the jump models follow them."""
        return 1 + len(self.q_rate_n2_per_s3)

    @property
    def floors(self) -> np.ndarray:
        """Which models are floor models, shape (count,) bool: the hold model and the
        slowest rate model when ``constant_floor``.

        A floor model's prior is the deterministic end of its family (a constant force,
        a force changing at a constant rate); its intensity designs its gain only. Its
        covariance is propagated through that gain with no process noise, the exact
        error covariance of a filter whose gain was designed for another noise (Gelb,
        "Applied Optimal Estimation", 1974, ch. 7, from memory). On a held load a
        random-walk filter's own covariance is about twice its actual error variance
        (``K·R`` against ``K·R/(2−K)``: half of it is motion the prior allows and the
        load never makes); the floor model states the actual one, and how rough the load
        really is comes from the likelihood, which hands a moving load to the models
        that expect motion.
        """
        f = np.zeros(self.count, dtype=bool)
        if self.constant_floor:
            f[0] = True
            f[1 + int(np.argmin(self.q_rate_n2_per_s3))] = True
        return f

    @property
    def families(self) -> np.ndarray:
        """FAMILY_* of each model, shape (count,)."""
        rates = [FAMILY_RATE] * len(self.q_rate_n2_per_s3)
        return np.array([FAMILY_HOLD, *rates] + [FAMILY_JUMP] * (self.count - self.regular))

    @classmethod
    def for_cell(
        cls,
        plant: Plant,
        force_span_n: float,
        q_hold_n2_per_s: float,
        *,
        rates: int = 7,
        rate_scale: float = 1.0,
        kink: float = 0.3,
        constant_floor: bool = True,
        dt_s: float | None = None,
        noise_sd_m: float | None = None,
    ) -> ForceModels:
        """The default bank for a cell of natural frequency fn and rated span.

        The rate models cover loads whose rate changes on time scales from about
        ``1/(3·10⁻⁴·fn)`` down to ``1/(0.19·fn)``: intensities
        ``q = rate_scale·span²·(2π·B)³`` for ``rates`` bands ``B`` spaced evenly on a log
        scale over that range (×2.9 for seven; with five, ×5, a random load between two
        intensities was followed 1.15 times worse than by the integrated random walk
        fitted to it, with seven 1.04). A jump is a quarter of the span; a jump of the rate
        moves the force by 1 % of the span per period of the cell; a kink, by
        ``kink`` spans per period (see the module notes). Given the sampling period and
        the measurement's standard deviation, the bank also holds a kink model for each
        step before this one in which a kink of that size could have happened unseen
        (`late_kink_onsets`).
        """
        _positive("force_span_n", force_span_n)
        if not (isinstance(rates, int) and rates >= 1):
            raise ParameterError(f"rates = {rates!r}: must be a whole number >= 1")
        fn = plant.natural_freq_hz
        bands = 3e-4 * fn * 625.0 ** (np.arange(rates) / max(rates - 1, 1))
        q_rate = tuple(float(rate_scale * force_span_n**2 * (2 * math.pi * b) ** 3) for b in bands)
        return cls(
            q_hold_n2_per_s=q_hold_n2_per_s,
            q_rate_n2_per_s3=q_rate,
            jump_sd_n=0.25 * force_span_n,
            jump_rate_sd_n_per_s=1e-2 * force_span_n * fn,
            kink_rate_sd_n_per_s=kink * force_span_n * fn,
            kink_onsets=(
                late_kink_onsets(plant, kink * force_span_n * fn, dt_s, noise_sd_m)
                if dt_s is not None and noise_sd_m is not None and kink > 0.0
                else ()
            ),
            constant_floor=constant_floor,
        )

    def transitions(self, dt_s: float) -> np.ndarray:
        """Mode transition matrix ``π[i, j]`` for one step of ``dt_s`` (rows sum to 1)."""
        r = self.count
        n_reg = self.regular
        p_switch = min(dt_s / self.dwell_s, 0.5) / max(n_reg - 1, 1)
        # the jump's instant within the step: alike; a kink (and a small one) kink_share
        # times as often as one instant, a late kink late_kink_share times that; the
        # whole family capped at 0.5
        n_timed = len(self.jump_timing)
        weight = np.ones(r - n_reg)
        if self.kinks:
            late = len(self.kink_onsets)
            weight[n_timed:] = self.kink_share
            weight[len(weight) - late :] *= self.late_kink_share
        p_jump = min(dt_s / self.jump_interval_s * weight.sum() / n_timed, 0.5)
        PI = np.zeros((r, r))
        if n_reg > 1:
            PI[:n_reg, :n_reg] = p_switch
            share = self.start_ratio ** np.arange(n_reg - 1)
            PI[0, 1:n_reg] = p_switch * (n_reg - 1) * share / share.sum()
        PI[:n_reg, n_reg:] = p_jump * weight / weight.sum()
        leave = 1.0 - self.jump_stay
        for i in range(n_reg, r):  # a jump continues as itself, or ends
            PI[i, 0] = leave * self.jump_to_hold
            if n_reg > 1:
                ladder = self.exit_ratio ** np.arange(n_reg - 1)
                PI[i, 1:n_reg] = leave * (1.0 - self.jump_to_hold) * ladder / ladder.sum()
            else:
                PI[i, 0] = leave
            PI[i, i] = self.jump_stay
        for j in range(n_reg):
            PI[j, j] = 0.0
            PI[j, j] = 1.0 - PI[j].sum()
        return PI


def late_kink_onsets(
    plant: Plant, kink_rate_n_per_s: float, dt_s: float, noise_sd_m: float
) -> tuple[int, ...]:
    """The steps ``1 … m − 1`` before this one, where ``m`` is the number of samples a
    kink of ``kink_rate_n_per_s`` (from rest) takes to move the displacement by
    ``_SEEN`` measurement standard deviations (at most ``_LATE_MAX``).

    A mass answers a change of force rate with a displacement that grows as ``t³/6m``
    at first: on a soft, lightly damped cell sampled many times a period that stays in
    the noise for a few samples, and by the time the change shows, the kink model (a
    kink within the last step) no longer fits it; the force jumps took it, and a jump's
    size is barely known for several samples after (on the invented 40 Hz, ζ = 0.01 cell
    at 2 kHz: the first tenth of a second of a sine 2× the fitted integrated random walk's
    error). On stiffer or damped cells a kink shows within one sample and none is added.
    """
    a = _continuous(plant, rate_dynamics=True)
    phi = scipy.linalg.expm(a * dt_s)
    s = np.array([0.0, 0.0, 0.0, kink_rate_n_per_s])
    for m in range(1, _LATE_MAX + 1):
        s = phi @ s
        if abs(s[0]) > _SEEN * noise_sd_m:
            return tuple(range(1, m))
    return tuple(range(1, _LATE_MAX))


_SEEN = 3.0  # standard deviations of the noise that make a kink seen
_LATE_MAX = 6  # a kink seen only after this many samples still gets only 5 late models


def _positive(name: str, value: object) -> None:
    if not (isinstance(value, int | float) and math.isfinite(value) and value > 0):
        raise ParameterError(f"{name} = {value!r}: must be a finite number > 0")


def scaling(plant: Plant) -> np.ndarray:
    """Diagonal of ``D`` that scales ``[x, v, F, Ḟ]`` into newtons, shape (4,)."""
    k, wn = plant.stiffness_n_per_m, plant.natural_freq_rad_s
    return np.array([k, k / wn, 1.0, 1.0 / wn])


def _continuous(plant: Plant, rate_dynamics: bool) -> np.ndarray:
    m, b, k = plant.mass_kg, plant.damping_n_s_per_m, plant.stiffness_n_per_m
    A = np.zeros((4, 4))
    A[0, 1] = 1.0
    A[1, 0], A[1, 1], A[1, 2] = -k / m, -b / m, 1.0 / m
    if rate_dynamics:
        A[2, 3] = 1.0
    return A


def model_tables(
    plant: Plant, models: ForceModels, dts_s: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Scaled ``(Φ, Q, π)`` of every model for each step length in ``dts_s``.

    Returns arrays of shapes (nt, r, 4, 4), (nt, r, 4, 4) and (nt, r, r).
    """
    D = scaling(plant)
    r = models.count
    nt = len(dts_s)
    PHI = np.zeros((nt, r, 4, 4))
    Q = np.zeros((nt, r, 4, 4))
    PI = np.zeros((nt, r, r))
    e_f = np.array([[0.0], [0.0], [1.0], [0.0]])
    e_r = np.array([[0.0], [0.0], [0.0], [1.0]])
    a_hold = _continuous(plant, rate_dynamics=False)
    a_rate = _continuous(plant, rate_dynamics=True)
    outer = np.outer(D, D)
    ratio = D[:, None] / D[None, :]
    for t, dt in enumerate(dts_s):
        dt = float(dt)
        phi_h, qf_h = van_loan(a_hold, e_f, 1.0, dt)
        phi_h[3, :] = 0.0  # Ḟ pinned to 0
        phi_r, qf_r = van_loan(a_rate, e_f, 1.0, dt)
        _, qr_r = van_loan(a_rate, e_r, 1.0, dt)
        PHI[t, 0] = phi_h * ratio
        Q[t, 0] = models.q_hold_n2_per_s * qf_h * outer
        for j, q in enumerate(models.q_rate_n2_per_s3, start=1):
            PHI[t, j] = phi_r * ratio
            Q[t, j] = q * qr_r * outer
        # a jump at an unknown instant: the random walk with its first two moments ...
        jump = models.jump_sd_n**2 / dt * qf_r + models.jump_rate_sd_n_per_s**2 / dt * qr_r
        for j, tau in enumerate(models.jump_timing, start=models.regular):
            PHI[t, j] = phi_r * ratio
            # ... and at a known fraction tau of the step: a force jump J (variance
            # σ_J²) moves the state at the step's end by J·exp(A·(1 − tau)·dt)·e_F
            g = scipy.linalg.expm(a_rate * ((1.0 - tau) * dt)) @ e_f[:, 0]
            timed = models.jump_sd_n**2 * np.outer(g, g)
            Q[t, j] = (timed + models.jump_spread * jump) * outer
        if models.kinks:
            # a kink at an unknown instant: the rate's random walk with its two moments
            k0 = r - models.kinks
            sizes = [models.kink_rate_sd_n_per_s]
            if models.kink_small_ratio > 0.0:
                sizes.append(models.kink_small_ratio * models.kink_rate_sd_n_per_s)
            for j, size in enumerate(sizes, start=k0):
                PHI[t, j] = phi_r * ratio
                Q[t, j] = size**2 / dt * qr_r * outer
            for j, m in enumerate(models.kink_onsets, start=k0 + len(sizes)):
                # a kink δ in the step that ended m steps ago moves the state now by
                # δ·exp(A·τ)·e_Ḟ, τ from m·dt to (m + 1)·dt: the two ends, alike
                PHI[t, j] = phi_r * ratio
                ends = [scipy.linalg.expm(a_rate * (u * dt)) @ e_r[:, 0] for u in (m, m + 1)]
                late = sum(np.outer(g, g) for g in ends) / 2.0
                Q[t, j] = models.kink_rate_sd_n_per_s**2 * late * outer
        PI[t] = models.transitions(dt)
    # exp(A·dt) of a block-triangular A: the force depends on no state of the cell and
    # its rate not on the force. Written as exact zeros, which the kernel relies on.
    PHI[:, :, 2:, :2] = 0.0
    PHI[:, :, 3, 2] = 0.0
    return PHI, Q, PI
