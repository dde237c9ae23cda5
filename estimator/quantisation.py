"""What averaging cannot remove from quantised readings: the bias of a rounding quantiser
whose input carries Gaussian noise.

A reading is ``Q(x + n)``, ``Q`` rounding to the nearest multiple of the step ``Δ`` and
``n`` Gaussian noise of standard deviation ``σ``. The observer treats the quantisation
error as white noise of variance ``Δ²/12``, which is right when the noise spans several
steps; the average of many readings of a constant ``x`` then converges to ``x``. When the
noise is narrower than about half a step it does not: the mean reading is ``x + b(x)``
with a bias that is periodic in ``x`` (period ``Δ``). Its Fourier series follows from the
characteristic function of the noise (the quantisation theorem; Widrow & Kollár,
*Quantization Noise*, Cambridge 2008, from memory ch. 4–5):

    b(x) = Σ_{m≥1} (−1)^m (Δ/(π m)) · exp(−2π² m² σ²/Δ²) · sin(2π m x/Δ)

For a level ``x`` not known within a step (uniform over one step), the standard
uncertainty of that bias is its root mean square,

    u_b² = Σ_{m≥1} (Δ/(π m))² · exp(−4π² m² σ²/Δ²) / 2

which is ``Δ²/12`` without noise (the rectangular distribution of one step, JCGM
100:2008, F.2.2.1) and falls below 10⁻³ Δ once ``σ > 0.55 Δ``. A test checks it against
the mean reading integrated directly with `scipy.stats.norm`.
"""

from __future__ import annotations

import math

__all__ = ["residual_bias_sd_m"]

_TERMS = 256  # terms fall as exp(−4π²m²σ²/Δ²)/m²: 256 reach Δ²/12 within 0.2 % (σ → 0)


def residual_bias_sd_m(step_m: float, noise_m: float) -> float:
    """The standard uncertainty ``u_b`` (m) of the quantiser's bias (see the module).

    Args:
        step_m: the quantisation step Δ (m), ≥ 0; 0 means no quantisation (returns 0).
        noise_m: the standard deviation σ (m) of the Gaussian noise before it, ≥ 0.
    """
    if not (math.isfinite(step_m) and step_m >= 0.0):
        raise ValueError(f"step_m = {step_m!r}: must be a finite number >= 0")
    if not (math.isfinite(noise_m) and noise_m >= 0.0):
        raise ValueError(f"noise_m = {noise_m!r}: must be a finite number >= 0")
    if step_m == 0.0:
        return 0.0
    if noise_m == 0.0:
        return step_m / math.sqrt(12.0)  # the series' sum, Σ 1/m² = π²/6
    ratio = noise_m / step_m
    total = 0.0
    for m in range(1, _TERMS + 1):
        exponent = 4.0 * math.pi**2 * m * m * ratio * ratio
        if exponent > 745.0:  # exp underflows to 0 from here on
            break
        total += math.exp(-exponent) / (2.0 * (math.pi * m) ** 2)
    return step_m * math.sqrt(total)
