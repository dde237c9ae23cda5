"""Checks of the accuracy benchmark's yardsticks and truth against outside references.

* the compiled Kalman filter against filterpy's ``KalmanFilter`` (predict/update per
  sample, Joseph form), on a short record with dropped rows (several step lengths);
* the compiled RTS smoother against filterpy's ``KalmanFilter.rts_smoother``
  (Rauch, Tung & Striebel 1965);
* the exact discretisation against a direct quadrature of Van Loan's integral with
  ``scipy.integrate.quad_vec`` and ``scipy.linalg.expm`` (Van Loan 1978), and its force
  blocks against the textbook closed forms ``q·dt`` (random walk) and
  ``q·[[dt³/3, dt²/2], [dt²/2, dt]]`` (integrated random walk; Bar-Shalom, Li &
  Kirubarajan 2001, "continuous white noise acceleration" model);
* the truth simulation against the closed-form step response of a second-order system
  (Ogata, "Modern Control Engineering", transient response of second-order systems):
  ``x = F/k·[1 − e^(−ζωn t)(cos ωd t + ζ/√(1−ζ²)·sin ωd t)]`` for ζ < 1 and, for ζ > 1,
  ``x = F/k·[1 − e^(−ζωn t)(cosh ωo t + ζ/√(ζ²−1)·sinh ωo t)]``, ``ωo = ωn√(ζ²−1)``.

Cells are the benchmark's invented cells; random data are seeded.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.integrate
import scipy.linalg
from accuracy.cells import CELLS, Cell
from accuracy.kalman import kalman_filter, rts_smoother
from accuracy.loads import Load
from accuracy.models import (
    discretize,
    initial_state,
    integrated_random_walk_model,
    random_walk_model,
    step_table,
)
from accuracy.truth import simulate
from filterpy.kalman import KalmanFilter

MODELS = {"RW": random_walk_model, "IRW": integrated_random_walk_model}


def short_record(cell: Cell, n: int, seed: int) -> tuple[np.ndarray, np.ndarray]:
    """Times (s) with 2 % of rows dropped and readings (m): a drifting load plus noise."""
    rng = np.random.default_rng(seed)
    t = np.arange(n) * cell.dt_s
    keep = np.ones(n, bool)
    keep[rng.choice(np.arange(1, n), size=n // 50, replace=False)] = False
    force = 0.3 * cell.force_range_n + np.cumsum(rng.normal(0.0, 0.5, n))
    z = force / cell.stiffness_n_per_m + rng.normal(0.0, cell.noise_m, n)
    return t[keep], z[keep]


def filterpy_run(
    z: np.ndarray, kind: np.ndarray, Phi: np.ndarray, Q: np.ndarray, R: float, x0, P0
) -> tuple[np.ndarray, np.ndarray, KalmanFilter]:
    d = x0.size
    kf = KalmanFilter(dim_x=d, dim_z=1)
    kf.x = x0.reshape(d, 1).copy()
    kf.P = P0.copy()
    kf.H = np.eye(1, d)
    kf.R = np.array([[R]])
    xs, Ps = np.empty((z.size, d, 1)), np.empty((z.size, d, d))
    xs[0], Ps[0] = kf.x, kf.P  # sample 0: the start, already conditioned on z[0]
    for i in range(1, z.size):
        kf.predict(F=Phi[kind[i]], Q=Q[kind[i]])
        kf.update(z[i])
        xs[i], Ps[i] = kf.x, kf.P
    return xs, Ps, kf


def assert_close_scaled(ours: np.ndarray, ref: np.ndarray, tol: float = 1e-9) -> None:
    """Per state (last axis) or covariance element, relative to that quantity's size."""
    if ours.ndim == 2:  # states (n, d)
        scale = np.max(np.abs(ref), axis=0)
    else:  # covariances (n, d, d): relative to √(Pii Pjj)
        sd = np.sqrt(np.abs(np.diagonal(ref, axis1=1, axis2=2)))
        scale = sd[:, :, None] * sd[:, None, :]
    limit = np.broadcast_to(tol * scale, ref.shape)
    np.testing.assert_array_less(np.abs(ours - ref), limit + 1e-300)


def prepared(name: str, cell: Cell) -> tuple[np.ndarray, ...]:
    model = MODELS[name](cell)
    t, z = short_record(cell, 400, seed=7)
    kind, Phi, Q1 = step_table(model, t, cell.dt_s)
    assert Phi.shape[0] >= 2  # dropped rows give more than one step length
    return model, z, kind, Phi, 0.1 * model.q_ref * Q1


@pytest.mark.parametrize("name", ["RW", "IRW"])
@pytest.mark.parametrize("cell", CELLS, ids=lambda c: c.name)
def test_filter_matches_filterpy(name: str, cell: Cell) -> None:
    model, z, kind, Phi, Q = prepared(name, cell)
    x0, P0 = initial_state(model, cell, float(z[0]))  # the benchmark's own start
    R = cell.measurement_var_m2
    xf, Pf, _, _, _ = kalman_filter(z, kind, Phi, Q, R, x0, P0)
    ref_x, ref_P, _ = filterpy_run(z, kind, Phi, Q, R, x0, P0)
    assert_close_scaled(xf, ref_x[:, :, 0])
    assert_close_scaled(Pf, ref_P)


