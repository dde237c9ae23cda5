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

**Outliers, decided by the next sample.** A single sample cannot tell an isolated
outlier from the first sample of a sudden load change: both are a large innovation. The
next sample can: after a load change the data keep moving, after an outlier they come
back. So a sample whose innovation is beyond ``gate`` standard deviations of the most
probable model, or that on its own would give the force-jump models more than
``_JUMP_SUSPECT`` of the probability (at high sample rates one sample of a jump is barely
above the noise, so a single noisy sample can do that; a kink model, whose first sample
looks like no change, does not count), is held as *suspect*: two branches are kept,
"used" (the IMM step above) and "outlier" (prediction only). The next sample runs the
IMM step from both, and the branches are weighed by everything they predicted — prior
probability ``ε`` of an outlier, the density of the suspect sample under each hypothesis
(`_outlier_log_density`: an outlier is spread about the prediction with scale
``outlier_sd``, Gaussian in its core with a Cauchy share ``outlier_tail``), the density
of the next sample — and merged per model by moment matching. An isolated outlier is
thus rejected, and a load change loses none of its samples. The row of a suspect sample
shows both branches merged with the weights known then; its flag says so. A sample beyond
``gate`` noise σ that would make "an outlier" at least ``_OUTLIER_SUSPECT`` probable on its
own is suspect too: where a fast-moving load widens the prediction, a spike can sit inside
the gate.

**Hindsight.** Some spikes still pass as motion. The prediction made before each sample
used though beyond ``gate`` noise σ is kept (slot 2 of the state arrays); when the next
sample is suspect, "the sample before was the outlier" is weighed beside "both used" and
"this one an outlier", and when it is the likeliest the readings that use the new sample
are merged by their odds and the sample before is counted as rejected.

**Bursts.** Interference often spoils two or three samples in a row. When the sample
after a suspect is beyond the gate *as seen from the "outlier" branch*, and "used" is not
already decided by it (`_burst_goes_on`), nothing is decided yet: "used" takes it,
"outlier" holds it too as the next of a burst (prior probability ``_LOG_BURST_GO_ON``
that an outlier is followed by another), up to ``_BURST_MAX`` samples; the first sample
not held, or the one after the longest burst, decides between "all used" and "all
outliers". Without this a burst of two 50σ samples on an invented cell sampled 66 times
a period was taken as two force jumps, out and back: 60 N off on a 200 N cell for a few
rows.

**Deferred.** When the sample that decides leaves the odds short of 19 to 1 either way
(`_odds_open`), both branches take it as an ordinary sample and the decision waits for one
more (`_DEFER_MAX`); its row is flagged deferred and shows both branches. Where the load
moves fast for the sampling rate one sample after a spike can say little: on an invented
cell read seven times a period under a random load, "used" stood at 0.905 after the
spike's next sample and at 0.33 after the one after it.

Sources: H. A. P. Blom, Y. Bar-Shalom, "The interacting multiple model algorithm for
systems with Markovian switching coefficients", IEEE Trans. Automatic Control 33(8),
780-783, 1988; Y. Bar-Shalom, X. R. Li, T. Kirubarajan, "Estimation with Applications
to Tracking and Navigation", Wiley 2001, section 11.6.6; the two-hypothesis weighing
is Bayes' rule over the suspect sample and the next one.

**Layout.** Inside a block the models' states are held with the model index last,
``(4, r)`` per branch, and each covariance packed to its upper triangle, ``(10, r)`` (row
``_U[a, b]``), so that the steps over the models are loops the compiler may vectorise; the
caller's arrays keep ``(branches, r, 4)`` and ``(branches, r, 4, 4)`` and are converted on
entry and written back on exit. Every sum runs in the order it had with the model index
first, so the results are the same bit for bit.

Nothing here allocates per sample; every decision depends only on past samples, so a
record fed in blocks of any size gives bit-identical results (the suspect branch is part
of the carried state).

The kernel is one file on purpose: numba's on-disk cache follows the file of the function
it compiled, not the files of the functions it calls, so a helper moved to another module
would leave stale machine code running after an edit (DEVELOPERS.md, Conventions). The
six largest helpers (`_interact_predict`, `_weigh`, `_apply`, `_merge`, `_combine`,
`_burst_goes_on`) are compiled as functions of their own, not inlined at each of their
calls: inlined, the kernel took 72 s to compile from a cold cache (the first session after
an install) for a speed within 2 % of the same; now 18 s (2026-12-06).
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


