"""The smoother's one-model Kalman filter and its Rauch–Tung–Striebel backward pass over a
stretch of a record, a slice of rows at a time (`estimator.spill`), so that a record of any
length is smoothed in bounded memory.

A stretch is rows ``a`` to ``b`` of a record with no silence long enough to restart the
observer. Its step lengths (`Steps`) and the filter's per-sample posteriors are kept in
`SpillArray`s; the backward pass walks the slices last to first, carrying the smoothed
state of the sample after each slice (`kim_backward_block`). The numbers do not depend on
where the arrays live, and on a stretch of one slice they are those of the whole-record
recursion.
"""

from __future__ import annotations

import dataclasses
import itertools
from collections.abc import Callable, Iterable, Iterator

import numpy as np

from estimator.force_models import FAMILY_HOLD, FAMILY_RATE, model_tables
from estimator.mm_kernel import imm_block
from estimator.mm_smooth_kernel import kim_backward_block, kim_last
from estimator.observer import ForceObserver
from estimator.spill import CHUNK, SpillArray, SpillFolder, chunks, chunks_backward

__all__ = ["OneModel", "Steps", "backward", "forward", "smooth_pass"]


@dataclasses.dataclass(frozen=True)
class Steps:
    """The distinct step lengths of a stretch, nominal first (``dts``), and each sample's
    row among them (``rows``, a record-long array: the step into each sample; the first
    sample of a stretch counts as nominal)."""

    dts: np.ndarray
    rows: SpillArray

    @classmethod
    def of(
        cls, obs: ForceObserver, t: SpillArray, a: int, b: int, rows: SpillArray, chunk: int
    ) -> Steps:
        """Scan rows ``a..b`` of ``t`` twice: the distinct lengths, then each sample's row."""
        seen = np.zeros(0)
        for ca, cb in chunks(a, b, chunk):
            seen = np.union1d(seen, _step_lengths(obs, t, a, ca, cb))
        # np.unique sorts ascending; the nominal length goes first, the rest keep their order
        order = np.argsort(seen != obs.dt_s, kind="stable")
        rank = np.empty_like(order)
        rank[order] = np.arange(order.size)
        for ca, cb in chunks(a, b, chunk):
            dt = _step_lengths(obs, t, a, ca, cb)
            rows.write(ca, rank[np.searchsorted(seen, dt)].astype(np.int64))
        return cls(seen[order], rows)


def _step_lengths(obs: ForceObserver, t: SpillArray, a: int, ca: int, cb: int) -> np.ndarray:
    """The step into each of rows ``ca..cb``, nominal within the timing tolerance."""
    before = t.read(ca - 1, cb) if ca > a else t.read(ca, cb)
    dt = np.empty(cb - ca)
    if ca > a:
        np.subtract(before[1:], before[:-1], out=dt)
    else:
        dt[0] = obs.dt_s
        np.subtract(before[1:], before[:-1], out=dt[1:])
    nominal = np.abs(dt - obs.dt_s) <= obs.tuning.timing_tolerance * obs.dt_s
    dt[nominal] = obs.dt_s
    return dt


@dataclasses.dataclass(frozen=True)
class OneModel:
    """One force prior of the bank (family and intensity) with a noise scale, as a bank of
    one model: its tables per step length and its measurement variance (scaled units)."""

    obs: ForceObserver
    family: int
    PHI: np.ndarray
    Q: np.ndarray
    PI: np.ndarray
    R: float

    @classmethod
    def of(
        cls, obs: ForceObserver, family: int, q: float, noise: float, dts: np.ndarray
    ) -> OneModel:
        models = dataclasses.replace(obs.models, q_hold_n2_per_s=q, q_rate_n2_per_s3=(q,))
        PHI, Q, _ = model_tables(obs.plant, models, dts)
        j = 0 if family == FAMILY_HOLD else 1  # the hold model, or the slowest rate model
        k = obs.plant.stiffness_n_per_m
        return cls(
            obs,
            family,
            PHI[:, j : j + 1].copy(),
            Q[:, j : j + 1].copy(),
            np.ones((dts.size, 1, 1)),
            k * k * obs.R * noise * noise,
        )


