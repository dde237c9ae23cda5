"""Per-sample kernel of the multiple-model observer (compiled with numba).

**The IMM step.** For ``r`` models that share one state of dimension 4 and observe its
first component, one step is the interacting multiple model (IMM) recursion of Blom &
Bar-Shalom:

1. interaction: predicted mode probabilities ``c̄_j = Σ_i π_ij μ_i``, mixing weights
   ``μ_i|j = π_ij μ_i / c̄_j``, mixed state ``x0_j = Σ_i μ_i|j x_i`` and covariance
   ``P0_j = Σ_i μ_i|j (P_i + (x_i − x0_j)(x_i − x0_j)ᵀ)``;
2. prediction per model: ``x_j = Φ_j x0_j``, ``P_j = Φ_j P0_j Φ_jᵀ + Q_j``;
3. update per model with the scalar measurement ``z = x[0] + noise`` of variance ``R``:
   ``S_j = P_j[0,0] + R``, ``K_j = P_j[:,0]/S_j``, Joseph form
   ``P ← (I − K H) P (I − K H)ᵀ + K R Kᵀ`` (symmetric and positive under rounding);
   likelihood ``Λ_j = N(y_j; 0, S_j)``;
4. mode probabilities ``μ_j ∝ c̄_j Λ_j``, computed in logarithms so none underflows.

**Outliers, decided by the samples after them** (docs/method-observer.md, section 6, gives
the reasons and the measurements). One sample cannot tell an isolated outlier from the first
sample of a load change; the next one can. A sample beyond ``gate`` σ of the most probable
model, or that alone would give the force-jump models more than ``_JUMP_SUSPECT`` of the
probability, or that lies beyond ``gate`` noise σ and alone makes "an outlier" at least
``_OUTLIER_SUSPECT`` probable, is held as *suspect*: two branches, "used" (the IMM step) and
"outlier" (prediction only), weighed by the prior ``ε`` of an outlier, the suspect's
density under each (`_outlier_log_density`: a Gaussian core of scale ``outlier_sd`` with a
Cauchy share ``outlier_tail``) and the next sample's, then merged per model by moment
matching; its row shows both branches with the weights known then. *Hindsight*: the
prediction before a sample used though beyond ``gate`` noise σ is kept (slot 2 of the
state arrays), so that "the sample before was the outlier" is weighed too when the next
one is suspect. *Bursts*: up to ``_BURST_MAX`` samples beyond the outlier branch's gate
are held together (`_burst_goes_on`, prior ``_LOG_BURST_GO_ON`` that an outlier is
followed by another). *Deferred*: odds short of 19 to 1 either way (`_odds_open`) wait for
one more sample (``_DEFER_MAX``).

Sources: H. A. P. Blom, Y. Bar-Shalom, "The interacting multiple model algorithm for
systems with Markovian switching coefficients", IEEE Trans. Automatic Control 33(8),
780-783, 1988; Y. Bar-Shalom, X. R. Li, T. Kirubarajan, "Estimation with Applications
to Tracking and Navigation", Wiley 2001, section 11.6.6; the two-hypothesis weighing
is Bayes' rule over the suspect sample and the next one.

**Layout.** Inside a block each branch is one flat buffer of rows of `LANES` values, one
value per model: the states (rows 0-3), the covariances packed to their upper triangle
(rows 4-13, entry (a, b) in row ``4 + _U[a, b]``) and the floor models' design
covariances (rows 14-23); the step's scratch and its tables are laid out the same way.
Every row then lies a constant distance from every other, so the compiler can prove that
a loop over the models that writes some rows does not overlap the rows it reads, and
vectorises it (with arrays of ``r`` models per row it could not, and would not). The
caller's arrays keep ``(branches, r, 4)`` and ``(branches, r, 4, 4)`` and are converted on
entry and written back on exit. Every sum runs in the order it had with the model index
first, so the results are the same bit for bit. A bank has at most `LANES` models.

Nothing here allocates per sample; every decision depends only on past samples, so a
record fed in blocks of any size gives bit-identical results (the suspect branch is part
of the carried state).

The kernel is one file on purpose: numba's on-disk cache follows the file of the function
it compiled, not the files of the functions it calls, so a helper moved to another module
would leave stale machine code running after an edit (DEVELOPERS.md, Conventions). The
six largest helpers (`_interact_predict`, `_weigh`, `_apply`, `_merge`, `_combine`,
`_burst_goes_on`) are compiled as functions of their own, not inlined at each of their
calls: inlined, the kernel took 72 s to compile from a cold cache (the first session after
an install) for a speed within 2 % of the same; now 12 s (2026-12-06).
"""

from __future__ import annotations

import math

import numba
import numpy as np

__all__ = [
    "FLAG_OUT_DEFERRED",
    "FLAG_OUT_REJECTED_BEFORE",
    "FLAG_OUT_SUSPECT",
    "FLAG_OUT_UNUSED",
    "LANES",
    "imm_block",
]

FLAG_OUT_UNUSED = 1  #: no measurement (NaN): predict only
FLAG_OUT_SUSPECT = 2  #: innovation beyond the gate: held until a later sample decides
FLAG_OUT_REJECTED_BEFORE = 4  #: the held (suspect) samples before were judged outliers
#: used by both branches: the decision on the held samples before it waits for the next
FLAG_OUT_DEFERRED = 8

_LOG_2PI = math.log(2.0 * math.pi)
_LOG_PI = math.log(math.pi)
_SHOW_USED = 0.5  # a suspect row shows the sample used only at these odds or better
_DECIDED = 0.05  # two-sample odds of a suspect beyond which the decision is hard
_LOG_DECIDED_ODDS = math.log((1.0 - _DECIDED) / _DECIDED)
_LOWEST_LOG_DENSITY = -1e300  # of a sample no model gives any density
_JUMP_SUSPECT = 0.05  # posterior of the jump model from one sample that makes it suspect
_OUTLIER_SUSPECT = 0.01  # probability of "an outlier" from one sample that makes it suspect
_LOG_OUTLIER_SUSPECT_ODDS = math.log(_OUTLIER_SUSPECT / (1.0 - _OUTLIER_SUSPECT))
_BURST_MAX = 3  # consecutive samples that can be rejected together as one burst
_DEFER_MAX = 1  # samples after the held ones that may leave the decision waiting
_PEND_SIZE = 8  # entries of ``pend`` (see `imm_block`)
_LOG_BURST_GO_ON = math.log(0.1)  # log probability that an outlier is followed by another


