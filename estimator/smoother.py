"""Fixed-interval smoothing of a whole record, for offline use.

The live observer can only use samples up to the present; offline, the smoother also
uses every later sample, which removes the filter's lag.

1. **Outliers** are first decided exactly as live (the observer's own forward pass); the
   samples it judged outliers are then treated as missing. After smoothing they are
   decided again from both sides (`_redecide`): a used reading whose deletion residual
   against the smoothed trajectory is beyond ``_SPIKE`` σ is left out if, without it,
   its neighbours fit the trajectory (`_unconfirmed`), and a reading left out live that
   fits it is used again; then the prior is fitted and the record smoothed once more (at
   most ``_ROUNDS`` times).
2. **Prior and intensity by maximum likelihood.** For each of the two continuous force
   priors of the bank — the random walk (hold model) and the integrated random walk
   (rate model) — the intensity that maximises the record's innovation log-likelihood
   ``ℓ = Σ ln p(z_k | z_1..k−1)`` is found on a log grid widened while the best value
   sits on its edge (the prediction-error decomposition; Harvey, "Forecasting,
   structural time series models and the Kalman filter", 1989, from memory), and the
   measurement noise is refined the same way; then the intensity is refined between the
   grid's neighbours by Brent's bounded search (the grid alone leaves it within a factor
   of 2, which cost up to 1.17× the RMSE of the smoother fitted continuously on a
   band-limited random load). The prior with the larger likelihood is kept.
3. **Smoothing**: the Kalman filter of that model keeps every posterior and the
   Rauch–Tung–Striebel backward pass combines them with the later samples
   (:mod:`estimator.mm_smooth_kernel` with one model is exactly that recursion).
4. **Its σ** is not the RTS covariance (right only if the load followed the fitted
   prior) but the smoother's noise part plus its plug-in bias
   (:mod:`estimator.smoother_sigma`). Within ``_GUARD`` rows of a load change seen live,
   where one prior smears a step over the rows on both sides, it is widened until its
   ±2σ reaches the live estimate (`_reaching`), which is right before the change and
   from its second row on: ±2σ coverage of the rows from 10 before to 11 after each
   step of the random benchmark cells' staircases went from 0.08–0.98 by row to
   0.92–1.00.
5. **Where the live bank is better.** One prior fitted to a staircase must be rough
   enough for its steps, so on the holds between them it follows the noise: there the
   live multiple-model estimate states a smaller σ (on the stiff benchmark cell 0.005 N
   against the smoother's 0.09 N, both honest). Each row is taken from the live pass where
   its σ is the smaller, except within ``_GUARD`` samples, before or after, of a row
   where the live bank was not mostly in its hold model, or of a load change seen live (a
   suspect sample then used, or a jump row). The live pass sees a change a few samples
   late, and until then it shows the old level with the old σ: on the lightly damped
   benchmark cell, the first 20 samples after each corner of a ramp taken from it made
   the record 1.4–2.1 times worse than the fitted smoother, while the live rows far from
   the corners were 10 times better than the smoother's.

**Long records.** Every pass walks the record a slice of `estimator.spill.CHUNK` rows at a
time (`estimator.smoother_passes`); `RecordSmoother` keeps the samples, the live estimates
and the passes' arrays in files of a temporary folder, so memory does not grow with the
record. The numbers do not depend on where the arrays live; on a record of one slice they
are those of the whole-array recursion.

Innovation, NIS and flags are those of the live pass (a reading the smoother decided
otherwise keeps its live flags); force, its uncertainty,
displacement, velocity and the model probabilities (1 for the prior kept) are smoothed,
or the live row's where the live row is taken. A smoother that switches priors along the
record (an IMM smoother over the bank) is future work.
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Callable, Iterable, Iterator
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import scipy.ndimage
import scipy.optimize

from estimator.force_models import FAMILY_HOLD, FAMILY_RATE, scaling
from estimator.loggrid import ascend
from estimator.observer import (
    ESTIMATE_DTYPE,
    FLAG_JUMP,
    FLAG_REJECTED,
    ForceObserver,
    judged_outliers,
)
from estimator.smoother_passes import OneModel, Steps, forward, smooth_pass
from estimator.smoother_sigma import REPLICAS, Emit, smoother_variance_in_slices
from estimator.spill import CHUNK, SpillArray, SpillFolder, chunks

__all__ = ["RecordSmoother", "SmootherFit", "fit_prior", "smooth_record"]

_STEP = 4.0  # ratio between grid points of an intensity
_WIDEN = 12  # times a grid may move past its edge
_GUARD = 8  # samples either side of a live change or a row not mostly hold, never from live
_HOLD = 0.5  # probability of the live hold model below which a row is not taken from live
_HELD = 16  # rows before a slice that a run of held (suspect) rows may reach back
_SPIKE = 8.0  # deletion residual (σ) beyond which a used reading is left out ...
_APART = 8  # ... if the largest within this many rows, and at most one within them
_CALM = 4.0  # deletion residual (σ) within which a reading left out live is used again
_NEAR = 3  # rows either side that must fit the trajectory once a reading is left out
_ROUNDS = 3  # times the outliers are decided again from both sides (each: fit and smooth)


@dataclass(frozen=True)
class SmootherFit:
    """The prior the likelihood chose, its intensity, noise scale and likelihood."""

    family: int  # FAMILY_HOLD or FAMILY_RATE
    intensity: float  # N²/s (hold) or N²/s³ (rate)
    noise_scale: float  # ratio to the observer's measurement standard deviation
    log_likelihood: float


def fit_prior(obs: ForceObserver, time_s: np.ndarray, displacement_m: np.ndarray) -> SmootherFit:
    """The prior, intensity and noise scale that maximise the record's likelihood."""
    t = np.ascontiguousarray(time_s, dtype=float)
    z = np.ascontiguousarray(displacement_m, dtype=float)
    with SpillFolder(in_files=False) as scratch:
        record = _Record.of_arrays(scratch, t, z, np.empty(0, ESTIMATE_DTYPE))
        steps = Steps.of(
            obs, record.t, 0, t.size, scratch.array("step_rows", t.size, np.int64), CHUNK
        )
        return _fit(obs, steps, 0, t.size, record.z, CHUNK)