@numba.njit(**_JIT)
def _interact_predict(it, phi, q, qd, PI, prune, floor, x, P, PD, mu, cbar, tot, W, x0, P0, PD0):
    """Steps 1 and 2: mixed priors, then each model's prediction, in place in x, P (and
    PD of the floor models).

    A model whose probability is below its ``prune`` entry passes nothing on: each
    model's sources are the models kept and itself, summed in ascending order. The loops
    run over the receiving models, which the layout (model index last) makes vectors.
    """
    r = mu.shape[0]
    for j in range(r):
        cbar[j] = 0.0
        tot[j] = 0.0
    for i in range(r):
        m = mu[i]
        for j in range(r):
            cbar[j] += PI[it, i, j] * m
        if mu[i] >= prune[i]:  # kept: a source of every model
            for j in range(r):
                tot[j] += PI[it, i, j] * m
        else:  # a source of itself only
            tot[i] += PI[it, i, i] * m
    for i in range(r):
        if mu[i] >= prune[i]:
            for j in range(r):
                W[i, j] = PI[it, i, j] * mu[i] / tot[j]
        else:
            W[i, i] = PI[it, i, i] * mu[i] / tot[i]
    for a in range(4):
        for j in range(r):
            x0[a, j] = 0.0
    for u in range(10):
        for j in range(r):
            P0[u, j] = 0.0
    for i in range(r):
        if mu[i] >= prune[i]:
            for a in range(4):
                for j in range(r):
                    x0[a, j] += W[i, j] * x[a, i]
        else:
            for a in range(4):
                x0[a, i] += W[i, i] * x[a, i]
    for i in range(r):
        if mu[i] >= prune[i]:
            for j in range(r):
                _mix_term(W[i, j], x, P, i, x0, P0, j)
        else:
            _mix_term(W[i, i], x, P, i, x0, P0, i)
    for j in range(r):
        if tot[j] <= 0.0:  # every source pruned: the model keeps its own state
            for a in range(4):
                x0[a, j] = x[a, j]
            for u in range(10):
                P0[u, j] = P[u, j]
    for j in range(r):
        if floor[j]:
            # the gain's design covariance: the same mixture of the sources' design
            # covariances (a regular model's is its own)
            for u in range(10):
                PD0[u, j] = 0.0
            if tot[j] <= 0.0:
                for u in range(10):
                    PD0[u, j] = PD[u, j]
            else:
                for i in range(r):
                    if i == j or mu[i] >= prune[i]:
                        _mix_term(W[i, j], x, PD if floor[i] else P, i, x0, PD0, j)
    for j in range(r):
        _predict_cov(it, j, phi, q, P0, P)
        a0, a1, a2, a3 = x0[0, j], x0[1, j], x0[2, j], x0[3, j]
        for a in range(4):
            x[a, j] = (
                0.0
                + phi[it, 4 * a, j] * a0
                + phi[it, 4 * a + 1, j] * a1
                + phi[it, 4 * a + 2, j] * a2
                + phi[it, 4 * a + 3, j] * a3
            )
    for j in range(r):
        if floor[j]:
            _predict_cov(it, j, phi, qd, PD0, PD)
    for j in range(r):
        mu[j] = cbar[j]


@numba.njit(inline="always", **_JIT)
def _mix_term(wm, x, S, i, x0, P0, j):
    """``P0[:, j] += wm (S_i + (x_i − x0_j)(x_i − x0_j)ᵀ)``, packed."""
    d0 = x[0, i] - x0[0, j]
    d1 = x[1, i] - x0[1, j]
    d2 = x[2, i] - x0[2, j]
    d3 = x[3, i] - x0[3, j]
    P0[0, j] += wm * (S[0, i] + d0 * d0)
    P0[1, j] += wm * (S[1, i] + d0 * d1)
    P0[2, j] += wm * (S[2, i] + d0 * d2)
    P0[3, j] += wm * (S[3, i] + d0 * d3)
    P0[4, j] += wm * (S[4, i] + d1 * d1)
    P0[5, j] += wm * (S[5, i] + d1 * d2)
    P0[6, j] += wm * (S[6, i] + d1 * d3)
    P0[7, j] += wm * (S[7, i] + d2 * d2)
    P0[8, j] += wm * (S[8, i] + d2 * d3)
    P0[9, j] += wm * (S[9, i] + d3 * d3)


