"""Fixed-interval smoothing of a whole record, for offline use.

The live observer can only use samples up to the present; offline, the smoother also
uses every later sample, which removes the filter's lag.

1. **Outliers** are decided exactly as live (the observer's own forward pass); the
   samples it judged outliers are then treated as missing.
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

Innovation, NIS and flags are those of the live pass; force, its uncertainty,
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
    fit = _fit(obs, steps, a, b, z_clean, chunk, say)
    model = OneModel.of(obs, fit.family, fit.intensity, fit.noise_scale, steps.dts)

    def smooth(values: Iterable[np.ndarray], emit: Callable[[int, np.ndarray], None]) -> None:
        """The fitted prior's RTS smoother (its gains fixed) over the stretch."""
        smooth_pass(model, steps, a, b, values, scratch, emit, chunk)

    state = scratch.reused("smoothed_state", n, np.float64, (4,))
    say("smoothing")
    smooth((z_clean.read(ca, cb) for ca, cb in chunks(a, b, chunk)), state.write)
    D = scaling(obs.plant)
    var = scratch.reused("smoothed_var", n, np.float64)
    passes = itertools.count(1)

    def again(values: Iterable[np.ndarray], emit: Emit) -> None:
        say(f"its uncertainty, pass {next(passes)} of {2 * REPLICAS + 1}")
        smooth(values, lambda ca, x: emit(ca - a, x[:, 0] / D[0], x[:, 2]))

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
        rows["force_u_n"] = np.sqrt(var.read(ca, cb))
        rows["displacement_m"] = x[:, 0] / D[0]
        rows["velocity_m_s"] = x[:, 1] / D[1]
        rows["p_hold"] = float(fit.family == FAMILY_HOLD)
        rows["p_rate"] = float(fit.family == FAMILY_RATE)
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
