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
    xs = X[-1].copy()
    Ps = log[n - 1][2] if (n - 1) in log else ss.P_post
    flags = filtered["flags"]
    xs_all = np.empty_like(X)
    us = np.empty(n)
    xs_all[-1] = xs
    us[-1] = math.sqrt(Ps[2, 2])
    for k in range(n - 2, -1, -1):
        nxt = log.get(k + 1)
        P_f = log[k][2] if k in log else ss.P_post
        if flags[k + 1] & FLAG_REACQUIRED:
            xs, Ps = X[k].copy(), P_f
        else:
            if nxt is None:
                phi, P_p, J = phi_nom, ss.P_prior, (J_ss if k not in log else None)
            else:
                phi, P_p, _ = nxt
                J = None
            if J is None:
                J = P_f @ phi.T @ np.linalg.inv(P_p)
            xs = X[k] + J @ (xs - phi @ X[k])
            Ps = P_f + J @ (Ps - P_p) @ J.T
        xs_all[k] = xs
        us[k] = math.sqrt(max(Ps[2, 2], 0.0))
    out["displacement_m"] = xs_all[:, 0]
    out["velocity_m_s"] = xs_all[:, 1]
    out["force_n"] = xs_all[:, 2]
    out["force_u_n"] = us
    return out