#: packed upper triangle of a symmetric 4×4 covariance: entry (a, b) is row ``_U[a, b]``
_U = np.array([[0, 1, 2, 3], [1, 4, 5, 6], [2, 5, 7, 8], [3, 6, 8, 9]])
_DIAG = np.array([0, 4, 7, 9])  # rows of (0, 0), (1, 1), (2, 2), (3, 3)
_JIT = {"cache": True, "nogil": True, "error_model": "numpy"}
#: lanes of a row: the most models a bank may have. A fixed stride puts every row at a
#: constant distance from the others, so the compiler can prove that a loop over the
#: models writing some rows does not overlap the rows it reads, and vectorise it.
LANES = 32
# a branch: its states (rows 0-3), covariances (4-13) and design covariances (14-23)
_XO, _PO, _PDO = 0, 4 * LANES, 14 * LANES
_BRANCH = 24 * LANES
# the step's scratch: mixed states, covariances and design covariances, gains, the
# predicted mode probabilities and the mixing sums
_X0, _P0, _PD0, _K, _CBAR, _TOT = 0, 4 * LANES, 14 * LANES, 24 * LANES, 28 * LANES, 29 * LANES
_SCRATCH = 30 * LANES
# one step's tables: Φ (row 4a + b), Q and QD packed
_PHI, _Q, _QD = 0, 16 * LANES, 26 * LANES
_TABLE = 36 * LANES


@numba.njit(**_JIT)
def _interact_predict(tt, PIt, prune, floor, B, mu, S, W):
    """Steps 1 and 2: mixed priors, then each model's prediction, in place in the branch
    ``B`` (states, covariances, and the design covariances of the floor models).

    A model whose probability is below its ``prune`` entry passes nothing on: each
    model's sources are the models kept and itself, summed in ascending order. The loops
    run over the receiving models, which the layout (model index last) makes vectors.
    """
    r = mu.shape[0]
    for j in range(r):
        S[_CBAR + j] = 0.0
        S[_TOT + j] = 0.0
    for i in range(r):
        m = mu[i]
        if mu[i] >= prune[i]:  # kept: a source of every model
            for j in range(r):
                S[_CBAR + j] += PIt[i, j] * m
                S[_TOT + j] += PIt[i, j] * m
        else:  # a source of itself only
            for j in range(r):
                S[_CBAR + j] += PIt[i, j] * m
            S[_TOT + i] += PIt[i, i] * m
    for i in range(r):
        if mu[i] >= prune[i]:
            for j in range(r):
                W[i, j] = PIt[i, j] * mu[i] / S[_TOT + j]
        else:
            W[i, i] = PIt[i, i] * mu[i] / S[_TOT + i]
    for u in range(14):  # the mixed states and covariances (design ones: floor models)
        for j in range(r):
            S[u * LANES + j] = 0.0
    for i in range(r):
        x0, x1, x2, x3 = B[i], B[LANES + i], B[2 * LANES + i], B[3 * LANES + i]
        if mu[i] >= prune[i]:
            for j in range(r):
                w = W[i, j]
                S[_X0 + j] += w * x0
                S[_X0 + LANES + j] += w * x1
                S[_X0 + 2 * LANES + j] += w * x2
                S[_X0 + 3 * LANES + j] += w * x3
        else:
            w = W[i, i]
            S[_X0 + i] += w * x0
            S[_X0 + LANES + i] += w * x1
            S[_X0 + 2 * LANES + i] += w * x2
            S[_X0 + 3 * LANES + i] += w * x3
    for i in range(r):
        if mu[i] >= prune[i]:
            for j in range(r):
                _mix_term(W[i, j], B, _PO, i, S, _P0, j)
        else:
            _mix_term(W[i, i], B, _PO, i, S, _P0, i)
    for j in range(r):
        if S[_TOT + j] <= 0.0:  # every source pruned: the model keeps its own state
            for a in range(4):
                S[_X0 + a * LANES + j] = B[a * LANES + j]
            for u in range(10):
                S[_P0 + u * LANES + j] = B[_PO + u * LANES + j]
    for j in range(r):
        if floor[j]:
            # the gain's design covariance: the same mixture of the sources' design
            # covariances (a regular model's is its own)
            if S[_TOT + j] <= 0.0:
                for u in range(10):
                    S[_PD0 + u * LANES + j] = B[_PDO + u * LANES + j]
            else:
                for u in range(10):
                    S[_PD0 + u * LANES + j] = 0.0
                for i in range(r):
                    if i == j or mu[i] >= prune[i]:
                        _mix_term(W[i, j], B, _PDO if floor[i] else _PO, i, S, _PD0, j)
    for j in range(r):
        _predict_cov(tt, _Q, j, S, _P0, B, _PO)
    for j in range(r):
        a0, a1 = S[_X0 + j], S[_X0 + LANES + j]
        a2, a3 = S[_X0 + 2 * LANES + j], S[_X0 + 3 * LANES + j]
        # written out, not looped over the rows: constant offsets, a vectorised loop
        B[j] = _phi_row(tt, 0, j, a0, a1, a2, a3)
        B[LANES + j] = _phi_row(tt, 1, j, a0, a1, a2, a3)
        B[2 * LANES + j] = _phi_row(tt, 2, j, a0, a1, a2, a3)
        B[3 * LANES + j] = _phi_row(tt, 3, j, a0, a1, a2, a3)
    for j in range(r):
        if floor[j]:
            _predict_cov(tt, _QD, j, S, _PD0, B, _PDO)
    for j in range(r):
        mu[j] = S[_CBAR + j]


@numba.njit(inline="always", **_JIT)
def _phi_row(tt, a, j, x0, x1, x2, x3):
    """Row ``a`` of model ``j``'s ``Φ`` (the step's tables ``tt``) times ``(x0, x1, x2,
    x3)``, summed from 0.0 in column order."""
    o = _PHI + 4 * a * LANES + j
    return 0.0 + tt[o] * x0 + tt[o + LANES] * x1 + tt[o + 2 * LANES] * x2 + tt[o + 3 * LANES] * x3


