"""Exact discretisation of linear models driven by white noise.

Van Loan's method gives, for ``ds/dt = A s + L w`` with ``w`` white noise of
intensity ``qc``, the transition matrix ``Φ = exp(A·dt)`` and the covariance of the
noise accumulated over one step ``Qd = ∫₀^dt exp(Aτ) L qc Lᵀ exp(Aᵀτ) dτ``.

Source: C. F. Van Loan, "Computing integrals involving the matrix exponential",
IEEE Trans. Automatic Control AC-23(3), 395-404, 1978. The block exponential is
taken with ``scipy.linalg.expm`` in the same operations, in the same order, as
filterpy's ``van_loan_discretization`` (the tests hold the two to the same bits);
importing filterpy here would cost every command half a second for ``scipy.stats``.
This module adds validation, the noise intensity as an explicit argument, and
symmetrisation of the result.

Long steps (a gap in the data of seconds on a cell that rings at hundreds of hertz):
Van Loan's block matrix contains ``−A``, whose exponential grows as ``exp(ζ·ωn·dt)``;
it overflows, and loses all precision well before that. Such a step is split into
``2^k`` equal sub-steps whose growth factor stays below e, each discretised exactly,
and recombined by exact doubling: ``Φ(2h) = Φ(h)²`` and
``Qd(2h) = Φ(h)·Qd(h)·Φ(h)ᵀ + Qd(h)`` (the noise of the first half propagated through
the second, plus the second's own; the halves are independent).
"""

from __future__ import annotations

import math

import numpy as np
from scipy.linalg import expm

from estimator.errors import ParameterError

__all__ = ["van_loan"]


def van_loan(
    A: np.ndarray, L: np.ndarray, qc: float, dt_s: float
) -> tuple[np.ndarray, np.ndarray]:
    """Return ``(Φ, Qd)`` for one step of ``dt_s`` seconds.

    Args:
        A: continuous state matrix, shape (n, n).
        L: noise input matrix, shape (n, 1) or (n,).
        qc: white-noise intensity (power spectral density, two-sided), ≥ 0, in the
            squared unit of ``w`` per second.
        dt_s: step in seconds, > 0.

    Returns:
        ``Φ`` with shape (n, n) and the symmetric ``Qd`` with shape (n, n).
    """
    if not (math.isfinite(dt_s) and dt_s > 0.0):
        raise ParameterError(f"time step dt_s = {dt_s!r}: must be a finite number > 0 seconds")
    if not (math.isfinite(qc) and qc >= 0.0):
        raise ParameterError(f"noise intensity qc = {qc!r}: must be a finite number >= 0")
    A = np.asarray(A, dtype=float)
    L = np.asarray(L, dtype=float).reshape(-1, 1)
    if A.ndim != 2 or A.shape[0] != A.shape[1] or L.shape[0] != A.shape[0]:
        raise ParameterError(
            f"shapes A {A.shape} and L {L.shape} do not match: need (n, n), (n, 1)"
        )
    growth = float(np.max(np.abs(np.linalg.eigvals(A).real), initial=0.0)) * dt_s
    k = math.ceil(math.log2(growth)) if growth > 1.0 else 0
    phi, Qd = _van_loan_block(A, L * math.sqrt(qc), dt_s / 2**k)
    for _ in range(k):
        Qd = phi @ Qd @ phi.T + Qd
        phi = phi @ phi
    Qd = 0.5 * (Qd + Qd.T)
    return np.ascontiguousarray(phi), Qd


def _van_loan_block(A: np.ndarray, G: np.ndarray, dt: float) -> tuple[np.ndarray, np.ndarray]:
    """Van Loan's block exponential for one step: ``(Φ, Qd)``."""
    n = A.shape[0]
    M = np.zeros((2 * n, 2 * n))
    M[:n, :n] = -A.dot(dt)
    M[:n, n:] = G.dot(G.T).dot(dt)
    M[n:, n:] = A.T.dot(dt)
    B = expm(M)
    phi = B[n:, n:].T
    return phi, phi.dot(B[:n, n:])
