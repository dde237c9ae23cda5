"""Rauch–Tung–Striebel smoothing of a whole record, for offline use.

The live observer can only use samples up to the present; offline, the smoother
also uses every later sample, which lowers the error and removes the filter's lag.
It runs the observer forward (both paths, exactly as live), keeping the
covariances of the time-varying samples, then runs the RTS backward recursion

    J[k]  = P[k] Φ[k+1]ᵀ P⁻[k+1]⁻¹
    xs[k] = x[k] + J[k] (xs[k+1] − Φ[k+1] x[k])
    Ps[k] = P[k] + J[k] (Ps[k+1] − P⁻[k+1]) J[k]ᵀ

Source: H. E. Rauch, F. Tung, C. T. Striebel, "Maximum likelihood estimates of
linear dynamic systems", AIAA Journal 3(8), 1445-1450, 1965.

A re-acquisition (the observer assumed a load jump) breaks the chain: no
information is carried back across it, because the model did not hold there.
"""

from __future__ import annotations

import math

import numpy as np
import scipy.signal

from estimator.observer import FLAG_REACQUIRED, ForceObserver

__all__ = ["rts_smooth"]


def rts_smooth(
    observer: ForceObserver, time_s: np.ndarray, displacement_m: np.ndarray
) -> np.ndarray:
    """Smoothed estimates of a whole record, one ``ESTIMATE_DTYPE`` row per sample.

    ``observer`` is reset first and used for the forward pass. Innovation and NIS
    columns are those of the forward (filter) pass; force, its uncertainty,
    displacement and velocity are smoothed.
    """
    observer.covariance_log = {}
    observer.reset()
    try:
        filtered = observer.process(time_s, displacement_m)
        log = observer.covariance_log
    finally:
        observer.covariance_log = None
    n = filtered.size
    out = filtered.copy()
    if n < 2:
        return out
    ss = observer._ss
    phi_nom = observer._nominal.phi
    J_ss = ss.P_post @ phi_nom.T @ np.linalg.inv(ss.P_prior)
    X = np.column_stack(
        [filtered["displacement_m"], filtered["velocity_m_s"], filtered["force_n"]]
    )
    # Steps k → k+1 that use only steady-state matrices (no logged covariance on
    # either side, no re-acquisition at k+1) form stretches with a constant gain.
    in_log = np.zeros(n, bool)
    in_log[list(log)] = True
    steady_step = ~in_log[:-1] & ~in_log[1:] & ((filtered["flags"][1:] & FLAG_REACQUIRED) == 0)
    xs_all = np.empty_like(X)
    us = np.empty(n)
    xs = X[-1].copy()
    Ps = log[n - 1][2] if (n - 1) in log else ss.P_post
    xs_all[-1] = xs
    us[-1] = math.sqrt(Ps[2, 2])
    k = n - 2
    while k >= 0:
        if steady_step[k]:
            a = _stretch_start(steady_step, k)
            xs_all[a : k + 1] = _steady_backward(J_ss, phi_nom, X[a : k + 1], xs)
            us[a : k + 1], Ps = _steady_covariance(J_ss, ss, Ps, k - a + 1)
            xs = xs_all[a].copy()
            k = a - 1
            continue
        P_f = log[k][2] if k in log else ss.P_post
        if filtered["flags"][k + 1] & FLAG_REACQUIRED:
            xs, Ps = X[k].copy(), P_f
        else:
            phi, P_p, _ = log.get(k + 1, (phi_nom, ss.P_prior, None))
            J = P_f @ phi.T @ np.linalg.inv(P_p)
            xs = X[k] + J @ (xs - phi @ X[k])
            Ps = P_f + J @ (Ps - P_p) @ J.T
        xs_all[k] = xs
        us[k] = math.sqrt(max(Ps[2, 2], 0.0))
        k -= 1
    out["displacement_m"] = xs_all[:, 0]
    out["velocity_m_s"] = xs_all[:, 1]
    out["force_n"] = xs_all[:, 2]
    out["force_u_n"] = us
    return out


def _stretch_start(steady_step: np.ndarray, k: int) -> int:
    """First index of the run of True values in ``steady_step`` that ends at ``k``."""
    breaks = np.nonzero(~steady_step[: k + 1])[0]
    return int(breaks[-1]) + 1 if breaks.size else 0


def _steady_backward(
    J: np.ndarray, phi: np.ndarray, X: np.ndarray, xs_next: np.ndarray
) -> np.ndarray:
    """Backward recursion ``xs[j] = J xs[j+1] + (I − JΦ) X[j]`` over a steady stretch.

    Run in the eigenvector basis of ``J``: one first-order ``lfilter`` per mode on the
    reversed stretch. Falls back to a plain loop when that basis is ill-conditioned.
    Returns the smoothed states, shape like ``X`` (m, 3).
    """
    M = np.eye(3) - J @ phi
    lam, V = np.linalg.eig(J)
    if np.linalg.cond(V) > 1e8:
        out = np.empty_like(X)
        nxt = xs_next
        for j in range(X.shape[0] - 1, -1, -1):
            nxt = J @ nxt + M @ X[j]
            out[j] = nxt
        return out
    C = np.linalg.solve(V, M) @ X[::-1].T  # (3, m) mode inputs, last sample first
    w0 = np.linalg.solve(V, xs_next.astype(complex))
    W = np.empty(C.shape, complex)
    for i in range(3):
        W[i], _ = scipy.signal.lfilter([1.0], [1.0, -lam[i]], C[i], zi=[lam[i] * w0[i]])
    return (V @ W).real.T[::-1]


def _steady_covariance(
    J: np.ndarray, ss: object, Ps: np.ndarray, m: int
) -> tuple[np.ndarray, np.ndarray]:
    """Smoothed force σ for ``m`` steady steps backward, and the last covariance.

    The covariance recursion does not depend on the data; once it stops changing it
    is constant for the rest of the stretch.
    """
    us = np.empty(m)
    P_f, P_p = ss.P_post, ss.P_prior  # type: ignore[attr-defined]
    j = m - 1
    while j >= 0:
        new = P_f + J @ (Ps - P_p) @ J.T
        done = np.allclose(new, Ps, rtol=1e-13, atol=0.0)
        Ps = new
        us[j] = math.sqrt(max(Ps[2, 2], 0.0))
        j -= 1
        if done:
            us[: j + 1] = us[j + 1]
            break
    return us, Ps