def _fit(
    obs: ForceObserver,
    steps: Steps,
    a: int,
    b: int,
    z: SpillArray,
    chunk: int,
    say: Callable[[str], None] = lambda _: None,
) -> SmootherFit:
    """`fit_prior` of rows ``a..b`` of ``z`` (outliers already NaN); ``say`` hears of each
    pass of the filter."""
    best: SmootherFit | None = None
    passes = itertools.count(1)
    starts = {FAMILY_HOLD: obs.models.q_hold_n2_per_s, FAMILY_RATE: obs.models.q_rate_n2_per_s3[0]}
    for family, q0 in starts.items():

        def ll(p: tuple[float, ...], family: int = family) -> float:
            # far out on the grid (a tiny noise after a long gap) the filter can break
            # down numerically; such a point has likelihood −∞ and the search turns back
            say(f"fitting the force prior, pass {next(passes)}")
            model = OneModel.of(obs, family, p[0], p[1], steps.dts)
            record = (z.read(ca, cb) for ca, cb in chunks(a, b, chunk))
            try:
                value = forward(model, steps, a, b, record, None, chunk)
            except ZeroDivisionError:
                return -math.inf
            return value if math.isfinite(value) else -math.inf

        # the intensity in coarse steps first (its optimum may be decades away)
        found = ascend(ll, (q0, 1.0), (_STEP**2, 1.1), widen=_WIDEN)
        q, noise = found.point
        q, value = _refine(lambda q, noise=noise: ll((q, noise)), q, found.value)
        fit = SmootherFit(family, q, noise, value)
        if best is None or fit.log_likelihood > best.log_likelihood:
            best = fit
    assert best is not None
    return best


def _refine(f: Callable[[float], float], q: float, value: float) -> tuple[float, float]:
    """The intensity that maximises ``f`` between ``q/_STEP`` and ``q·_STEP`` (Brent's
    bounded search on ``ln q``) and its value; ``(q, value)`` when nothing there is better."""
    worse = -value + 1e6 * (1.0 + abs(value))  # for a point whose likelihood is −∞

    def cost(u: float) -> float:
        v = f(math.exp(u))
        return -v if math.isfinite(v) else worse

    found = scipy.optimize.minimize_scalar(
        cost,
        bounds=(math.log(q / _STEP), math.log(q * _STEP)),
        method="bounded",
        options={"xatol": 0.01},
    )
    if found.success and -found.fun > value:
        return math.exp(found.x), -float(found.fun)
    return q, value


