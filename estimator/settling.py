"""Settling time of a recorded signal after a load change.

:func:`time_to_settle`: after a load change at ``t0``, how long until a signal enters a
band around its target and stays there (the usual settling-time definition; 2 % of the
step is common practice). The live rule, applied sample by sample as data arrive, is
the settling monitor's (:mod:`estimator.monitor`).
"""

from __future__ import annotations

import math

import numpy as np

from estimator.errors import ParameterError

__all__ = ["time_to_settle"]


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
