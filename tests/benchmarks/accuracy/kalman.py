"""Compiled Kalman filter, innovation likelihood and RTS smoother for a scalar reading.

Measurement ``z[i] = s[i][0] + noise``, ``H = [1, 0, …]``, variance ``R`` (m²). The
state at sample 0 is given, ``(x0, P0)``, already conditioned on ``z[0]`` (see
``accuracy.models.initial_state``); each later sample is predicted with
``Φ[kind[i]]``, ``Q[kind[i]]`` and then updated. The update is the Joseph form
``P = (I − K H) P (I − K H)ᵀ + K R Kᵀ``. The likelihood counts samples 1 … n−1 (the
first one fixes the start and does not depend on ``q``).

Sources: R. E. Kalman, "A new approach to linear filtering and prediction problems",
J. Basic Engineering 82(1), 35–45, 1960 (the filter); H. E. Rauch, F. Tung and
C. T. Striebel, "Maximum likelihood estimates of linear dynamic systems", AIAA
Journal 3(8), 1445–1450, 1965 (the smoother); the log-likelihood by the
prediction-error decomposition, ``ℓ = −½ Σ [ln(2π S) + y²/S]``, as in A. C. Harvey,
"Forecasting, Structural Time Series Models and the Kalman Filter", 1989 (cited from
memory).

The loops are compiled with numba (``cache=True``: compiled once per machine, kept in
``__pycache__``); shapes are given in each docstring. Private kernels go untyped.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit


@njit(cache=True)
def _predict(x, P, Phi, Q, x_out, P_out):
    d = x.size
    for i in range(d):
        acc = 0.0
        for j in range(d):
            acc += Phi[i, j] * x[j]
        x_out[i] = acc
    tmp = np.empty((d, d))
    for i in range(d):
        for j in range(d):
            acc = 0.0
            for k in range(d):
                acc += Phi[i, k] * P[k, j]
            tmp[i, j] = acc
    for i in range(d):
        for j in range(i, d):
            acc = 0.0
            for k in range(d):
                acc += tmp[i, k] * Phi[j, k]
            acc += 0.5 * (Q[i, j] + Q[j, i])
            P_out[i, j] = acc
            P_out[j, i] = acc


@njit(cache=True)
def _update(x, P, z, R, x_out, P_out):
    """Joseph-form update; returns ``(y, S)``: innovation (m) and its variance (m²)."""
    d = x.size
    S = P[0, 0] + R
    K = np.empty(d)
    for i in range(d):
        K[i] = P[i, 0] / S
    y = z - x[0]
    for i in range(d):
        x_out[i] = x[i] + K[i] * y
    A = np.empty((d, d))  # (I − K H) P
    for i in range(d):
        for j in range(d):
            A[i, j] = P[i, j] - K[i] * P[0, j]
    for i in range(d):
        for j in range(d):
            P_out[i, j] = A[i, j] - A[i, 0] * K[j] + R * K[i] * K[j]
    return y, S


@njit(cache=True)
def log_likelihood(
    z: np.ndarray,
    kind: np.ndarray,
    Phi: np.ndarray,
    Q1: np.ndarray,
    q: float,
    R: float,
    x0: np.ndarray,
    P0: np.ndarray,
) -> float:
    """Innovation log-likelihood of readings ``z`` (n,) for intensity ``q``.

    ``kind`` (n,) int64 selects ``Phi``/``Q1`` (K, d, d) for the step into each sample;
    the process noise is ``q·Q1``. ``R`` in m²; state at sample 0 ``x0`` (d,), ``P0`` (d, d).
    Returns ℓ (dimensionless; densities of z in 1/m).
    """
    d = x0.size
    n = z.size
    # Explicit loops throughout: numba's array expressions and slice assignments cost
    # seconds of compilation for nothing here.
    Q = np.empty(Q1.shape)
    x = np.empty(d)
    P = np.empty((d, d))
    for i in range(d):
        x[i] = x0[i]
        for j in range(d):
            P[i, j] = P0[i, j]
            for m in range(Q1.shape[0]):
                Q[m, i, j] = q * Q1[m, i, j]
    xa = np.empty(d)
    Pa = np.empty((d, d))
    ll = 0.0
    two_pi = 2.0 * math.pi
    for i in range(1, n):
        _predict(x, P, Phi[kind[i]], Q[kind[i]], xa, Pa)
        y, S = _update(xa, Pa, z[i], R, x, P)
        if not S > 0.0:
            return -np.inf
        ll -= 0.5 * (math.log(two_pi * S) + y * y / S)
    return ll


@njit(cache=True)
def kalman_filter(
    z: np.ndarray,
    kind: np.ndarray,
    Phi: np.ndarray,
    Q: np.ndarray,
    R: float,
    x0: np.ndarray,
    P0: np.ndarray,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, float]:
    """Filter readings ``z`` (n,) in m.

    ``Phi``, ``Q`` (K, d, d) with ``kind`` (n,) choosing the step into each sample;
    ``R`` in m²; state at sample 0 ``x0`` (d,), ``P0`` (d, d).
    Returns ``(xf, Pf, xp, Pp, ll)``: posterior states (n, d) and covariances
    (n, d, d), predicted states and covariances of the same shapes (``xp[0]``,
    ``Pp[0]`` repeat the start), and the log-likelihood ℓ.
    """
    d = x0.size
    n = z.size
    xf = np.empty((n, d))
    Pf = np.empty((n, d, d))
    xp = np.empty((n, d))
    Pp = np.empty((n, d, d))
    ll = 0.0
    two_pi = 2.0 * math.pi
    for i in range(d):  # explicit loops: slice assignments cost seconds of compilation
        xp[0, i] = xf[0, i] = x0[i]
        for j in range(d):
            Pp[0, i, j] = Pf[0, i, j] = P0[i, j]
    for i in range(1, n):
        _predict(xf[i - 1], Pf[i - 1], Phi[kind[i]], Q[kind[i]], xp[i], Pp[i])
        y, S = _update(xp[i], Pp[i], z[i], R, xf[i], Pf[i])
        ll -= 0.5 * (math.log(two_pi * S) + y * y / S)
    return xf, Pf, xp, Pp, ll


@njit(cache=True)
def _solve_spd(Pp, B):
    """``Pp⁻¹ B`` for a symmetric positive-definite ``Pp`` (d, d), ``B`` (d, d).

    Cholesky on the correlation matrix ``Pp/(s sᵀ)``, ``s = √diag(Pp)``, so that states
    of very different units do not spoil the factorisation.
    """
    d = B.shape[0]
    s = np.empty(d)
    for i in range(d):
        s[i] = math.sqrt(Pp[i, i])
    C = np.empty((d, d))
    for i in range(d):
        for j in range(d):
            C[i, j] = Pp[i, j] / (s[i] * s[j])
    Lc = np.zeros((d, d))
    for j in range(d):
        acc = C[j, j]
        for k in range(j):
            acc -= Lc[j, k] * Lc[j, k]
        Lc[j, j] = math.sqrt(acc)
        for i in range(j + 1, d):
            acc = C[i, j]
            for k in range(j):
                acc -= Lc[i, k] * Lc[j, k]
            Lc[i, j] = acc / Lc[j, j]
    Y = np.empty((d, d))
    for c in range(B.shape[1]):
        w = np.empty(d)
        for i in range(d):  # forward: Lc w = B/s
            acc = B[i, c] / s[i]
            for k in range(i):
                acc -= Lc[i, k] * w[k]
            w[i] = acc / Lc[i, i]
        for i in range(d - 1, -1, -1):  # backward: Lcᵀ u = w
            acc = w[i]
            for k in range(i + 1, d):
                acc -= Lc[k, i] * w[k]
            w[i] = acc / Lc[i, i]
        for i in range(d):
            Y[i, c] = w[i] / s[i]
    return Y


@njit(cache=True)
def rts_smoother(
    xf: np.ndarray,
    Pf: np.ndarray,
    xp: np.ndarray,
    Pp: np.ndarray,
    kind: np.ndarray,
    Phi: np.ndarray,
) -> tuple[np.ndarray, np.ndarray]:
    """Rauch–Tung–Striebel backward pass over a filtered record.

    Inputs as returned by :func:`kalman_filter` plus ``kind`` (n,) and ``Phi`` (K, d, d).
    ``J[k] = Pf[k] Φ[k+1]ᵀ Pp[k+1]⁻¹``, ``xs[k] = xf[k] + J (xs[k+1] − xp[k+1])``,
    ``Ps[k] = Pf[k] + J (Ps[k+1] − Pp[k+1]) Jᵀ``. Returns ``(xs, Ps)``, (n, d), (n, d, d).
    """
    n, d = xf.shape
    xs = xf.copy()
    Ps = Pf.copy()
    B = np.empty((d, d))
    dP = np.empty((d, d))
    T = np.empty((d, d))
    for k in range(n - 2, -1, -1):
        F = Phi[kind[k + 1]]
        for i in range(d):  # B = Φ Pf[k]
            for j in range(d):
                acc = 0.0
                for m in range(d):
                    acc += F[i, m] * Pf[k, m, j]
                B[i, j] = acc
        JT = _solve_spd(Pp[k + 1], B)  # Jᵀ = Pp⁻¹ Φ Pf
        for i in range(d):
            acc = 0.0
            for j in range(d):
                acc += JT[j, i] * (xs[k + 1, j] - xp[k + 1, j])
            xs[k, i] = xf[k, i] + acc
        for i in range(d):
            for j in range(d):
                dP[i, j] = Ps[k + 1, i, j] - Pp[k + 1, i, j]
        for i in range(d):  # T = J dP
            for j in range(d):
                acc = 0.0
                for m in range(d):
                    acc += JT[m, i] * dP[m, j]
                T[i, j] = acc
        for i in range(d):  # Ps = Pf + T Jᵀ
            for j in range(i, d):
                acc = 0.0
                for m in range(d):
                    acc += T[i, m] * JT[m, j]
                v = Pf[k, i, j] + acc
                Ps[k, i, j] = v
                Ps[k, j, i] = v
    return xs, Ps