@dataclass
class _Record:
    """A record's sample times (s), readings (m) and live estimates, as spill arrays."""

    t: SpillArray
    z: SpillArray
    live: SpillArray

    @classmethod
    def of_arrays(
        cls, scratch: SpillFolder, t: np.ndarray, z: np.ndarray, live: np.ndarray
    ) -> _Record:
        record = cls(
            scratch.array("time_s", t.size, np.float64),
            scratch.array("displacement_m", z.size, np.float64),
            scratch.array("live", live.size, ESTIMATE_DTYPE),
        )
        record.t.write(0, t)
        record.z.write(0, z)
        record.live.write(0, live)
        return record

    @property
    def n(self) -> int:
        return self.t.n


def smooth_record(
    observer: ForceObserver,
    time_s: np.ndarray,
    displacement_m: np.ndarray,
    *,
    chunk: int = CHUNK,
) -> np.ndarray:
    """Smoothed estimates of a whole record, one ``ESTIMATE_DTYPE`` row per sample, with
    its arrays in memory (`RecordSmoother` keeps them in files).

    ``observer`` is reset and used for the live-style forward pass.
    """
    t = np.ascontiguousarray(time_s, dtype=float)
    z = np.ascontiguousarray(displacement_m, dtype=float)
    observer.reset()
    live = observer.process(t, z)
    with SpillFolder(in_files=False) as scratch:
        record = _Record.of_arrays(scratch, t, z, live)
        out = scratch.array("smoothed", t.size, ESTIMATE_DTYPE)
        _smooth(observer, record, out, scratch, chunk)
        return out.read(0, t.size)


class RecordSmoother:
    """Smooths a record fed a block at a time (`add`) in bounded memory: the samples, the
    live estimates and every pass's arrays go to files in a temporary folder (in
    ``folder``, default the system's), removed by `close`. `smooth` then smooths it, and
    `rows` yields the smoothed estimates in order, a slice at a time, each with its
    readings. The same numbers as `smooth_record`."""

    def __init__(
        self, observer: ForceObserver, *, chunk: int = CHUNK, folder: str | Path | None = None
    ) -> None:
        observer.reset()
        self.observer = observer
        self._chunk = chunk
        self._scratch = SpillFolder(in_files=True, parent=folder)
        self._out: SpillArray | None = None
        self._record = _Record(
            self._scratch.array("time_s", 0, np.float64),
            self._scratch.array("displacement_m", 0, np.float64),
            self._scratch.array("live", 0, ESTIMATE_DTYPE),
        )

    def add(self, time_s: np.ndarray, displacement_m: np.ndarray) -> None:
        """The next block of the record (the live pass runs on it now)."""
        t = np.ascontiguousarray(time_s, dtype=float)
        z = np.ascontiguousarray(displacement_m, dtype=float)
        live = self.observer.process(t, z)
        self._record.t.append(t)
        self._record.z.append(z)
        self._record.live.append(live)

    def smooth(self, say: Callable[[str], None] = lambda _: None) -> None:
        """Smooth the record fed so far (all of the work); ``say`` hears which pass over
        the record is under way (for a progress display)."""
        n = self._record.n
        self._out = self._scratch.reused("smoothed", n, ESTIMATE_DTYPE)
        _smooth(self.observer, self._record, self._out, self._scratch, self._chunk, say)

    def rows(self) -> Iterator[tuple[np.ndarray, np.ndarray]]:
        """``(estimates, displacement_m)`` of the record, a slice at a time, in order:
        the smoothed rows and the readings they came from (after `smooth`)."""
        if self._out is None:
            raise RuntimeError("RecordSmoother.rows: call smooth() first")
        for a, b in chunks(0, self._out.n, self._chunk):
            yield self._out.read(a, b), self._record.z.read(a, b)

    def close(self) -> None:
        """Remove the temporary folder and its files."""
        self._scratch.close()

    def __enter__(self) -> RecordSmoother:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()


def _smooth(
    observer: ForceObserver,
    record: _Record,
    out: SpillArray,
    scratch: SpillFolder,
    chunk: int,
    say: Callable[[str], None] = lambda _: None,
) -> None:
    """Smoothed rows of the whole record into ``out``: each stretch between silences that
    restarted the live pass is smoothed alone (a record of its own)."""
    stretches = _stretches(observer, record.t, chunk)
    for i, (a, b) in enumerate(stretches, start=1):
        if b - a < 2:
            out.write(a, record.live.read(a, b))
        else:
            where = f"stretch {i} of {len(stretches)}: " if len(stretches) > 1 else ""
            _smooth_stretch(
                observer,
                record,
                a,
                b,
                out,
                scratch,
                chunk,
                lambda text, where=where: say(where + text),
            )