@numba.njit(inline="always", **_JIT)
def _predict_cov(it, j, phi, q, P0, out):
    """``out_j = Φ_j P0_j Φ_jᵀ + Q_j``, written out term by term (each sum in the
    order of the matrix product). Φ's lower left block (the force does not depend on the
    cell's state) and ``Φ[3, 2]`` (nor its rate on the force) are zero, `_check_structure`
    makes sure, and their terms are left out: a third of the products."""
    f00, f01, f02, f03 = phi[it, 0, j], phi[it, 1, j], phi[it, 2, j], phi[it, 3, j]
    f10, f11, f12, f13 = phi[it, 4, j], phi[it, 5, j], phi[it, 6, j], phi[it, 7, j]
    f22, f23, f33 = phi[it, 10, j], phi[it, 11, j], phi[it, 15, j]
    p00, p01, p02, p03 = P0[0, j], P0[1, j], P0[2, j], P0[3, j]
    p11, p12, p13 = P0[4, j], P0[5, j], P0[6, j]
    p22, p23, p33 = P0[7, j], P0[8, j], P0[9, j]
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
    out[0, j] = q[it, 0, j] + t00 * f00 + t01 * f01 + t02 * f02 + t03 * f03
    out[1, j] = q[it, 1, j] + t00 * f10 + t01 * f11 + t02 * f12 + t03 * f13
    out[4, j] = q[it, 4, j] + t10 * f10 + t11 * f11 + t12 * f12 + t13 * f13
    out[2, j] = q[it, 2, j] + t02 * f22 + t03 * f23
    out[5, j] = q[it, 5, j] + t12 * f22 + t13 * f23
    out[7, j] = q[it, 7, j] + t22 * f22 + t23 * f23
    out[3, j] = q[it, 3, j] + t03 * f33
    out[6, j] = q[it, 6, j] + t13 * f33
    out[8, j] = q[it, 8, j] + t23 * f33
    out[9, j] = q[it, 9, j] + t33 * f33


@numba.njit(**_JIT)
def _weigh(z, R, x, P, mu, w):
    """Each model's prior probability times its likelihood of ``z``, scaled by
    ``e^(−lmax)`` into ``w``; returns ``(lmax, Σ w)``.

    ``N(y; 0, S) = e^(−y²/2S) / √(2πS)``: the exponents are scaled by their largest, so
    one ``exp`` and one square root per model and no logarithm (a third of the cost of
    the step for seven models when written with ``log S``)."""
    r = mu.shape[0]
    emax = -np.inf
    for j in range(r):
        s_ = P[0, j] + R
        y_ = z - x[0, j]
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
        w[j] = mu[j] * math.exp(w[j] - emax) / math.sqrt(P[0, j] + R) if mu[j] > 0.0 else 0.0
        total += w[j]
    return emax - 0.5 * _LOG_2PI, total


@numba.njit(**_JIT)
def _apply(z, R, floor, x, P, PD, mu, w, lmax, total, K):
    """Steps 3 and 4 in place from the weights of `_weigh`; returns the log predictive
    density of ``z``. A floor model takes its gain from its design covariance ``PD``
    (updated as its own Kalman filter) and carries ``P`` through the same gain."""
    r = mu.shape[0]
    for j in range(r):
        mu[j] = w[j] / total
    for j in range(r):
        G = PD if floor[j] else P
        s_ = G[0, j] + R
        y_ = z - x[0, j]
        for a in range(4):
            K[a, j] = G[a, j] / s_  # gain (column 0 of G is its rows 0-3)
        for a in range(4):
            x[a, j] += K[a, j] * y_
    for j in range(r):
        _joseph(j, P, R, K)
    for j in range(r):
        if floor[j]:
            _joseph(j, PD, R, K)
    return lmax + math.log(total)