@numba.njit(inline="always", **_JIT)
def _mix_term(wm, B, src, i, S, dst, j):
    """``S[dst]_j += wm (B[src]_i + (x_i − x0_j)(x_i − x0_j)ᵀ)``, packed covariances at
    row offsets ``src`` of the branch and ``dst`` of the scratch."""
    d0 = B[i] - S[_X0 + j]
    d1 = B[LANES + i] - S[_X0 + LANES + j]
    d2 = B[2 * LANES + i] - S[_X0 + 2 * LANES + j]
    d3 = B[3 * LANES + i] - S[_X0 + 3 * LANES + j]
    S[dst + j] += wm * (B[src + i] + d0 * d0)
    S[dst + LANES + j] += wm * (B[src + LANES + i] + d0 * d1)
    S[dst + 2 * LANES + j] += wm * (B[src + 2 * LANES + i] + d0 * d2)
    S[dst + 3 * LANES + j] += wm * (B[src + 3 * LANES + i] + d0 * d3)
    S[dst + 4 * LANES + j] += wm * (B[src + 4 * LANES + i] + d1 * d1)
    S[dst + 5 * LANES + j] += wm * (B[src + 5 * LANES + i] + d1 * d2)
    S[dst + 6 * LANES + j] += wm * (B[src + 6 * LANES + i] + d1 * d3)
    S[dst + 7 * LANES + j] += wm * (B[src + 7 * LANES + i] + d2 * d2)
    S[dst + 8 * LANES + j] += wm * (B[src + 8 * LANES + i] + d2 * d3)
    S[dst + 9 * LANES + j] += wm * (B[src + 9 * LANES + i] + d3 * d3)


@numba.njit(inline="always", **_JIT)
def _predict_cov(tt, q, j, S, src, B, dst):
    """``B[dst]_j = Φ_j S[src]_j Φ_jᵀ + Q_j`` (``Q`` at row offset ``q`` of the step's
    tables ``tt``), written out term by term (each sum in the order of the matrix
    product). Φ's lower left block (the force does not depend on the cell's state) and
    ``Φ[3, 2]`` (nor its rate on the force) are zero, `_check_structure` makes sure, and
    their terms are left out: a third of the products."""
    L = LANES
    f00, f01, f02, f03 = tt[j], tt[L + j], tt[2 * L + j], tt[3 * L + j]
    f10, f11, f12, f13 = tt[4 * L + j], tt[5 * L + j], tt[6 * L + j], tt[7 * L + j]
    f22, f23, f33 = tt[10 * L + j], tt[11 * L + j], tt[15 * L + j]
    p00, p01, p02, p03 = S[src + j], S[src + L + j], S[src + 2 * L + j], S[src + 3 * L + j]
    p11, p12, p13 = S[src + 4 * L + j], S[src + 5 * L + j], S[src + 6 * L + j]
    p22, p23, p33 = S[src + 7 * L + j], S[src + 8 * L + j], S[src + 9 * L + j]
    # T = Φ P0 (the rows and columns needed)
    t00 = f00 * p00 + f01 * p01 + f02 * p02 + f03 * p03
    t01 = f00 * p01 + f01 * p11 + f02 * p12 + f03 * p13
    t02 = f00 * p02 + f01 * p12 + f02 * p22 + f03 * p23
    t03 = f00 * p03 + f01 * p13 + f02 * p23 + f03 * p33
    t10 = f10 * p00 + f11 * p01 + f12 * p02 + f13 * p03
    t11 = f10 * p01 + f11 * p11 + f12 * p12 + f13 * p13
    t12 = f10 * p02 + f11 * p12 + f12 * p22 + f13 * p23
    t13 = f10 * p03 + f11 * p13 + f12 * p23 + f13 * p33
    t22 = f22 * p22 + f23 * p23
    t23 = f22 * p23 + f23 * p33
    t33 = f33 * p33
    B[dst + j] = tt[q + j] + t00 * f00 + t01 * f01 + t02 * f02 + t03 * f03
    B[dst + L + j] = tt[q + L + j] + t00 * f10 + t01 * f11 + t02 * f12 + t03 * f13
    B[dst + 4 * L + j] = tt[q + 4 * L + j] + t10 * f10 + t11 * f11 + t12 * f12 + t13 * f13
    B[dst + 2 * L + j] = tt[q + 2 * L + j] + t02 * f22 + t03 * f23
    B[dst + 5 * L + j] = tt[q + 5 * L + j] + t12 * f22 + t13 * f23
    B[dst + 7 * L + j] = tt[q + 7 * L + j] + t22 * f22 + t23 * f23
    B[dst + 3 * L + j] = tt[q + 3 * L + j] + t03 * f33
    B[dst + 6 * L + j] = tt[q + 6 * L + j] + t13 * f33
    B[dst + 8 * L + j] = tt[q + 8 * L + j] + t23 * f33
    B[dst + 9 * L + j] = tt[q + 9 * L + j] + t33 * f33


@numba.njit(**_JIT)
def _weigh(z, R, B, mu, w):
    """Each model's prior probability times its likelihood of ``z``, scaled by
    ``e^(−lmax)`` into ``w``; returns ``(lmax, Σ w)``.

    ``N(y; 0, S) = e^(−y²/2S) / √(2πS)``: the exponents are scaled by their largest, so
    one ``exp`` and one square root per model and no logarithm (a third of the cost of
    the step for seven models when written with ``log S``)."""
    r = mu.shape[0]
    emax = -np.inf
    for j in range(r):
        s_ = B[_PO + j] + R
        y_ = z - B[j]
        w[j] = -0.5 * y_ * y_ / s_
        if mu[j] > 0.0 and w[j] > emax:  # a model ruled out must not set the scale
            emax = w[j]
    if not emax > -np.inf:
        # no model gives the sample any density at all (a wild first sample, say):
        # it says nothing about the modes, and its log density is the lowest finite one
        for j in range(r):
            w[j] = mu[j]
        return _LOWEST_LOG_DENSITY, 1.0
    total = 0.0
    for j in range(r):
        w[j] = mu[j] * math.exp(w[j] - emax) / math.sqrt(B[_PO + j] + R) if mu[j] > 0.0 else 0.0
        total += w[j]
    return emax - 0.5 * _LOG_2PI, total


