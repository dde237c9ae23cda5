"""Backward pass of the multiple-model smoother (compiled with numba).

Kim's approximate fixed-interval smoother for switching linear models: from the forward
pass's per-model posteriors ``x_k^i, P_k^i`` and probabilities ``μ_k(i)``, go back in
time with, for every pair (mode ``i`` at k, mode ``j`` at k+1),

    Pr(i, j | all)  = μˢ_{k+1}(j) · μ_k(i) π_ij / Σ_l μ_k(l) π_lj
    J               = P_k^i Φ_jᵀ (Φ_j P_k^i Φ_jᵀ + Q_j)⁻¹
    xˢ(i, j)        = x_k^i + J (xˢ_{k+1}^j − Φ_j x_k^i)
    Pˢ(i, j)        = P_k^i + J (Pˢ_{k+1}^j − Φ_j P_k^i Φ_jᵀ − Q_j) Jᵀ

then collapse over ``j`` by moment matching into ``xˢ_k^i, Pˢ_k^i`` with weights
``Pr(i, j | all)/μˢ_k(i)``, ``μˢ_k(i) = Σ_j Pr(i, j | all)``. Each pair is a
Rauch–Tung–Striebel step, so with one model this is exactly the RTS smoother.

Sources: C.-J. Kim, "Dynamic linear models with Markov-switching", Journal of
Econometrics 60, 1-22, 1994; H. E. Rauch, F. Tung, C. T. Striebel, "Maximum likelihood
estimates of linear dynamic systems", AIAA Journal 3(8), 1965.
"""

from __future__ import annotations

import numba
import numpy as np

__all__ = ["kim_backward", "kim_backward_block", "kim_last"]

_NEGLIGIBLE = 1e-12  # pairs less probable than this are skipped


@numba.njit(cache=True, nogil=True)
def kim_backward(
    table: np.ndarray,  # (n,) table row of the step INTO each sample
    PHI: np.ndarray,  # (nt, r, 4, 4)
    Q: np.ndarray,  # (nt, r, 4, 4)
    PI: np.ndarray,  # (nt, r, r)
    fx: np.ndarray,  # (n, r, 4) filtered per-model states
    fP: np.ndarray,  # (n, r, 4, 4) filtered per-model covariances
    fmu: np.ndarray,  # (n, r) filtered mode probabilities
    out_x: np.ndarray,  # (n, 4) smoothed combined state
    out_var: np.ndarray,  # (n, 4) its variances
    out_mu: np.ndarray,  # (n, r) smoothed mode probabilities
) -> None:
    """The backward pass over a whole record."""
    n, r = fmu.shape
    sx, sP, smu = np.empty((r, 4)), np.empty((r, 4, 4)), np.empty(r)
    kim_last(fx[n - 1], fP[n - 1], fmu[n - 1], sx, sP, smu,
             out_x[n - 1 :], out_var[n - 1 :], out_mu[n - 1 :])  # fmt: skip
    kim_backward_block(table[1:], PHI, Q, PI, fx[: n - 1], fP[: n - 1], fmu[: n - 1],
                       sx, sP, smu, out_x, out_var, out_mu)  # fmt: skip


@numba.njit(cache=True, nogil=True)
def kim_last(
    fx: np.ndarray,  # (r, 4) filtered per-model states of a record's last sample
    fP: np.ndarray,  # (r, 4, 4) their covariances
    fmu: np.ndarray,  # (r,) its filtered mode probabilities
    sx: np.ndarray,  # (r, 4) out: its smoothed per-model states (the same)
    sP: np.ndarray,  # (r, 4, 4) out: their covariances
    smu: np.ndarray,  # (r,) out: its smoothed mode probabilities
    out_x: np.ndarray,  # (1, 4) smoothed combined state
    out_var: np.ndarray,  # (1, 4) its variances
    out_mu: np.ndarray,  # (1, r) smoothed mode probabilities
) -> None:
    """The last sample, where the smoothed posterior is the filtered one: the start of the
    backward pass."""
    sx[:] = fx
    sP[:] = fP
    smu[:] = fmu
    _emit(0, sx, sP, smu, out_x, out_var, out_mu)


