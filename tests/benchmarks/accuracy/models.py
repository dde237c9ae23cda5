"""Continuous models of the augmented state and their exact discretisation.

Two priors on the force, both on top of the plant ``m·x'' + b·x' + k·x = F``:

* **RW** (random walk), state ``[x, v, F]`` in m, m/s, N: ``dF/dt = w``, ``w`` white
  with intensity ``q`` in N²/s;
* **IRW** (integrated random walk), state ``[x, v, F, Ḟ]`` with Ḟ in N/s:
  ``dḞ/dt = w``, intensity ``q`` in N²/s³.

The measurement is the displacement, ``H = [1, 0, …]``.

Discretisation over a step ``dt``: ``Φ = expm(A·dt)`` and
``Qd = ∫₀^dt expm(A·τ) L q Lᵀ expm(Aᵀ·τ) dτ`` by Van Loan's block exponential
(C. F. Van Loan, "Computing integrals involving the matrix exponential", IEEE Trans.
Automatic Control AC-23(3), 395–404, 1978): with ``M = [[−A, L q Lᵀ], [0, Aᵀ]]·dt``,
``expm(M) = [[·, G], [0, Φᵀ]]`` and ``Qd = Φ·G``. The states are first scaled to
comparable sizes (x by F_range/k, v by ωn·F_range/k, F by F_range, Ḟ by ωn·F_range)
so that the small displacement entries keep their relative precision in ``expm``; a
step whose block exponential would grow by more than e is split in 2^j halves and
recombined exactly: ``Φ(2h) = Φ(h)²``, ``Qd(2h) = Φ(h) Qd(h) Φ(h)ᵀ + Qd(h)``.
``Qd`` is linear in ``q``, so it is computed once for ``q = 1`` and scaled.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import scipy.linalg

from accuracy.cells import Cell


@dataclass(frozen=True)
class ForceModel:
    """A continuous augmented-state model ``ds/dt = A s + L w``.

    Attributes:
        name: ``"RW"`` or ``"IRW"``.
        A: state matrix, shape (d, d), SI units.
        L: noise input, shape (d, 1).
        scale: typical size of each state (m, m/s, N, N/s), shape (d,).
        q_unit: unit of the intensity ``q``.
        q_ref: a natural size of ``q`` for this cell (q_unit): the force noise of one
            sample, ``k²·R`` (N²), per ``dt`` (RW) or per ``dt³`` (IRW).
    """

    name: str
    A: np.ndarray
    L: np.ndarray
    scale: np.ndarray
    q_unit: str
    q_ref: float

    @property
    def dim(self) -> int:
        """Number of states d."""
        return self.A.shape[0]


def _plant_rows(cell: Cell, d: int) -> np.ndarray:
    m, b, k = cell.mass_kg, cell.damping_n_s_per_m, cell.stiffness_n_per_m
    A = np.zeros((d, d))
    A[0, 1] = 1.0
    A[1, 0], A[1, 1], A[1, 2] = -k / m, -b / m, 1.0 / m
    return A


def random_walk_model(cell: Cell) -> ForceModel:
    """RW prior: state ``[x, v, F]``, ``q`` in N²/s."""
    A = _plant_rows(cell, 3)
    L = np.array([[0.0], [0.0], [1.0]])
    xs = cell.force_range_n / cell.stiffness_n_per_m
    scale = np.array([xs, xs * cell.omega_n_rad_s, cell.force_range_n])
    q_ref = cell.stiffness_n_per_m**2 * cell.measurement_var_m2 / cell.dt_s
    return ForceModel("RW", A, L, scale, "N²/s", q_ref)


def integrated_random_walk_model(cell: Cell) -> ForceModel:
    """IRW prior: state ``[x, v, F, Ḟ]``, ``q`` in N²/s³."""
    A = _plant_rows(cell, 4)
    A[2, 3] = 1.0
    L = np.array([[0.0], [0.0], [0.0], [1.0]])
    xs = cell.force_range_n / cell.stiffness_n_per_m
    wn = cell.omega_n_rad_s
    scale = np.array([xs, xs * wn, cell.force_range_n, cell.force_range_n * wn])
    q_ref = cell.stiffness_n_per_m**2 * cell.measurement_var_m2 / cell.dt_s**3
    return ForceModel("IRW", A, L, scale, "N²/s³", q_ref)


def van_loan(A: np.ndarray, L: np.ndarray, q: float, dt_s: float) -> tuple[np.ndarray, np.ndarray]:
    """``(Φ, Qd)`` of ``ds/dt = A s + L w`` over ``dt_s`` (s), ``w`` of intensity ``q``.

    Plain Van Loan (1978) with ``scipy.linalg.expm``, halving long steps (module doc).
    Shapes: ``A`` (d, d), ``L`` (d, 1); returns (d, d), (d, d).
    """
    d = A.shape[0]
    growth = float(np.max(np.abs(np.linalg.eigvals(A).real))) * dt_s
    halvings = math.ceil(math.log2(growth)) if growth > 1.0 else 0
    h = dt_s / 2**halvings
    M = np.zeros((2 * d, 2 * d))
    M[:d, :d] = -A
    M[:d, d:] = q * (L @ L.T)
    M[d:, d:] = A.T
    E = scipy.linalg.expm(M * h)
    phi = E[d:, d:].T
    Q = phi @ E[:d, d:]
    for _ in range(halvings):
        Q = phi @ Q @ phi.T + Q
        phi = phi @ phi
    return phi, 0.5 * (Q + Q.T)


def discretize(model: ForceModel, dt_s: float, q: float = 1.0) -> tuple[np.ndarray, np.ndarray]:
    """``(Φ, Qd)`` of ``model`` over ``dt_s`` (s) for intensity ``q`` (``model.q_unit``).

    Done on the scaled state (module doc), then returned in SI units.
    """
    D = model.scale
    A_s = model.A * D[None, :] / D[:, None]
    L_s = model.L / D[:, None]
    phi_s, Q_s = van_loan(A_s, L_s, q, dt_s)
    phi = phi_s * D[:, None] / D[None, :]
    Q = Q_s * D[:, None] * D[None, :]
    return phi, Q


def step_table(
    model: ForceModel, t_s: np.ndarray, nominal_dt_s: float
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Discretise ``model`` once for each distinct step of the times ``t_s`` (s).

    Steps equal to within 1e-9 of ``nominal_dt_s`` share one model. Returns
    ``(kind, Phi, Q1)``: ``kind`` (n,) int64, the model index of the step into each
    sample (``kind[0]`` unused, 0); ``Phi`` (K, d, d); ``Q1`` (K, d, d) for ``q = 1``.
    """
    dt = np.diff(np.asarray(t_s, dtype=float))
    key = np.rint(dt / nominal_dt_s * 1e9).astype(np.int64)
    unique, inverse = np.unique(key, return_inverse=True)
    d = model.dim
    Phi = np.empty((unique.size, d, d))
    Q1 = np.empty((unique.size, d, d))
    for j, u in enumerate(unique):
        Phi[j], Q1[j] = discretize(model, float(u) * nominal_dt_s * 1e-9)
    kind = np.zeros(t_s.size, dtype=np.int64)
    kind[1:] = inverse
    return kind, Phi, Q1


def initial_state(model: ForceModel, cell: Cell, z0_m: float) -> tuple[np.ndarray, np.ndarray]:
    """State and covariance at the first sample, given its reading ``z0_m`` (m).

    The cell starts at rest, so ``v = 0`` and ``x = F/k`` exactly; with no prior
    knowledge of the force (a diffuse prior), the first reading gives ``x = z0 ± √R``,
    ``F = k·z0 ± k√R``, fully correlated: ``P0 = R·g gᵀ`` with ``g = [1, 0, k]``. This
    is the limit of the posterior for an infinitely broad prior, written in closed form
    because computing it from a broad prior cancels most significant digits. For IRW,
    Ḟ is independent with σ = 10 rated ranges per second (N/s).
    Returns ``(x0, P0)``, shapes (d,) and (d, d).
    """
    d = model.dim
    k = cell.stiffness_n_per_m
    g = np.zeros(d)
    g[0], g[2] = 1.0, k
    x0 = z0_m * g
    P0 = cell.measurement_var_m2 * np.outer(g, g)
    if d == 4:
        P0[3, 3] = (10.0 * cell.force_range_n) ** 2
    return x0, P0