@numba.njit(**_JIT)
def _apply(z, R, floor, B, mu, w, lmax, total, S):
    """Steps 3 and 4 in place from the weights of `_weigh`; returns the log predictive
    density of ``z``. A floor model takes its gain from its design covariance (updated
    as its own Kalman filter) and carries its covariance through the same gain."""
    r = mu.shape[0]
    for j in range(r):
        mu[j] = w[j] / total
    for j in range(r):
        fl = floor[j]
        s_ = (B[_PDO + j] if fl else B[_PO + j]) + R
        y_ = z - B[j]
        for a in range(4):  # gain: column 0 of the covariance is its packed rows 0-3
            g = B[_PDO + a * LANES + j] if fl else B[_PO + a * LANES + j]
            S[_K + a * LANES + j] = g / s_
        for a in range(4):
            B[a * LANES + j] += S[_K + a * LANES + j] * y_
    for j in range(r):
        _joseph(j, B, _PO, R, S)
    for j in range(r):
        if floor[j]:
            _joseph(j, B, _PDO, R, S)
    return lmax + math.log(total)


@numba.njit(inline="always", **_JIT)
def _joseph(j, B, at, R, S):
    """``P_j ← (I − K e1ᵀ) P_j (I − K e1ᵀ)ᵀ + K R Kᵀ`` for the packed covariance at row
    offset ``at`` of the branch and the gains in the scratch: right for any gain,
    symmetric and positive under rounding. ``T = P − K P[0, :]``; only the entries the
    packed result needs."""
    L = LANES
    k0, k1, k2, k3 = S[_K + j], S[_K + L + j], S[_K + 2 * L + j], S[_K + 3 * L + j]
    p00, p01, p02, p03 = B[at + j], B[at + L + j], B[at + 2 * L + j], B[at + 3 * L + j]
    t00 = p00 - k0 * p00
    t01 = p01 - k0 * p01
    t02 = p02 - k0 * p02
    t03 = p03 - k0 * p03
    t10 = p01 - k1 * p00
    t11 = B[at + 4 * L + j] - k1 * p01
    t12 = B[at + 5 * L + j] - k1 * p02
    t13 = B[at + 6 * L + j] - k1 * p03
    t20 = p02 - k2 * p00
    t22 = B[at + 7 * L + j] - k2 * p02
    t23 = B[at + 8 * L + j] - k2 * p03
    t30 = p03 - k3 * p00
    t33 = B[at + 9 * L + j] - k3 * p03
    B[at + j] = t00 - t00 * k0 + k0 * R * k0
    B[at + L + j] = t01 - t00 * k1 + k0 * R * k1
    B[at + 2 * L + j] = t02 - t00 * k2 + k0 * R * k2
    B[at + 3 * L + j] = t03 - t00 * k3 + k0 * R * k3
    B[at + 4 * L + j] = t11 - t10 * k1 + k1 * R * k1
    B[at + 5 * L + j] = t12 - t10 * k2 + k1 * R * k2
    B[at + 6 * L + j] = t13 - t10 * k3 + k1 * R * k3
    B[at + 7 * L + j] = t22 - t20 * k2 + k2 * R * k2
    B[at + 8 * L + j] = t23 - t20 * k3 + k2 * R * k3
    B[at + 9 * L + j] = t33 - t30 * k3 + k3 * R * k3


@numba.njit(inline="always", **_JIT)
def _update(z, R, floor, B, mu, w, S):
    """Steps 3 and 4 in place; returns the log predictive density of ``z``."""
    lmax, total = _weigh(z, R, B, mu, w)
    return _apply(z, R, floor, B, mu, w, lmax, total, S)


@numba.njit(inline="always", **_JIT)
def _copy_branch(B, mu, to_B, to_mu):
    """One branch's states, covariances and probabilities into another's arrays."""
    for j in range(mu.shape[0]):
        to_mu[j] = mu[j]
    for u in range(_BRANCH):
        to_B[u] = B[u]


@numba.njit(inline="always", **_JIT)
def _decided(wa):
    """The weight of branch "used", made hard beyond ``_DECIDED`` of either side.

    A soft merge of a branch that assumed a jump of tens of newtons with weight 0.01
    spreads that jump into every model for milliseconds; odds of 19 to 1 after two
    samples are taken as a decision.
    """
    if wa < _DECIDED:
        return 0.0
    if wa > 1.0 - _DECIDED:
        return 1.0
    return wa


@numba.njit(inline="always", **_JIT)
def _logaddexp(a, b):
    """``log(e^a + e^b)`` without overflow."""
    m = max(a, b)
    return m + math.log(math.exp(a - m) + math.exp(b - m))


@numba.njit(inline="always", **_JIT)
def _outlier_log_density(y, s2, tail):
    """Log density of an outlier's innovation ``y``: ``(1 − tail)·N(y; 0, s2)`` plus
    ``tail`` times a Cauchy density of scale ``√s2``.

    The Gaussian core sets the odds against a load change for innovations of a few ``√s2``;
    the Cauchy share keeps a density for a spike of any size. Without it a spike of
    thousands of noise σ had none (``e^(−y²/2s2)`` underflows), and two load jumps, out and
    back, explained it better: it was never rejected and moved the estimate by the span.
    """
    q = y * y / s2
    core = math.log1p(-tail) - 0.5 * (_LOG_2PI + math.log(s2) + q)
    if tail <= 0.0:
        return core
    return _logaddexp(core, math.log(tail) - _LOG_PI - 0.5 * math.log(s2) - math.log1p(q))


@numba.njit(inline="always", **_JIT)
def _resolve(la, lb, pend, floor, B, mu):
    """Decide the pending suspect from the log weights of its branches ("used", "an
    outlier"); merge them into branch 0; True when it was judged an outlier."""
    wa = _decided(1.0 / (1.0 + math.exp(lb - la)))
    _merge(wa, floor, B[0], mu[0], B[1], mu[1])
    pend[0] = 0.0
    pend[7] = 0.0
    pend[3] = 1.0 if wa >= 0.5 else 0.0  # a change confirmed under way
    return wa < 0.5