@numba.njit(inline="always", **_JIT)
def _joseph(j, P, R, K):
    """``P_j ← (I − K e1ᵀ) P_j (I − K e1ᵀ)ᵀ + K R Kᵀ``: right for any gain ``K``,
    symmetric and positive under rounding. ``T = P − K P[0, :]``; only the entries the
    packed result needs."""
    k0, k1, k2, k3 = K[0, j], K[1, j], K[2, j], K[3, j]
    p00, p01, p02, p03 = P[0, j], P[1, j], P[2, j], P[3, j]
    t00 = p00 - k0 * p00
    t01 = p01 - k0 * p01
    t02 = p02 - k0 * p02
    t03 = p03 - k0 * p03
    t10 = p01 - k1 * p00
    t11 = P[4, j] - k1 * p01
    t12 = P[5, j] - k1 * p02
    t13 = P[6, j] - k1 * p03
    t20 = p02 - k2 * p00
    t22 = P[7, j] - k2 * p02
    t23 = P[8, j] - k2 * p03
    t30 = p03 - k3 * p00
    t33 = P[9, j] - k3 * p03
    P[0, j] = t00 - t00 * k0 + k0 * R * k0
    P[1, j] = t01 - t00 * k1 + k0 * R * k1
    P[2, j] = t02 - t00 * k2 + k0 * R * k2
    P[3, j] = t03 - t00 * k3 + k0 * R * k3
    P[4, j] = t11 - t10 * k1 + k1 * R * k1
    P[5, j] = t12 - t10 * k2 + k1 * R * k2
    P[6, j] = t13 - t10 * k3 + k1 * R * k3
    P[7, j] = t22 - t20 * k2 + k2 * R * k2
    P[8, j] = t23 - t20 * k3 + k2 * R * k3
    P[9, j] = t33 - t30 * k3 + k3 * R * k3


@numba.njit(inline="always", **_JIT)
def _update(z, R, floor, x, P, PD, mu, w, K):
    """Steps 3 and 4 in place; returns the log predictive density of ``z``."""
    lmax, total = _weigh(z, R, x, P, mu, w)
    return _apply(z, R, floor, x, P, PD, mu, w, lmax, total, K)


@numba.njit(inline="always", **_JIT)
def _copy_branch(x, P, PD, mu, to_x, to_P, to_PD, to_mu):
    """One branch's states, covariances and probabilities into another's arrays."""
    for j in range(mu.shape[0]):
        to_mu[j] = mu[j]
        for a in range(4):
            to_x[a, j] = x[a, j]
        for u in range(10):
            to_P[u, j] = P[u, j]
            to_PD[u, j] = PD[u, j]


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
def _resolve(la, lb, pend, floor, x, P, PD, mu):
    """Decide the pending suspect from the log weights of its branches ("used", "an
    outlier"); merge them into branch 0; True when it was judged an outlier."""
    wa = _decided(1.0 / (1.0 + math.exp(lb - la)))
    _merge(wa, floor, x[0], P[0], PD[0], mu[0], x[1], P[1], PD[1], mu[1])
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
def _merge(wa, floor, xa, Pa, PDa, mua, xb, Pb, PDb, mub):
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
        _merge_cov(j, fa, fb, xa, Pa, xb, Pb)
        if floor[j]:
            _merge_cov(j, fa, fb, xa, PDa, xb, PDb)
        for a in range(4):
            xa[a, j] = fa * xa[a, j] + fb * xb[a, j]
        mua[j] = m


