"""What the window finders share: the noise of one sample, the ringing period and the
stretches of a record where the cell moves.

1. the noise σ of one sample, from the robust spread (1.4826·MAD) of first differences
   divided by √2 (white noise; a smooth signal barely moves from one sample to the next
   at the rates a cell is sampled);
2. the ringing period P, from the largest peak of the spectrum of the first differences
   (the ringing dominates what changes fast);
3. active stretches: where the moving standard deviation of the displacement over 2P is
   above 4σ, stretches closer than 2P merged.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

__all__ = ["ACTIVE_SNR", "Activity", "WindowNotFoundError", "find_activity"]

ACTIVE_SNR = 4.0  # moving standard deviation above this many σ: ringing or moving
_MIN_SAMPLES = 100


class WindowNotFoundError(ValueError):
    """No window for the test could be told apart in the record; the message says why."""


@dataclass(frozen=True)
class Activity:
    """A record's finite samples and where they move.

    Attributes:
        t, x: the finite samples (s, m), shape (n,).
        sigma: the noise σ of one sample (m).
        period: the ringing period (samples).
        w: the moving window (samples, about 2P).
        stretches: ``[start, stop)`` of each active stretch, in order.
    """

    t: np.ndarray
    x: np.ndarray
    sigma: float
    period: float
    w: int
    stretches: list[tuple[int, int]]

    @property
    def n(self) -> int:
        return int(self.x.size)

    def rest_after(self, i: int) -> int:
        """Where the rest after stretch ``i`` ends: the next stretch's start or the end."""
        return self.stretches[i + 1][0] if i + 1 < len(self.stretches) else self.n

    def rest_before(self, i: int) -> int:
        """Where the rest before stretch ``i`` starts: the previous stretch's end or 0."""
        return self.stretches[i - 1][1] if i > 0 else 0

    def dt(self) -> float:
        return float(np.median(np.diff(self.t)))

    def nothing_moves(self) -> str:
        return f"nothing moves above {ACTIVE_SNR:g}× the noise ({self.sigma:.3g} m)"


def _moving_std(x: np.ndarray, w: int) -> np.ndarray:
    """Standard deviation of x over w samples centred on each sample, shape (n,)."""
    c1 = np.concatenate(([0.0], np.cumsum(x - x[0])))
    c2 = np.concatenate(([0.0], np.cumsum((x - x[0]) ** 2)))
    n = x.size
    lo = np.clip(np.arange(n) - w // 2, 0, n - w)
    hi = lo + w
    mean = (c1[hi] - c1[lo]) / w
    var = (c2[hi] - c2[lo]) / w - mean**2
    return np.sqrt(np.maximum(var, 0.0))


def _runs(mask: np.ndarray) -> list[tuple[int, int]]:
    """[start, stop) of each run of True in ``mask``."""
    edges = np.flatnonzero(np.diff(np.concatenate(([0], mask.view(np.int8), [0]))))
    return list(zip(edges[::2].tolist(), edges[1::2].tolist(), strict=True))


def find_activity(time_s: np.ndarray, displacement_m: np.ndarray, test: str) -> Activity:
    """The noise, the ringing period and the active stretches of a record (see the
    module); ``test`` names what is looked for in the refusal.

    Raises:
        WindowNotFoundError: fewer than 100 finite samples.
    """
    t = np.asarray(time_s, dtype=np.float64)
    x = np.asarray(displacement_m, dtype=np.float64)
    ok = np.isfinite(x)
    t, x = t[ok], x[ok]
    n = x.size
    if n < _MIN_SAMPLES:
        raise WindowNotFoundError(f"only {n} samples; a {test} needs {_MIN_SAMPLES} or more")
    d = np.diff(x)
    sigma_d = 1.4826 * float(np.median(np.abs(d - np.median(d))))
    span = float(np.ptp(x))
    sigma = max(sigma_d / math.sqrt(2.0), 1e-9 * span, np.finfo(float).tiny)
    spectrum = np.abs(np.fft.rfft(d - d.mean()))
    k = int(np.argmax(spectrum[1:])) + 1 if spectrum.size > 1 else 1
    period = max(2.0, d.size / k)  # samples
    w = int(min(max(8, round(2.0 * period)), max(8, n // 10)))
    active = _moving_std(x, w) > ACTIVE_SNR * sigma
    merged: list[tuple[int, int]] = []
    for a, b in _runs(active):
        if merged and a - merged[-1][1] < w:
            merged[-1] = (merged[-1][0], b)
        else:
            merged.append((a, b))
    return Activity(t, x, sigma, period, w, merged)