@numba.njit(inline="always", **_JIT)
def _odds_open(la, lb):
    """Are the odds of branch "used" (log weight ``la``) against "an outlier" (``lb``)
    short of ``_DECIDED`` either way?"""
    return abs(la - lb) < _LOG_DECIDED_ODDS


@numba.njit(**_JIT)
def _merge(wa, floor, Ba, mua, Bb, mub):
    """Per-model moment matching of branch a (weight wa) and b (1 − wa), into a."""
    r = mua.shape[0]
    wb = 1.0 - wa
    for j in range(r):
        pa = wa * mua[j]
        pb = wb * mub[j]
        m = pa + pb
        if m <= 0.0:
            continue
        fa = pa / m
        fb = pb / m
        _merge_cov(j, fa, fb, Ba, Bb, _PO)
        if floor[j]:
            _merge_cov(j, fa, fb, Ba, Bb, _PDO)
        for a in range(4):
            Ba[a * LANES + j] = fa * Ba[a * LANES + j] + fb * Bb[a * LANES + j]
        mua[j] = m


@numba.njit(inline="always", **_JIT)
def _merge_cov(j, fa, fb, Ba, Bb, at):
    """Model ``j``'s covariance at row offset ``at`` of branch a ← the covariance of the
    two-component mixture (weights fa, fb)."""
    L = LANES
    for a in range(4):
        xm = fa * Ba[a * L + j] + fb * Bb[a * L + j]
        for b in range(a, 4):
            xmb = fa * Ba[b * L + j] + fb * Bb[b * L + j]
            u = at + _U[a, b] * L + j
            Ba[u] = fa * (Ba[u] + (Ba[a * L + j] - xm) * (Ba[b * L + j] - xmb)) + fb * (
                Bb[u] + (Bb[a * L + j] - xm) * (Bb[b * L + j] - xmb)
            )


@numba.njit(inline="always", **_JIT)
def _drop_tail(ca, cb, budget):
    """Zero the smallest weights of ``ca`` and ``cb`` while their sum stays within
    ``budget``; the largest weight always stays."""
    r = ca.shape[0]
    spent = 0.0
    while True:
        smallest = np.inf
        at = -1
        count = 0
        for j in range(2 * r):
            v = ca[j] if j < r else cb[j - r]
            if v > 0.0:
                count += 1
                if v < smallest:
                    smallest = v
                    at = j
        if count <= 1 or spent + smallest > budget:
            return
        spent += smallest
        if at < r:
            ca[at] = 0.0
        else:
            cb[at - r] = 0.0


@numba.njit(**_JIT)
def _combine(k, wa, Ba, mua, Bb, mub, prune, tail, ca, cb, keep, out_x, out_var):
    """Mean and variance (per component) of the two-branch, r-model mixture.

    Models below their ``prune`` entry are left out, then the least probable of the
    rest while their total stays within ``tail`` (the rest renormalised).
    """
    r = mua.shape[0]
    wb = 1.0 - wa
    tot = 0.0
    for j in range(r):
        ca[j] = wa * mua[j] if wa * mua[j] >= prune[j] else 0.0
        cb[j] = wb * mub[j] if wb * mub[j] >= prune[j] else 0.0
        tot += ca[j] + cb[j]
    _drop_tail(ca, cb, tail * tot)
    tot = 0.0
    for j in range(r):
        tot += ca[j] + cb[j]
    # only the models kept take part (a zero weight adds exactly nothing)
    n = 0
    for j in range(r):
        if ca[j] != 0.0 or cb[j] != 0.0:  # (zero over tot stays zero: no division)
            ca[j] /= tot
            cb[j] /= tot
            if ca[j] != 0.0 or cb[j] != 0.0:
                keep[n] = j
                n += 1
    for a in range(4):
        s = 0.0
        for i in range(n):
            j = keep[i]
            s += ca[j] * Ba[a * LANES + j] + cb[j] * Bb[a * LANES + j]
        out_x[k, a] = s
    for a in range(4):
        s = 0.0
        m = out_x[k, a]
        for i in range(n):
            j = keep[i]
            s += ca[j] * (Ba[_PO + _DIAG[a] * LANES + j] + (Ba[a * LANES + j] - m) ** 2)
            s += cb[j] * (Bb[_PO + _DIAG[a] * LANES + j] + (Bb[a * LANES + j] - m) ** 2)
        out_var[k, a] = s


@numba.njit(inline="always", **_JIT)
def _reach_other(k, out_x, out_var, other_x, other_var):
    """Widen row ``k``'s variances so that its ±2σ interval holds the ±2σ interval of the
    hypothesis not shown (mean ``x_o``, σ ``σ_o``): ``σ' = max(σ, |x − x_o|/2 + σ_o)``.
    A suspect row cannot yet tell an outlier from the first sample of a load change, and
    the mixture shown prunes the long-odds branch's models: the row stated the σ of a
    held load while the load had already stepped."""
    for a in range(4):
        s = math.sqrt(out_var[k, a])
        reach = 0.5 * abs(out_x[k, a] - other_x[0, a]) + math.sqrt(other_var[0, a])
        if reach > s:
            out_var[k, a] = reach * reach


@numba.njit(inline="always", **_JIT)
def _add_lag(Ba, mua, jump, floor, k, out_var):
    """The lag of the prior in the force's variance (row ``k``): when a rate model other
    than the fastest leads the mixture, the load may be moving faster than it assumes, and
    the next faster rate model's force ``Δ`` away says by how much it may lag. For a
    regular rate model ``Δ`` is taken as the full width of a rectangular distribution about
    it, variance ``Δ²/12`` (GUM 4.3.7): its own covariance already spreads about its
    estimate. A floor model's covariance allows no departure from a constant rate at all,
    so its lag is taken as a uniform error on ``[0, Δ]``, mean square ``Δ²/3``. The rate
    models are ``1 … jump − 1``, slow to fast."""
    jd = 0
    for j in range(mua.shape[0]):
        if mua[j] > mua[jd]:
            jd = j
    if 1 <= jd < jump - 1:
        lag = Ba[2 * LANES + jd + 1] - Ba[2 * LANES + jd]
        out_var[k, 2] += lag * lag / (3.0 if floor[jd] else 12.0)