@numba.njit(cache=True, nogil=True)
def kim_backward_block(
    table: np.ndarray,  # (n,) table row of the step OUT of each sample (into the next)
    PHI: np.ndarray,  # (nt, r, 4, 4)
    Q: np.ndarray,  # (nt, r, 4, 4)
    PI: np.ndarray,  # (nt, r, r)
    fx: np.ndarray,  # (n, r, 4) filtered per-model states of the block
    fP: np.ndarray,  # (n, r, 4, 4) their covariances
    fmu: np.ndarray,  # (n, r) filtered mode probabilities
    sx: np.ndarray,  # (r, 4) smoothed per-model states of the sample after the block
    sP: np.ndarray,  # (r, 4, 4) their covariances
    smu: np.ndarray,  # (r,) its smoothed mode probabilities
    out_x: np.ndarray,  # (n, 4) smoothed combined state
    out_var: np.ndarray,  # (n, 4) its variances
    out_mu: np.ndarray,  # (n, r) smoothed mode probabilities
) -> None:
    """The backward pass over one block of a record, from the smoothed state of the
    sample that follows it (``sx, sP, smu``, left holding the block's first sample's): the
    blocks of a record taken last to first give the same numbers, bit for bit, as the
    whole record at once."""
    n, r = fmu.shape
    nx = np.empty((r, 4))
    nP = np.empty((r, 4, 4))
    nmu = np.empty(r)
    pair = np.empty((r, r))
    cbar = np.empty(r)
    xp = np.empty(4)
    Pp = np.empty((4, 4))
    G = np.empty((4, 4))
    J = np.empty((4, 4))
    xij = np.empty((r, 4))
    Pij = np.empty((r, 4, 4))
    dx = np.empty(4)
    for k in range(n - 1, -1, -1):
        it = table[k]
        for j in range(r):
            c = 0.0
            for i in range(r):
                c += fmu[k, i] * PI[it, i, j]
            cbar[j] = c
        for i in range(r):
            tot = 0.0
            for j in range(r):
                v = smu[j] * fmu[k, i] * PI[it, i, j] / cbar[j] if cbar[j] > 0.0 else 0.0
                pair[i, j] = v
                tot += v
            nmu[i] = tot
        for i in range(r):
            if nmu[i] < _NEGLIGIBLE:
                # keep the filtered posterior for a mode the data rule out
                for a in range(4):
                    nx[i, a] = fx[k, i, a]
                    for b in range(4):
                        nP[i, a, b] = fP[k, i, a, b]
                continue
            for j in range(r):
                if pair[i, j] < _NEGLIGIBLE * nmu[i]:
                    pair[i, j] = 0.0
                    continue
                # prediction of mode i's posterior under model j
                for a in range(4):
                    s = 0.0
                    for b in range(4):
                        s += PHI[it, j, a, b] * fx[k, i, b]
                    xp[a] = s
                for a in range(4):
                    for b in range(4):
                        s = 0.0
                        for c in range(4):
                            s += fP[k, i, a, c] * PHI[it, j, b, c]
                        G[a, b] = s  # P Φᵀ
                for a in range(4):
                    for b in range(4):
                        s = Q[it, j, a, b]
                        for c in range(4):
                            s += PHI[it, j, a, c] * G[c, b]
                        Pp[a, b] = s
                # a pinned state (zero predicted variance) gets a tiny one: its gain
                # column is then 0, as it must be
                scale = Pp[0, 0] + Pp[1, 1] + Pp[2, 2] + Pp[3, 3]
                for a in range(4):
                    if Pp[a, a] <= 1e-300 + 1e-18 * scale:
                        Pp[a, a] += 1e-18 * scale + 1e-300
                # J = G Pp⁻¹  ⇔  Pp Jᵀ = Gᵀ
                Jt = np.linalg.solve(Pp, G.T.copy())
                for a in range(4):
                    for b in range(4):
                        J[a, b] = Jt[b, a]
                for a in range(4):
                    dx[a] = sx[j, a] - xp[a]
                for a in range(4):
                    s = fx[k, i, a]
                    for b in range(4):
                        s += J[a, b] * dx[b]
                    xij[j, a] = s
                for a in range(4):
                    for b in range(4):
                        G[a, b] = sP[j, a, b] - Pp[a, b]
                for a in range(4):
                    for b in range(4):
                        s = 0.0
                        for c in range(4):
                            s += J[a, c] * G[c, b]
                        Pp[a, b] = s  # J (Pˢ − P⁻)
                for a in range(4):
                    for b in range(a, 4):
                        s = fP[k, i, a, b]
                        for c in range(4):
                            s += Pp[a, c] * J[b, c]
                        Pij[j, a, b] = s
                        Pij[j, b, a] = s
            # collapse over j
            for a in range(4):
                s = 0.0
                for j in range(r):
                    s += pair[i, j] * xij[j, a]
                nx[i, a] = s / nmu[i]
            for a in range(4):
                for b in range(4):
                    s = 0.0
                    for j in range(r):
                        if pair[i, j] == 0.0:
                            continue
                        s += pair[i, j] * (
                            Pij[j, a, b] + (xij[j, a] - nx[i, a]) * (xij[j, b] - nx[i, b])
                        )
                    nP[i, a, b] = s / nmu[i]
        tot = 0.0
        for i in range(r):
            tot += nmu[i]
        for i in range(r):
            smu[i] = nmu[i] / tot
            for a in range(4):
                sx[i, a] = nx[i, a]
                for b in range(4):
                    sP[i, a, b] = nP[i, a, b]
        _emit(k, sx, sP, smu, out_x, out_var, out_mu)


@numba.njit(cache=True, nogil=True, inline="always")
def _emit(k, sx, sP, smu, out_x, out_var, out_mu):
    r = smu.shape[0]
    for a in range(4):
        s = 0.0
        for i in range(r):
            s += smu[i] * sx[i, a]
        out_x[k, a] = s
    for a in range(4):
        s = 0.0
        for i in range(r):
            s += smu[i] * (sP[i, a, a] + (sx[i, a] - out_x[k, a]) ** 2)
        out_var[k, a] = s
    for i in range(r):
        out_mu[k, i] = smu[i]