def _stretches(observer: ForceObserver, t: SpillArray, chunk: int) -> list[tuple[int, int]]:
    """``(a, b)`` of the stretches between silences longer than the restart gap."""
    cuts = [0]
    last = math.nan
    for a, b in chunks(0, t.n, chunk):
        values = t.read(a, b)
        with np.errstate(invalid="ignore"):
            gaps = np.diff(np.concatenate(([last], values))) > observer.restart_gap_s
        cuts.extend((a + np.flatnonzero(gaps)).tolist())
        last = values[-1]
    cuts.append(t.n)
    return [(a, b) for a, b in itertools.pairwise(cuts) if b > a]


def _outliers(live: SpillArray, a: int, ca: int, cb: int) -> np.ndarray:
    """Which of rows ``ca..cb`` the live pass judged outliers (`judged_outliers`)."""
    lo = max(a, ca - _HELD)
    return judged_outliers(live.read(lo, cb)["flags"])[ca - lo :]


def _smooth_stretch(
    obs: ForceObserver,
    record: _Record,
    a: int,
    b: int,
    out: SpillArray,
    scratch: SpillFolder,
    chunk: int,
    say: Callable[[str], None],
) -> None:
    n = record.n
    # the samples the live pass judged outliers are left out
    z_clean = scratch.reused("clean_displacement_m", n, np.float64)
    for ca, cb in chunks(a, b, chunk):
        z = record.z.read(ca, cb)
        z[_outliers(record.live, a, ca, cb)] = np.nan
        z_clean.write(ca, z)
    steps = Steps.of(obs, record.t, a, b, scratch.reused("step_rows", n, np.int64), chunk)
    D = scaling(obs.plant)
    state = scratch.reused("smoothed_state", n, np.float64, (4,))

    def smooth(
        model: OneModel,
        values: Iterable[np.ndarray],
        emit: Callable[[int, np.ndarray], None],
        emit_var: Callable[[int, np.ndarray], None] | None = None,
    ) -> None:
        """A fitted prior's RTS smoother (its gains fixed) over the stretch."""
        smooth_pass(model, steps, a, b, values, scratch, emit, chunk, emit_var)

    model = _fit_and_smooth(obs, record, a, b, z_clean, state, smooth, scratch, steps, chunk, say)
    var = scratch.reused("smoothed_var", n, np.float64)
    passes = itertools.count(1)

    def again(values: Iterable[np.ndarray], emit: Emit) -> None:
        say(f"its uncertainty, pass {next(passes)} of {2 * REPLICAS + 1}")
        smooth(model, values, lambda ca, x: emit(ca - a, x[:, 0] / D[0], x[:, 2]))

    smoother_variance_in_slices(
        again,
        lambda i, j: np.isnan(z_clean.read(a + i, a + j)),
        lambda i, j: state.read(a + i, a + j)[:, 0] / D[0],
        lambda i, j: state.read(a + i, a + j)[:, 2],
        obs.measurement_sd_m,
        b - a,
        scratch,
        lambda i, values: var.write(a + i, values),
        chunk=chunk,
    )
    for ca, cb in chunks(a, b, chunk):
        live = record.live.read(ca, cb)
        rows = live.copy()
        x = state.read(ca, cb)
        rows["force_n"] = x[:, 2]
        rows["displacement_m"] = x[:, 0] / D[0]
        rows["velocity_m_s"] = x[:, 1] / D[1]
        rows["force_u_n"] = np.sqrt(
            obs.stated_variance_n2(
                var.read(ca, cb), rows["force_n"], rows["displacement_m"], rows["velocity_m_s"]
            )
        )
        rows["p_hold"] = float(model.family == FAMILY_HOLD)
        rows["p_rate"] = float(model.family == FAMILY_RATE)
        rows["p_jump"] = 0.0
        near_change, busy = _near_changes(record.live, a, b, ca, cb)
        # near a load change the one prior smears it over rows on both sides, which its σ
        # does not know; the live estimate is right before the change and from its second
        # row on: the smoothed ±2σ reaches it
        rows["force_u_n"] = np.where(near_change, _reaching(rows, live), rows["force_u_n"])
        # where the live bank states the smaller σ, away from load changes, it is the
        # better estimate (a held load: one fitted prior must be rough enough for the
        # steps too)
        use_live = (live["force_u_n"] < rows["force_u_n"]) & ~busy
        rows[use_live] = live[use_live]
        out.write(ca, rows)