@numba.njit(inline="always", **_JIT)
def _predicted(R, prune, B, mu):
    """The branch's prediction of the measurement: the mixture's mean and variance (models
    below ``prune`` left out, as in the reported mixture) and the most probable model."""
    r = mu.shape[0]
    jbest = 0
    for j in range(r):
        if mu[j] > mu[jbest]:
            jbest = j
    zhat = 0.0
    wsum = 0.0
    for j in range(r):
        if mu[j] >= prune[j] or j == jbest:
            zhat += mu[j] * B[j]
            wsum += mu[j]
    zhat /= wsum
    smix = 0.0
    for j in range(r):
        if mu[j] >= prune[j] or j == jbest:
            smix += mu[j] * (B[_PO + j] + R + (B[j] - zhat) ** 2)
    return zhat, smix / wsum, jbest


@numba.njit(inline="always", **_JIT)
def _suspect_weighed(z, R, gate2, jump, jump_end, B, jbest, lw, lmax, total, lout, far):
    """Is ``z`` suspect for the branch whose weights `_weigh` left in ``lw`` (``lmax``,
    ``total`` as it returned them; ``lout`` the log of ``ε`` times the outlier density of
    ``z``, `_outlier_log_density`, computed only when ``far``: beyond the gate in noise σ
    alone)? It is when beyond the gate of the most probable model;
    when raising the force-jump models above ``_JUMP_SUSPECT`` on its own (at high rates one
    sample of a jump is barely above the noise, so a single noisy sample can do that); or
    when it is beyond the gate in noise σ alone and would make "an outlier" at least
    ``_OUTLIER_SUSPECT`` probable on its own. Where the load moves fast for the sampling rate
    a model predicts the reading with a spread of ten noise σ or more, and a 50σ spike stays
    inside its gate; with a tight prediction the gate decides as before (the odds alone made
    the first sample of slow-starting steps suspect, a few σ out, and delayed their rows)."""
    y = z - B[jbest]
    if y * y > gate2 * (B[_PO + jbest] + R):
        return True
    if far and lout - lmax - math.log(total) > _LOG_OUTLIER_SUSPECT_ODDS:
        return True
    if jump < 0:
        return False
    lsum = 0.0
    for j in range(jump, jump_end):
        lsum += lw[j]
    return lsum > _JUMP_SUSPECT * total


@numba.njit(**_JIT)
def _burst_goes_on(z, R, gate2, la, lb, outlier_sd, outlier_tail, prune, Bb, mub, lw):
    """Hold ``z`` as the next sample of a burst? Returns the log weight it adds to the
    "outliers" branch if so, NaN if not. Held when ``z`` is beyond the gate of that
    branch's most probable model and "all used" (log weight ``la`` with ``z``) is not
    already decided against both readings of that branch (log weight ``lb`` without
    ``z``): ``z`` held as an outlier too, or ``z`` used after the held outliers. A load
    change that has just started keeps moving away from that branch's prediction, but "all
    used" explains it at once; without the second condition a spike soon after the start
    of a change was held with the change's first samples and used with them."""
    zb, sb, jb = _predicted(R, prune, Bb, mub)
    yb = z - Bb[jb]
    if yb * yb <= gate2 * (Bb[_PO + jb] + R):
        return math.nan
    so2 = outlier_sd * outlier_sd + sb
    added = _LOG_BURST_GO_ON + _outlier_log_density(z - zb, so2, outlier_tail)
    lmax, total = _weigh(z, R, Bb, mub, lw)
    used_after = lb + lmax + math.log(total)
    wa = 1.0 / (1.0 + math.exp(_logaddexp(lb + added, used_after) - la))
    return added if wa < 1.0 - _DECIDED else math.nan