def forward(
    model: OneModel,
    steps: Steps,
    a: int,
    b: int,
    record: Iterable[np.ndarray],
    log: tuple[SpillArray, SpillArray, SpillArray] | None = None,
    chunk: int = CHUNK,
) -> float:
    """Run the filter over rows ``a..b``; returns the innovation log-likelihood.

    ``record`` yields the displacement (m, NaN where left out) of each slice of
    ``chunks(a, b, chunk)`` in order; it is read once. With ``log`` the filtered states,
    covariances and mode probabilities are written to those record-long arrays.
    """
    obs = model.obs
    k = obs.plant.stiffness_n_per_m
    slices, first = _peek_finite(iter(record))
    z0 = k * first
    x = np.zeros((2, 1, 4))
    x[:, 0] = (z0, 0.0, z0, 0.0)
    s = obs.force_span_n
    P = np.zeros((2, 1, 4, 4))
    P[:, 0] = np.diag([model.R, s * s, s * s, s * s if model.family == FAMILY_RATE else 0.0])
    mu = np.ones((2, 1))
    pend = np.zeros(8)
    PD = np.zeros_like(P)
    total = 0.0
    for (ca, cb), z in zip(chunks(a, b, chunk), slices, strict=True):
        n = cb - ca
        ox, ov = np.empty((n, 4)), np.empty((n, 4))
        oy, os_, of, om, oll = (np.empty(n), np.empty(n), np.empty(n, np.int64),
                                np.empty((n, 1)), np.empty(n))  # fmt: skip
        lx = np.empty((n if log else 0, 1, 4))
        lP = np.empty((n if log else 0, 1, 4, 4))
        imm_block(k * z, steps.rows.read(ca, cb), model.PHI, model.Q, model.Q, model.PI,
                  model.R, 1e12, 1e-3, 1.0, 0.0, np.zeros(1), 0.0, -1, -1,
                  np.zeros(1, np.bool_), x, P, PD, mu, pend,
                  ox, ov, oy, os_, of, om, oll, lx, lP)  # fmt: skip
        total += float(oll.sum())
        if log:
            log[0].write(ca, lx)
            log[1].write(ca, lP)
            log[2].write(ca, om)
    return total


def _peek_finite(slices: Iterator[np.ndarray]) -> tuple[Iterator[np.ndarray], float]:
    """The slices again, and the first finite value among them (0 when none): read ahead
    only as far as it takes."""
    seen = []
    for z in slices:
        seen.append(z)
        finite = np.flatnonzero(np.isfinite(z))
        if finite.size:
            return itertools.chain(seen, slices), float(z[finite[0]])
    return iter(seen), 0.0


def backward(
    model: OneModel,
    steps: Steps,
    a: int,
    b: int,
    log: tuple[SpillArray, SpillArray, SpillArray],
    emit: Callable[[int, np.ndarray], None],
    chunk: int = CHUNK,
    emit_var: Callable[[int, np.ndarray], None] | None = None,
) -> None:
    """The Rauch–Tung–Striebel pass over the filter's ``log`` of rows ``a..b``, slices
    last to first: ``emit(first row, smoothed state (m, 4))`` for each, and with
    ``emit_var`` the variances of those states (m, 4)."""
    fx, fP, fmu = log
    sx, sP, smu = np.empty((1, 4)), np.empty((1, 4, 4)), np.empty(1)
    for ca, cb in chunks_backward(a, b, chunk):
        n = cb - ca
        x, P, mu = fx.read(ca, cb), fP.read(ca, cb), fmu.read(ca, cb)
        out_x, out_var, out_mu = np.empty((n, 4)), np.empty((n, 4)), np.empty((n, 1))
        rows = steps.rows.read(ca + 1, min(cb + 1, b))  # the step out of each sample
        if cb == b:  # the stretch's last sample: its filtered posterior is smoothed
            kim_last(x[-1], P[-1], mu[-1], sx, sP, smu, out_x[-1:], out_var[-1:], out_mu[-1:])
            n -= 1
        kim_backward_block(rows, model.PHI, model.Q, model.PI, x[:n], P[:n], mu[:n],
                           sx, sP, smu, out_x[:n], out_var[:n], out_mu[:n])  # fmt: skip
        emit(ca, out_x)
        if emit_var is not None:
            emit_var(ca, out_var)


def smooth_pass(
    model: OneModel,
    steps: Steps,
    a: int,
    b: int,
    record: Iterable[np.ndarray],
    scratch: SpillFolder,
    emit: Callable[[int, np.ndarray], None],
    chunk: int = CHUNK,
    emit_var: Callable[[int, np.ndarray], None] | None = None,
) -> None:
    """Filter then smooth rows ``a..b`` of ``record`` (slices in order, as `forward`);
    the filter's log is kept in ``scratch`` (the same three arrays on every call).
    ``emit`` and ``emit_var`` as in `backward`."""
    log = _log_arrays(scratch, steps.rows.n)
    forward(model, steps, a, b, record, log, chunk)
    backward(model, steps, a, b, log, emit, chunk, emit_var)


def _log_arrays(scratch: SpillFolder, n: int) -> tuple[SpillArray, SpillArray, SpillArray]:
    return (
        scratch.reused("filtered_x", n, np.float64, (1, 4)),
        scratch.reused("filtered_P", n, np.float64, (1, 4, 4)),
        scratch.reused("filtered_mu", n, np.float64, (1,)),
    )