def _fit_and_smooth(
    obs: ForceObserver,
    record: _Record,
    a: int,
    b: int,
    z_clean: SpillArray,
    state: SpillArray,
    smooth: Callable[..., None],
    scratch: SpillFolder,
    steps: Steps,
    chunk: int,
    say: Callable[[str], None],
) -> OneModel:
    """Fit the prior to the readings of ``z_clean`` (rows ``a..b``), smooth them into
    ``state``, decide the outliers again from both sides (`_redecide`, `_unconfirmed`)
    and, while that changes ``z_clean``, fit and smooth again (at most ``_ROUNDS`` times);
    returns the prior fitted last."""
    state_var = scratch.reused("smoothed_state_var", record.n, np.float64, (4,))
    k = obs.plant.stiffness_n_per_m
    tried: list[int] = []  # rows the smoother has tried to leave out on its own
    for round_ in range(_ROUNDS + 1):
        fit = _fit(obs, steps, a, b, z_clean, chunk, say)
        model = OneModel.of(obs, fit.family, fit.intensity, fit.noise_scale, steps.dts)

        def smooth_readings(model: OneModel = model) -> None:
            readings = (z_clean.read(ca, cb) for ca, cb in chunks(a, b, chunk))
            smooth(model, readings, state.write, state_var.write)

        say("smoothing" if round_ == 0 else "smoothing again, outliers decided from both sides")
        smooth_readings()
        if round_ == _ROUNDS:
            break
        residuals = _Residuals(record.z, z_clean, state, state_var, k, model.R)
        changed, candidates = _redecide(residuals, record.live, a, b, chunk, tried)
        if candidates:
            say("checking the outliers found from both sides")
            smooth_readings()
            restored = _unconfirmed(residuals, candidates, a, b)
            changed -= restored
            if restored and not changed:
                smooth_readings()  # the readings as they stand again
        if not changed:
            break
    return model