@numba.njit(**_JIT)
def imm_block(
    z: np.ndarray,  # (n,) measurements (scaled units), NaN when missing
    table: np.ndarray,  # (n,) int: row of the model tables for each step
    PHI: np.ndarray,  # (nt, r, 4, 4) transition of each model
    Q: np.ndarray,  # (nt, r, 4, 4) process noise of each model's prior
    QD: np.ndarray,  # (nt, r, 4, 4) process noise a floor model's gain is designed for
    PI: np.ndarray,  # (nt, r, r) mode transition probabilities, rows sum to 1
    R: float,  # measurement variance (scaled units²)
    gate2: float,  # squared gate for a suspect sample
    outlier_prob: float,  # prior probability ε that a sample is an outlier
    outlier_sd: float,  # spread of an outlier about the prediction (scaled units)
    outlier_tail: float,  # share of the outliers' Cauchy tail, in [0, 1)
    prune: np.ndarray,  # (r,) a model less probable than its entry passes nothing on
    #                     and is not shown
    tail: float,  # the least probable models, up to this total, are not shown either
    jump: int,  # index of the first jump model (the jump family is last), or -1
    jump_end: int,  # one past the last force-jump model: their taking over makes a
    #                 sample suspect; a kink model after them does not
    floor: np.ndarray,  # (r,) bool: models whose gain comes from QD (see the module notes)
    x: np.ndarray,  # (2 or 3, r, 4) posterior states: branch "used", branch "outlier",
    #                 and (if 3) the prediction before the last sample, for hindsight
    P: np.ndarray,  # (2 or 3, r, 4, 4) posterior covariances of the branches (as x)
    PD: np.ndarray,  # (2 or 3, r, 4, 4) design covariances of the floor models (as x)
    mu: np.ndarray,  # (2 or 3, r) mode probabilities of the branches (as x)
    pend: np.ndarray,  # (8,) samples held (0: none), their log density used and as
    #                    outliers, 1 while a change is confirmed under way; 1 when the
    #                    last sample's prediction is kept in slot 2 of x, P, PD, mu, and
    #                    that sample's log density used and as an outlier; the samples
    #                    since the held ones that both branches used, the decision waiting
    out_x: np.ndarray,  # (n, 4) combined state
    out_var: np.ndarray,  # (n, 4) combined variances (diagonal)
    out_y: np.ndarray,  # (n,) innovation of the combined prediction
    out_s: np.ndarray,  # (n,) variance of that innovation
    out_flag: np.ndarray,  # (n,) FLAG_OUT_* bits
    out_mu: np.ndarray,  # (n, r) mode probabilities
    out_ll: np.ndarray,  # (n,) log predictive density of the sample (0 when missing;
    #                      a suspect and the next sample share their joint density)
    log_x: np.ndarray,  # (n or 0, r, 4) per-model posterior states, for a smoother
    log_P: np.ndarray,  # (n or 0, r, 4, 4) per-model posterior covariances
) -> int:
    """Run the block; returns the number of samples judged outliers in it."""
    _check_structure(PHI)
    if pend.shape[0] != _PEND_SIZE:
        raise ValueError("imm_block: pend must hold 8 values")
    n = z.shape[0]
    r = mu.shape[1]
    keep_log = log_x.shape[0] > 0
    keep_before = x.shape[0] > 2  # a third slot: the prediction before the last sample
    if r > LANES:
        raise ValueError("imm_block: a bank has at most 32 models (LANES)")
    T = _packed_tables(PHI, Q, QD)
    # the branches in the kernel's layout (model index last), written back at the end
    B = _packed_state(x, P, PD)
    S = np.zeros(_SCRATCH)
    W = np.empty((r, r))
    lj = np.empty(r)
    lw = np.empty(r)
    ca = np.empty(r)
    cb = np.empty(r)
    keep = np.empty(r, np.int64)
    other_x = np.empty((1, 4))
    other_var = np.empty((1, 4))
    Ba, mua = B[0], mu[0]
    Bb, mub = B[1], mu[1]
    log_eps = math.log(outlier_prob)
    log_1m_eps = math.log1p(-outlier_prob)
    rejected = 0
    for k in range(n):
        it = table[k]
        zk = z[k]
        flag = 0
        pending = pend[0] != 0.0
        # the sample before was used, and its prediction kept for hindsight
        hindsight = keep_before and pend[4] != 0.0
        if keep_before:
            pend[4] = 0.0
        _interact_predict(T[it], PI[it], prune, floor, Ba, mua, S, W)
        if pending:
            _interact_predict(T[it], PI[it], prune, floor, Bb, mub, S, W)
        # prediction of the measurement (branch "used": the suspect is undecided)
        zhat, smix, jbest = _predicted(R, prune, Ba, mua)
        # the innovation and its variance under the most probable model: χ²(1) when
        # that model is right (the mixture's own variance includes the spread of the
        # improbable models and would make the NIS too small)
        out_y[k] = zk - Ba[jbest]
        out_s[k] = Ba[_PO + jbest] + R
        if math.isnan(zk):
            flag |= FLAG_OUT_UNUSED
            out_ll[k] = 0.0
            # nothing to decide a pending suspect with: weigh by the suspects alone
            held = int(pend[0])
            if pending and _resolve(log_1m_eps + pend[1], log_eps + pend[2], pend, floor, B, mu):
                rejected += held
                flag |= FLAG_OUT_REJECTED_BEFORE
        else:
            if pending:
                before = _logaddexp(log_1m_eps + pend[1], log_eps + pend[2])
                lmax, total = _weigh(zk, R, Ba, mua, lj)
                added = math.nan
                if pend[0] < _BURST_MAX and pend[7] == 0.0:
                    added = _burst_goes_on(
                        zk, R, gate2, log_1m_eps + pend[1] + lmax + math.log(total),
                        log_eps + pend[2], outlier_sd, outlier_tail, prune, Bb, mub, lw,
                    )  # fmt: skip
                if not math.isnan(added):
                    # both branches go on: "used" takes the sample, "outliers" holds it
                    # as the next of a burst; a sample that comes back decides
                    pend[1] += _apply(zk, R, floor, Ba, mua, lj, lmax, total, S)
                    pend[2] += added
                    pend[0] += 1.0
                    flag |= FLAG_OUT_SUSPECT
                    out_ll[k] = _logaddexp(log_1m_eps + pend[1], log_eps + pend[2]) - before
                else:
                    # weigh "suspects used" against "suspects outliers" by every sample
                    # since the first; their joint log density, less what the held rows
                    # entered, is this row's share of the likelihood
                    la = log_1m_eps + pend[1]
                    la += _apply(zk, R, floor, Ba, mua, lj, lmax, total, S)
                    lb = log_eps + pend[2] + _update(zk, R, floor, Bb, mub, lj, S)
                    out_ll[k] = _logaddexp(la, lb) - before
                    held = int(pend[0])
                    if pend[7] < _DEFER_MAX and _odds_open(la, lb):
                        # both branches have used this sample; the next one weighs in too
                        pend[1] = la - log_1m_eps
                        pend[2] = lb - log_eps
                        pend[7] += 1.0
                        flag |= FLAG_OUT_DEFERRED
                    elif _resolve(la, lb, pend, floor, B, mu):
                        rejected += held
                        flag |= FLAG_OUT_REJECTED_BEFORE
            else:
                lmax, total = _weigh(zk, R, Ba, mua, lj)
                so2 = outlier_sd * outlier_sd + smix
                # beyond the gate in noise σ: only there do the outlier's odds count
                # (on a held load almost no sample is, and the logarithms are spared)
                far = out_y[k] ** 2 > gate2 * R
                lout = _outlier_log_density(zk - zhat, so2, outlier_tail) if far else math.nan
                taken_back = False
                suspect = _suspect_weighed(
                    zk, R, gate2, jump, jump_end, Ba, jbest, lj, lmax + log_1m_eps, total,
                    log_eps + lout, far,
                )  # fmt: skip
                if suspect and not far:
                    lout = _outlier_log_density(zk - zhat, so2, outlier_tail)
                if suspect and hindsight:
                    # was the sample before this one the outlier? ("before": that sample
                    # left out, this one used, from the prediction kept before it)
                    _copy_branch(B[2], mu[2], Bb, mub)
                    _interact_predict(
                        T[it], PI[it], prune, floor, Bb, mub, S, W,
                    )  # fmt: skip
                    lmax2, total2 = _weigh(zk, R, Bb, mub, lw)
                    l_before = log_eps + pend[6] + lmax2 + math.log(total2)
                    l_both = log_1m_eps + pend[5] + lmax + math.log(total)
                    l_this = log_1m_eps + pend[5] + log_eps + lout
                    if l_before > _logaddexp(l_both, l_this):
                        # the likeliest reading: both samples used, merged by their odds
                        # (hard beyond 19 to 1, as a suspect's decision)
                        wb = _decided(1.0 / (1.0 + math.exp(l_both - l_before)))
                        _apply(zk, R, floor, Bb, mub, lw, lmax2, total2, S)
                        if wb < 1.0:
                            _apply(zk, R, floor, Ba, mua, lj, lmax, total, S)
                            _merge(1.0 - wb, floor, Ba, mua, Bb, mub)
                        else:
                            _copy_branch(Bb, mub, Ba, mua)
                        out_ll[k] = _logaddexp(l_before, l_both) - pend[5]
                        flag |= FLAG_OUT_REJECTED_BEFORE
                        rejected += 1
                        pend[3] = 0.0
                        taken_back = True
                        suspect = False
                if suspect:
                    # suspect: keep the prediction as the "outlier" branch, then update
                    _copy_branch(Ba, mua, Bb, mub)
                    pend[2] = lout
                    pend[1] = _apply(zk, R, floor, Ba, mua, lj, lmax, total, S)
                    pend[0] = 1.0
                    flag |= FLAG_OUT_SUSPECT
                    out_ll[k] = _logaddexp(log_1m_eps + pend[1], log_eps + pend[2])
                elif not taken_back:
                    kept = keep_before and far
                    if kept:
                        # far enough out to be a spike its prediction could not tell: keep
                        # that prediction, for the next sample to weigh it in hindsight
                        _copy_branch(Ba, mua, B[2], mu[2])
                        pend[4] = 1.0
                        pend[6] = lout
                    out_ll[k] = _apply(zk, R, floor, Ba, mua, lj, lmax, total, S)
                    if kept:
                        pend[5] = out_ll[k]  # its log density used
                    pend[3] = 0.0
        if pend[0] != 0.0:
            # a suspect row: both branches, weighed by what is known so far. When the
            # outlier is the likelier and no change is confirmed under way, the row shows
            # the estimate without the sample (an isolated outlier must not move it).
            # Either way its ±2σ reaches the other hypothesis (`_reach_other`).
            wa = 1.0 / (1.0 + math.exp(log_eps + pend[2] - log_1m_eps - pend[1]))
            shown_used = pend[3] != 0.0 or wa >= _SHOW_USED
            _combine(
                k, wa if shown_used else 0.0, Ba, mua, Bb, mub, prune, tail, ca, cb,
                keep, out_x, out_var,
            )  # fmt: skip
            _combine(
                0, 0.0 if shown_used else 1.0, Ba, mua, Bb, mub, prune, tail, ca, cb,
                keep, other_x, other_var,
            )  # fmt: skip
            _reach_other(k, out_x, out_var, other_x, other_var)
        else:
            _combine(k, 1.0, Ba, mua, Bb, mub, prune, tail, ca, cb, keep, out_x, out_var)
        if jump > 1:
            _add_lag(Ba, mua, jump, floor, k, out_var)
        out_flag[k] = flag
        for j in range(r):
            out_mu[k, j] = mua[j]
        if keep_log:
            for j in range(r):
                for a in range(4):
                    log_x[k, j, a] = Ba[a * LANES + j]
                    for b in range(4):
                        log_P[k, j, a, b] = Ba[_PO + _U[a, b] * LANES + j]
    _unpacked_state(B, x, P, PD)
    return rejected