@numba.njit(inline="always", **_JIT)
def _merge_cov(j, fa, fb, xa, Pa, xb, Pb):
    """``Pa_j`` ← the covariance of the two-component mixture (weights fa, fb)."""
    for a in range(4):
        xm = fa * xa[a, j] + fb * xb[a, j]
        for b in range(a, 4):
            xmb = fa * xa[b, j] + fb * xb[b, j]
            u = _U[a, b]
            Pa[u, j] = fa * (Pa[u, j] + (xa[a, j] - xm) * (xa[b, j] - xmb)) + fb * (
                Pb[u, j] + (xb[a, j] - xm) * (xb[b, j] - xmb)
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
def _combine(k, wa, xa, Pa, mua, xb, Pb, mub, prune, tail, ca, cb, keep, out_x, out_var):
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
        ca[j] /= tot
        cb[j] /= tot
        if ca[j] != 0.0 or cb[j] != 0.0:
            keep[n] = j
            n += 1
    for a in range(4):
        s = 0.0
        for i in range(n):
            j = keep[i]
            s += ca[j] * xa[a, j] + cb[j] * xb[a, j]
        out_x[k, a] = s
    for a in range(4):
        s = 0.0
        m = out_x[k, a]
        for i in range(n):
            j = keep[i]
            s += ca[j] * (Pa[_DIAG[a], j] + (xa[a, j] - m) ** 2)
            s += cb[j] * (Pb[_DIAG[a], j] + (xb[a, j] - m) ** 2)
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
def _add_lag(xa, mua, jump, floor, k, out_var):
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
        lag = xa[2, jd + 1] - xa[2, jd]
        out_var[k, 2] += lag * lag / (3.0 if floor[jd] else 12.0)


@numba.njit(inline="always", **_JIT)
def _predicted(R, prune, x, P, mu):
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
            zhat += mu[j] * x[0, j]
            wsum += mu[j]
    zhat /= wsum
    smix = 0.0
    for j in range(r):
        if mu[j] >= prune[j] or j == jbest:
            smix += mu[j] * (P[0, j] + R + (x[0, j] - zhat) ** 2)
    return zhat, smix / wsum, jbest


@numba.njit(inline="always", **_JIT)
def _suspect_weighed(z, R, gate2, jump, jump_end, x, P, jbest, lw, lmax, total, lout, far):
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
    y = z - x[0, jbest]
    if y * y > gate2 * (P[0, jbest] + R):
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
def _burst_goes_on(z, R, gate2, la, lb, outlier_sd, outlier_tail, prune, xb, Pb, mub, lw):
    """Hold ``z`` as the next sample of a burst? Returns the log weight it adds to the
    "outliers" branch if so, NaN if not. Held when ``z`` is beyond the gate of that
    branch's most probable model and "all used" (log weight ``la`` with ``z``) is not
    already decided against both readings of that branch (log weight ``lb`` without
    ``z``): ``z`` held as an outlier too, or ``z`` used after the held outliers. A load
    change that has just started keeps moving away from that branch's prediction, but "all
    used" explains it at once; without the second condition a spike soon after the start
    of a change was held with the change's first samples and used with them."""
    zb, sb, jb = _predicted(R, prune, xb, Pb, mub)
    yb = z - xb[0, jb]
    if yb * yb <= gate2 * (Pb[0, jb] + R):
        return math.nan
    so2 = outlier_sd * outlier_sd + sb
    added = _LOG_BURST_GO_ON + _outlier_log_density(z - zb, so2, outlier_tail)
    lmax, total = _weigh(z, R, xb, Pb, mub, lw)
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
    phi, q, qd = _packed_tables(PHI, Q, QD)
    # the branches in the kernel's layout (model index last), written back at the end
    X, PV, PDV = _packed_state(x, P, PD)
    x0 = np.empty((4, r))
    P0 = np.empty((10, r))
    PD0 = np.empty((10, r))
    cbar = np.empty(r)
    tot = np.empty(r)
    W = np.empty((r, r))
    K = np.empty((4, r))
    lj = np.empty(r)
    lw = np.empty(r)
    ca = np.empty(r)
    cb = np.empty(r)
    keep = np.empty(r, np.int64)
    other_x = np.empty((1, 4))
    other_var = np.empty((1, 4))
    xa, Pa, PDa, mua = X[0], PV[0], PDV[0], mu[0]
    xb, Pb, PDb, mub = X[1], PV[1], PDV[1], mu[1]
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
        _interact_predict(
            it, phi, q, qd, PI, prune, floor, xa, Pa, PDa, mua, cbar, tot, W, x0, P0, PD0
        )
        if pending:
            _interact_predict(
                it, phi, q, qd, PI, prune, floor, xb, Pb, PDb, mub, cbar, tot, W, x0, P0, PD0
            )
        # prediction of the measurement (branch "used": the suspect is undecided)
        zhat, smix, jbest = _predicted(R, prune, xa, Pa, mua)
        # the innovation and its variance under the most probable model: χ²(1) when
        # that model is right (the mixture's own variance includes the spread of the
        # improbable models and would make the NIS too small)
        out_y[k] = zk - xa[0, jbest]
        out_s[k] = Pa[0, jbest] + R
        if math.isnan(zk):
            flag |= FLAG_OUT_UNUSED
            out_ll[k] = 0.0
            # nothing to decide a pending suspect with: weigh by the suspects alone
            held = int(pend[0])
            if pending and _resolve(
                log_1m_eps + pend[1], log_eps + pend[2], pend, floor, x, P, PD, mu
            ):
                rejected += held
                flag |= FLAG_OUT_REJECTED_BEFORE
        else:
            if pending:
                before = _logaddexp(log_1m_eps + pend[1], log_eps + pend[2])
                lmax, total = _weigh(zk, R, xa, Pa, mua, lj)
                added = math.nan
                if pend[0] < _BURST_MAX and pend[7] == 0.0:
                    added = _burst_goes_on(
                        zk, R, gate2, log_1m_eps + pend[1] + lmax + math.log(total),
                        log_eps + pend[2], outlier_sd, outlier_tail, prune, xb, Pb, mub, lw,
                    )  # fmt: skip
                if not math.isnan(added):
                    # both branches go on: "used" takes the sample, "outliers" holds it
                    # as the next of a burst; a sample that comes back decides
                    pend[1] += _apply(zk, R, floor, xa, Pa, PDa, mua, lj, lmax, total, K)
                    pend[2] += added
                    pend[0] += 1.0
                    flag |= FLAG_OUT_SUSPECT
                    out_ll[k] = _logaddexp(log_1m_eps + pend[1], log_eps + pend[2]) - before
                else:
                    # weigh "suspects used" against "suspects outliers" by every sample
                    # since the first; their joint log density, less what the held rows
                    # entered, is this row's share of the likelihood
                    la = log_1m_eps + pend[1]
                    la += _apply(zk, R, floor, xa, Pa, PDa, mua, lj, lmax, total, K)
                    lb = log_eps + pend[2] + _update(zk, R, floor, xb, Pb, PDb, mub, lj, K)
                    out_ll[k] = _logaddexp(la, lb) - before
                    held = int(pend[0])
                    if pend[7] < _DEFER_MAX and _odds_open(la, lb):
                        # both branches have used this sample; the next one weighs in too
                        pend[1] = la - log_1m_eps
                        pend[2] = lb - log_eps
                        pend[7] += 1.0
                        flag |= FLAG_OUT_DEFERRED
                    elif _resolve(la, lb, pend, floor, X, PV, PDV, mu):
                        rejected += held
                        flag |= FLAG_OUT_REJECTED_BEFORE
            else:
                lmax, total = _weigh(zk, R, xa, Pa, mua, lj)
                so2 = outlier_sd * outlier_sd + smix
                # beyond the gate in noise σ: only there do the outlier's odds count
                # (on a held load almost no sample is, and the logarithms are spared)
                far = out_y[k] ** 2 > gate2 * R
                lout = _outlier_log_density(zk - zhat, so2, outlier_tail) if far else math.nan
                taken_back = False
                suspect = _suspect_weighed(
                    zk, R, gate2, jump, jump_end, xa, Pa, jbest, lj, lmax + log_1m_eps, total,
                    log_eps + lout, far,
                )  # fmt: skip
                if suspect and not far:
                    lout = _outlier_log_density(zk - zhat, so2, outlier_tail)
                if suspect and hindsight:
                    # was the sample before this one the outlier? ("before": that sample
                    # left out, this one used, from the prediction kept before it)
                    _copy_branch(X[2], PV[2], PDV[2], mu[2], xb, Pb, PDb, mub)
                    _interact_predict(
                        it, phi, q, qd, PI, prune, floor, xb, Pb, PDb, mub, cbar, tot, W, x0, P0,
                        PD0,
                    )  # fmt: skip
                    lmax2, total2 = _weigh(zk, R, xb, Pb, mub, lw)
                    l_before = log_eps + pend[6] + lmax2 + math.log(total2)
                    l_both = log_1m_eps + pend[5] + lmax + math.log(total)
                    l_this = log_1m_eps + pend[5] + log_eps + lout
                    if l_before > _logaddexp(l_both, l_this):
                        # the likeliest reading: both samples used, merged by their odds
                        # (hard beyond 19 to 1, as a suspect's decision)
                        wb = _decided(1.0 / (1.0 + math.exp(l_both - l_before)))
                        _apply(zk, R, floor, xb, Pb, PDb, mub, lw, lmax2, total2, K)
                        if wb < 1.0:
                            _apply(zk, R, floor, xa, Pa, PDa, mua, lj, lmax, total, K)
                            _merge(1.0 - wb, floor, xa, Pa, PDa, mua, xb, Pb, PDb, mub)
                        else:
                            _copy_branch(xb, Pb, PDb, mub, xa, Pa, PDa, mua)
                        out_ll[k] = _logaddexp(l_before, l_both) - pend[5]
                        flag |= FLAG_OUT_REJECTED_BEFORE
                        rejected += 1
                        pend[3] = 0.0
                        taken_back = True
                        suspect = False
                if suspect:
                    # suspect: keep the prediction as the "outlier" branch, then update
                    _copy_branch(xa, Pa, PDa, mua, xb, Pb, PDb, mub)
                    pend[2] = lout
                    pend[1] = _apply(zk, R, floor, xa, Pa, PDa, mua, lj, lmax, total, K)
                    pend[0] = 1.0
                    flag |= FLAG_OUT_SUSPECT
                    out_ll[k] = _logaddexp(log_1m_eps + pend[1], log_eps + pend[2])
                elif not taken_back:
                    kept = keep_before and far
                    if kept:
                        # far enough out to be a spike its prediction could not tell: keep
                        # that prediction, for the next sample to weigh it in hindsight
                        _copy_branch(xa, Pa, PDa, mua, X[2], PV[2], PDV[2], mu[2])
                        pend[4] = 1.0
                        pend[6] = lout
                    out_ll[k] = _apply(zk, R, floor, xa, Pa, PDa, mua, lj, lmax, total, K)
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
                k, wa if shown_used else 0.0, xa, Pa, mua, xb, Pb, mub, prune, tail, ca, cb,
                keep, out_x, out_var,
            )  # fmt: skip
            _combine(
                0, 0.0 if shown_used else 1.0, xa, Pa, mua, xb, Pb, mub, prune, tail, ca, cb,
                keep, other_x, other_var,
            )  # fmt: skip
            _reach_other(k, out_x, out_var, other_x, other_var)
        else:
            _combine(k, 1.0, xa, Pa, mua, xb, Pb, mub, prune, tail, ca, cb, keep, out_x, out_var)
        if jump > 1:
            _add_lag(xa, mua, jump, floor, k, out_var)
        out_flag[k] = flag
        for j in range(r):
            out_mu[k, j] = mua[j]
        if keep_log:
            for j in range(r):
                for a in range(4):
                    log_x[k, j, a] = xa[a, j]
                    for b in range(4):
                        log_P[k, j, a, b] = Pa[_U[a, b], j]
    _unpacked_state(X, PV, PDV, x, P, PD)
    return rejected