@dataclass(frozen=True)
class _Residuals:
    """The readings against the smoothed trajectory, in the kernel's scaled units (N):
    ``k·z − x̂`` and the variances that standardise it."""

    z: SpillArray
    z_clean: SpillArray
    state: SpillArray
    state_var: SpillArray
    k: float  # stiffness, N/m: the scale of the displacement
    R: float  # measurement variance of the fitted model, N²

    def read(self, lo: int, hi: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Rows ``lo..hi``: ``(raw readings, used readings (NaN where left out), |u|)``.
        For a used reading ``u`` is the standardised smoothed residual
        ``(k·z − x̂)/√(R − P)``, its deletion residual. For one left out it is
        ``|k·z − x̂|/√R`` where the trajectory is known at least as well as a reading
        (``P ≤ R``), and infinite elsewhere: against its two-sided prediction alone
        (``√(R + P)``) a 50σ spike on a lightly damped cell read three times a period,
        where ``P`` is wide, passed as a reading and was used again (invented 342 Hz cell
        at 1 kHz: five spikes used, that record 1.04 times worse)."""
        raw, used = self.z.read(lo, hi), self.z_clean.read(lo, hi)
        r = np.abs(self.k * raw - self.state.read(lo, hi)[:, 0])
        P = self.state_var.read(lo, hi)[:, 0]
        out = np.isnan(used)
        with np.errstate(divide="ignore"):
            left_out = np.where(P <= self.R, r / math.sqrt(self.R), np.inf)
        kept = r / np.sqrt(np.maximum(self.R - P, 1e-6 * self.R))
        return raw, used, np.where(out, left_out, kept)


def _redecide(
    residuals: _Residuals, live: SpillArray, a: int, b: int, chunk: int, tried: list[int]
) -> tuple[int, list[int]]:
    """Decide the outliers of rows ``a..b`` again against the smoothed trajectory, which
    saw the samples on both sides: ``(how many readings changed in z_clean, the rows newly
    left out)``; those rows are added to ``tried``.

    Live, a sample is judged from the ones before it and one or two after, and a spike
    during a fast change can pass as motion while the good sample next to it is left out
    (an invented 1 kHz random load: the smoothed rows about it 2 N off on a 330 N span).
    Offline, each reading's deletion residual (the reading against the trajectory of all
    the others; de Jong, "Smoothing and interpolation with the state-space model", JASA
    84, 1989) tells them apart: a used reading beyond ``_SPIKE`` standard deviations, the
    largest within ``_APART`` rows and the first tried there, is left out (`_unconfirmed`
    then checks it), and a reading left out live that is within ``_CALM`` is used again.
    One fitted prior cannot follow a load step within a sample, so the first reading of a
    step lies as far off the trajectory as a spike; where the live bank's jump models led
    a row within ``_NEAR`` rows (it saw a load change there) no reading is left out.
    """
    changed = 0
    candidates: list[int] = []
    window = 2 * _APART + 1
    for ca, cb in chunks(a, b, chunk):
        before = changed
        lo, hi = max(a, ca - _APART), min(b, cb + _APART)
        raw, used, u = residuals.read(lo, hi)
        jump = (live.read(lo, hi)["flags"] & FLAG_JUMP) != 0
        near_jump = np.convolve(jump, np.ones(2 * _NEAR + 1), "same") > 0
        scored = np.where(np.isfinite(used), u, 0.0)
        peak = scored >= scipy.ndimage.maximum_filter1d(scored, window, mode="constant")
        i = slice(ca - lo, cb - lo)
        back = np.isnan(used[i]) & np.isfinite(raw[i]) & (u[i] <= _CALM)
        spike = np.isfinite(used[i]) & (u[i] > _SPIKE) & ~near_jump[i] & peak[i]
        rows = used[i].copy()
        rows[back] = raw[i][back]
        changed += int(back.sum())
        for p in (ca + np.flatnonzero(spike)).tolist():
            if not any(abs(p - q) <= _APART for q in tried):
                rows[p - ca] = np.nan
                tried.append(p)
                candidates.append(p)
                changed += 1
        if changed > before:
            residuals.z_clean.write(ca, rows)
    return changed, candidates


def _unconfirmed(residuals: _Residuals, candidates: list[int], a: int, b: int) -> int:
    """Use again each of ``candidates`` (rows just left out, the trajectory smoothed
    without them) whose neighbours within ``_NEAR`` rows are not all within ``_CALM``;
    returns how many. Without a spike the readings around it fit the trajectory at once;
    a reading at the corner of a load, which one fitted prior cannot follow within a
    sample, leaves its neighbours off too (an invented overdamped cell at 1 kHz: the two
    corners of a half-sine pulse left out made that record 1.42 times worse)."""
    restored = 0
    for p in candidates:
        lo, hi = max(a, p - _NEAR), min(b, p + _NEAR + 1)
        raw, used, u = residuals.read(lo, hi)
        if np.any(np.isfinite(used) & (u > _CALM)):
            used[p - lo] = raw[p - lo]
            residuals.z_clean.write(lo, used)
            restored += 1
    return restored


def _near_changes(
    live: SpillArray, a: int, b: int, ca: int, cb: int
) -> tuple[np.ndarray, np.ndarray]:
    """Rows ``ca..cb`` within ``_GUARD`` rows of a load change seen live (a suspect sample
    then used, or a jump row), and rows within ``_GUARD`` rows of such a change or of a row
    where the live bank was not mostly in its hold model."""
    lo, hi = max(a, ca - _GUARD), min(b, cb + _GUARD)
    rows = live.read(lo, hi)
    flags = rows["flags"]
    # a row is "used" unless it is a suspect then judged an outlier: an outlier is no change
    used = ~_outliers(live, a, lo, hi)
    change = (flags & (FLAG_REJECTED | FLAG_JUMP) != 0) & used
    moving = (rows["p_hold"] < _HOLD) & used
    window = np.ones(2 * _GUARD + 1)
    near_change = np.convolve(change, window, "same") > 0
    busy = np.convolve(change | moving, window, "same") > 0
    return near_change[ca - lo : cb - lo], busy[ca - lo : cb - lo]


def _reaching(smoothed: np.ndarray, live: np.ndarray) -> np.ndarray:
    """The smoothed σ widened so that its ±2σ reaches the live estimate: at least half the
    distance between the two, plus the smaller of their σ (the better-known one's own
    error), σ_s' = max(σ_s, |F_s − F_l|/2 + min(σ_s, σ_l))."""
    s, v = smoothed["force_u_n"], live["force_u_n"]
    gap = 0.5 * np.abs(smoothed["force_n"] - live["force_n"]) + np.minimum(s, v)
    return np.maximum(s, gap)