@numba.njit(**_JIT)
def _packed_tables(PHI, Q, QD):
    """The model tables in the kernel's layout, one row of `LANES` per entry: per step
    ``Φ`` (row ``4a + b``), then ``Q`` and ``QD`` packed (row ``_U[a, b]``)."""
    nt, r = PHI.shape[0], PHI.shape[1]
    T = np.zeros((nt, _TABLE))
    for t in range(nt):
        for j in range(r):
            for a in range(4):
                for b in range(4):
                    T[t, _PHI + (4 * a + b) * LANES + j] = PHI[t, j, a, b]
                    if b >= a:
                        T[t, _Q + _U[a, b] * LANES + j] = Q[t, j, a, b]
                        T[t, _QD + _U[a, b] * LANES + j] = QD[t, j, a, b]
    return T


@numba.njit(**_JIT)
def _packed_state(x, P, PD):
    """The branches' states ``(nb, r, 4)`` and covariances ``(nb, r, 4, 4)`` in the
    kernel's layout: one buffer of `_BRANCH` per branch (see the module notes)."""
    nb, r = x.shape[0], x.shape[1]
    B = np.zeros((nb, _BRANCH))
    for c in range(nb):
        for j in range(r):
            for a in range(4):
                B[c, _XO + a * LANES + j] = x[c, j, a]
                for b in range(a, 4):
                    B[c, _PO + _U[a, b] * LANES + j] = P[c, j, a, b]
                    B[c, _PDO + _U[a, b] * LANES + j] = PD[c, j, a, b]
    return B


@numba.njit(**_JIT)
def _unpacked_state(B, x, P, PD):
    """`_packed_state` undone, into the caller's arrays (both triangles written)."""
    for c in range(x.shape[0]):
        for j in range(x.shape[1]):
            for a in range(4):
                x[c, j, a] = B[c, _XO + a * LANES + j]
                for b in range(4):
                    P[c, j, a, b] = B[c, _PO + _U[a, b] * LANES + j]
                    PD[c, j, a, b] = B[c, _PDO + _U[a, b] * LANES + j]


@numba.njit(**_JIT)
def _check_structure(PHI):
    """Refuse transition matrices `_predict_cov` would get wrong: ``Φ[2:, :2]`` and
    ``Φ[3, 2]`` must be exactly zero, as in every table of `force_models.model_tables`."""
    for t in range(PHI.shape[0]):
        for j in range(PHI.shape[1]):
            F = PHI[t, j]
            if F[2, 0] != 0.0 or F[2, 1] != 0.0 or F[3, 0] != 0.0 or F[3, 1] != 0.0:
                raise ValueError("imm_block: Φ[2:, :2] must be zero (force from the cell's state)")
            if F[3, 2] != 0.0:
                raise ValueError("imm_block: Φ[3, 2] must be zero (force rate from the force)")
