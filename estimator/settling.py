"""When may a reading be taken? Settling rules on a force estimate.

Two pieces, both plain functions of arrays:

* :func:`time_to_settle` — after a load change at ``t0``, how long until a signal
  enters a band around its target and stays there (the usual settling-time
  definition; 2 % of the step is common practice);
* :func:`is_settled` — the live rule: over the last hold time, every estimate lies
  within ±band of their mean, with band = max(fraction·|mean|, the expanded
  uncertainty U = 2u, a floor).
"""

from __future__ import annotations

import math

import numpy as np

from estimator.errors import ParameterError

__all__ = ["is_settled", "settling_band_n", "time_to_settle"]


def time_to_settle(
    time_s: np.ndarray,
    signal: np.ndarray,
    t0_s: float,
    t_end_s: float,
    target: float,
    band: float,
) -> float:
    """Seconds from ``t0_s`` until ``signal`` enters ``target ± band`` for good.

    Only samples in ``[t0_s, t_end_s)`` count. Returns NaN when the signal is still
    outside the band at the last sample before ``t_end_s``; 0.0 when it never leaves.
    """
    if not band > 0:
        raise ParameterError(f"band = {band!r}: must be > 0 (same unit as the signal)")
    sel = (time_s >= t0_s) & (time_s < t_end_s)
    t, y = time_s[sel], signal[sel]
    if t.size == 0:
        return math.nan
    outside = np.nonzero(~(np.abs(y - target) <= band))[0]
    if outside.size == 0:
        return 0.0
    last = int(outside[-1])
    if last == t.size - 1:
        return math.nan
    return float(t[last + 1] - t0_s)


def settling_band_n(
    force_n: float, u_n: float, fraction: float = 0.02, floor_n: float = 0.0
) -> float:
    """Half-width of the live settling band, N: max(fraction·|F|, 2u, floor)."""
    return max(fraction * abs(force_n), 2.0 * u_n, floor_n)


def is_settled(
    force_n: np.ndarray, u_n: float, fraction: float = 0.02, floor_n: float = 0.0
) -> bool:
    """True when every value of the recent window ``force_n`` is inside the band.

    ``force_n`` holds the estimates of the last hold time (oldest first); ``u_n`` is
    the current standard uncertainty. An empty window is not settled.
    """
    if force_n.size == 0 or not np.all(np.isfinite(force_n)):
        return False
    centre = float(np.mean(force_n))
    band = settling_band_n(centre, u_n, fraction, floor_n)
    return bool(np.max(np.abs(force_n - centre)) <= band)
