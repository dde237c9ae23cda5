"""Is the model still right? Normalised innovation squared (NIS) over windows.

With a correct linear-Gaussian model, each innovation ``y`` of a scalar measurement
divided by its predicted variance ``S`` gives ``NIS = y²/S ~ χ²(1)``, independent from
sample to sample; the mean of ``N`` of them is ``χ²(N)/N``. A window mean outside the
two-sided band of that law at the chosen level says the cell no longer behaves like
its identified plant (Bar-Shalom, Li, Kirubarajan, "Estimation with Applications to
Tracking and Navigation", 2001, §5.4).

Samples the observer did not use as its model predicts (suspect, load jump, missing) are
left out: they are counted by the observer itself.
"""

from __future__ import annotations

import numpy as np
import scipy.special

from estimator.errors import ParameterError
from estimator.observer import FLAG_DEFERRED, FLAG_JUMP, FLAG_MISSING, FLAG_REJECTED

__all__ = ["nis_band", "windowed_nis"]

_UNUSED = FLAG_REJECTED | FLAG_DEFERRED | FLAG_JUMP | FLAG_MISSING


def nis_band(count: np.ndarray | int, level: float = 0.95) -> tuple[np.ndarray, np.ndarray]:
    """Two-sided band of the mean of ``count`` independent χ²(1) values.

    Returns ``(low, high)`` with the shape of ``count``; NaN where ``count`` is 0.
    """
    if not 0.0 < level < 1.0:
        raise ParameterError(f"level = {level!r}: must be between 0 and 1, e.g. 0.95")
    n = np.asarray(count, dtype=float)
    tail = (1.0 - level) / 2.0
    # The χ²(n) quantile as scipy.stats.chi2.ppf computes it, 2·P⁻¹(n/2, p) with the
    # inverse regularised lower incomplete gamma function, without the half second
    # that importing scipy.stats costs every command.
    with np.errstate(invalid="ignore", divide="ignore"):
        low = 2.0 * scipy.special.gammaincinv(n / 2.0, tail) / n
        high = 2.0 * scipy.special.gammaincinv(n / 2.0, 1.0 - tail) / n
    return low, high


def windowed_nis(estimates: np.ndarray, window: int) -> tuple[np.ndarray, np.ndarray]:
    """Mean NIS over consecutive, non-overlapping windows of ``window`` samples.

    Args:
        estimates: an ``ESTIMATE_DTYPE`` array from the observer.
        window: samples per window (a trailing partial window is dropped).

    Returns:
        ``(mean_nis, used)``: per window, the mean NIS of the samples the observer
        used, and how many it used (NaN mean where none).
    """
    if not (isinstance(window, int) and window >= 1):
        raise ParameterError(f"window = {window!r}: must be an integer >= 1 samples")
    nis = np.where(estimates["flags"] & _UNUSED, np.nan, estimates["nis"])
    full = nis.size // window * window
    blocks = nis[:full].reshape(-1, window)
    used = np.sum(~np.isnan(blocks), axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = np.nansum(blocks, axis=1) / used
    return mean, used