@numba.njit(**_JIT)
def _packed_tables(PHI, Q, QD):
    """The model tables in the kernel's layout, model index last: ``Φ`` as ``(nt, 16, r)``
    (row ``4a + b``), ``Q`` and ``QD`` packed as ``(nt, 10, r)`` (row ``_U[a, b]``)."""
    nt, r = PHI.shape[0], PHI.shape[1]
    phi = np.empty((nt, 16, r))
    q = np.empty((nt, 10, r))
    qd = np.empty((nt, 10, r))
    for t in range(nt):
        for j in range(r):
            for a in range(4):
                for b in range(4):
                    phi[t, 4 * a + b, j] = PHI[t, j, a, b]
                    if b >= a:
                        q[t, _U[a, b], j] = Q[t, j, a, b]
                        qd[t, _U[a, b], j] = QD[t, j, a, b]
    return phi, q, qd


@numba.njit(**_JIT)
def _packed_state(x, P, PD):
    """The branches' states ``(nb, r, 4)`` and covariances ``(nb, r, 4, 4)`` in the
    kernel's layout: ``(nb, 4, r)`` and packed ``(nb, 10, r)``."""
    nb, r = x.shape[0], x.shape[1]
    X = np.empty((nb, 4, r))
    PV = np.empty((nb, 10, r))
    PDV = np.empty((nb, 10, r))
    for c in range(nb):
        for j in range(r):
            for a in range(4):
                X[c, a, j] = x[c, j, a]
                for b in range(a, 4):
                    PV[c, _U[a, b], j] = P[c, j, a, b]
                    PDV[c, _U[a, b], j] = PD[c, j, a, b]
    return X, PV, PDV


@numba.njit(**_JIT)
def _unpacked_state(X, PV, PDV, x, P, PD):
    """`_packed_state` undone, into the caller's arrays (both triangles written)."""
    for c in range(x.shape[0]):
        for j in range(x.shape[1]):
            for a in range(4):
                x[c, j, a] = X[c, a, j]
                for b in range(4):
                    P[c, j, a, b] = PV[c, _U[a, b], j]
                    PD[c, j, a, b] = PDV[c, _U[a, b], j]


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