@pytest.mark.parametrize("name", ["RW", "IRW"])
@pytest.mark.parametrize("cell", CELLS, ids=lambda c: c.name)
def test_smoother_matches_filterpy(name: str, cell: Cell) -> None:
    model, z, kind, Phi, Q = prepared(name, cell)
    # A full-rank start: the benchmark's start is rank-deficient (at rest, x = F/k), so
    # the first few predicted covariances are nearly singular and any two ways of
    # inverting them (filterpy's plain inverse, our scaled Cholesky) differ there.
    R = cell.measurement_var_m2
    sf, wn = cell.stiffness_n_per_m * math.sqrt(R), cell.omega_n_rad_s
    x0 = float(z[0]) * np.array([1.0, 0.0, cell.stiffness_n_per_m, 0.0])[: model.dim]
    P0 = np.diag([R, wn * wn * R, 4.0 * sf * sf, (wn * sf) ** 2][: model.dim])
    xf, Pf, xp, Pp, _ = kalman_filter(z, kind, Phi, Q, R, x0, P0)
    ref_x, ref_P, kf = filterpy_run(z, kind, Phi, Q, R, x0, P0)
    # filterpy's convention: Fs[k+1], Qs[k+1] take sample k to k+1.
    Fs = [Phi[k] for k in kind]
    Qs = [Q[k] for k in kind]
    ref_xs, ref_Ps, _, _ = kf.rts_smoother(ref_x, ref_P, Fs=Fs, Qs=Qs)
    xs, Ps = rts_smoother(xf, Pf, xp, Pp, kind, Phi)
    assert_close_scaled(xs, ref_xs[:, :, 0])
    assert_close_scaled(Ps, ref_Ps)


@pytest.mark.parametrize("name", ["RW", "IRW"])
@pytest.mark.parametrize("cell", CELLS, ids=lambda c: c.name)
def test_discretisation_matches_quadrature(name: str, cell: Cell) -> None:
    model = MODELS[name](cell)
    dt, q = 3.0 * cell.dt_s, 2.0 * model.q_ref
    phi, Q = discretize(model, dt, q)
    np.testing.assert_allclose(phi, scipy.linalg.expm(model.A * dt), rtol=1e-10, atol=0.0)
    # Van Loan's integral, Qd = ∫₀^dt e^(Aτ) L q Lᵀ e^(Aᵀτ) dτ, in scaled states.
    D = model.scale

    def integrand(tau: float) -> np.ndarray:
        g = (scipy.linalg.expm(model.A * tau) @ model.L)[:, 0] / D
        return q * np.outer(g, g)

    ref, _ = scipy.integrate.quad_vec(integrand, 0.0, dt, epsabs=0.0, epsrel=1e-12)
    sd = np.sqrt(np.diag(ref))
    np.testing.assert_array_less(np.abs(Q / np.outer(D, D) - ref), 1e-9 * np.outer(sd, sd))
    # The force blocks do not depend on the plant.
    if name == "RW":
        assert Q[2, 2] == pytest.approx(q * dt, rel=1e-12)
    else:
        block = q * np.array([[dt**3 / 3, dt**2 / 2], [dt**2 / 2, dt]])
        np.testing.assert_allclose(Q[2:, 2:], block, rtol=1e-11)


def closed_form_step(cell: Cell, force_n: float, t_s: np.ndarray) -> np.ndarray:
    """Ogata's unit-step response of a second-order system, scaled by F/k (m)."""
    z, wn = cell.damping_ratio, cell.omega_n_rad_s
    tt = np.maximum(t_s, 0.0)
    if z < 1.0:
        wd = wn * math.sqrt(1.0 - z * z)
        tail = np.cos(wd * tt) + z / math.sqrt(1.0 - z * z) * np.sin(wd * tt)
    else:
        wo = wn * math.sqrt(z * z - 1.0)
        tail = np.cosh(wo * tt) + z / math.sqrt(z * z - 1.0) * np.sinh(wo * tt)
    return force_n / cell.stiffness_n_per_m * (1.0 - np.exp(-z * wn * tt) * tail)


@pytest.mark.parametrize("cell", CELLS, ids=lambda c: c.name)
def test_truth_matches_closed_form_step(cell: Cell) -> None:
    t0, height = 0.0123, 0.7 * cell.force_range_n

    def force(t: object) -> np.ndarray:
        return np.where(np.asarray(t, dtype=float) >= t0, height, 0.0)

    load = Load("step", force, (t0,), 0.15, (), "test step")
    t = np.arange(round(0.15 * cell.sample_rate_hz)) * cell.dt_s
    x = simulate(cell, load, t)
    ref = np.where(t >= t0, closed_form_step(cell, height, t - t0), 0.0)
    np.testing.assert_allclose(x, ref, rtol=0.0, atol=1e-8 * height / cell.stiffness_n_per_m)
