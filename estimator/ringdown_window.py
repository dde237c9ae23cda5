"""Where the ring-down is in a whole record: `find_ringdown_window`.

A bench record for a ring-down holds more than the free decay: the cell at rest, loaded,
then released (or tapped), ringing, and at rest again. ``identify --test ringdown`` needs
the free decay itself. This finds it from the data alone:

1. the noise σ of one sample, from the robust spread (1.4826·MAD) of first differences
   divided by √2 (white noise; a smooth signal barely moves from one sample to the next
   at the rates a cell is sampled);
2. the ringing period P, from the largest peak of the spectrum of the first differences
   (the ringing dominates what changes fast);
3. active stretches: where the moving standard deviation of the displacement over 2P is
   above 4σ, stretches closer than 2P merged. Each active stretch followed by a quiet
   one is a candidate decay toward the level of that quiet stretch; the candidate whose
   largest excursion from that level is largest wins (the last one when several are
   within 10 % of each other: in a rest–load–release record that is the release);
4. the window: from the start of that stretch (a little of the plateau before it is
   harmless: the identification starts just past the largest excursion) until the
   amplitude has reached the noise, plus half as long again at rest so that the
   identification sees the rest level and the noise at its end.

It refuses (`RingdownNotFoundError`, one line) when no stretch rings above 20σ (the
identification's own threshold for a decay) or none comes back to rest before the record
ends. Numbers in, numbers out (used by ``forcelens identify``).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

__all__ = ["RingdownNotFoundError", "RingdownWindow", "find_ringdown_window"]

_ACTIVE_SNR = 4.0  # moving standard deviation above this many σ: ringing or moving
_MIN_DECAY_SNR = 20.0  # as estimator.identify: a decay's excursion, in σ
_TIE = 0.10  # excursions within 10 % of the largest are ties; the last one wins
_TAIL = 0.5  # rest after the decay, as a share of the decay's length
_MIN_SAMPLES = 100


class RingdownNotFoundError(ValueError):
    """No free decay could be told apart in the record; the message says why."""


@dataclass(frozen=True)
class RingdownWindow:
    """The free decay found in a record (times in s, levels in m).

    Attributes:
        start_s, end_s: the window to identify from.
        decay_end_s: where the ringing has fallen to the noise.
        rest_m: the level the decay settles to.
        excursion_m: the largest distance from ``rest_m`` in the window.
        noise_m: the noise σ of one sample.
        period_s: the ringing period seen in the record.
        candidates: the number of decays seen (the chosen one included).
    """

    start_s: float
    end_s: float
    decay_end_s: float
    rest_m: float
    excursion_m: float
    noise_m: float
    period_s: float
    candidates: int

    def text(self) -> str:
        """One line saying what was found and how to choose another window."""
        other = f" ({self.candidates - 1} other decay(s) seen)" if self.candidates > 1 else ""
        return (
            f"window found: {self.start_s:.6g} s to {self.end_s:.6g} s, the free decay "
            f"of {self.excursion_m:.3g} m to rest at {self.rest_m:.6g} m, ringing until "
            f"{self.decay_end_s:.6g} s{other}; --from/--to choose another"
        )


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


def find_ringdown_window(time_s: np.ndarray, displacement_m: np.ndarray) -> RingdownWindow:
    """The free decay in a whole record (arrays of shape (n,), s and m); see the module.

    Raises:
        RingdownNotFoundError: no decay that rings above 20σ and comes back to rest.
    """
    t = np.asarray(time_s, dtype=np.float64)
    x = np.asarray(displacement_m, dtype=np.float64)
    ok = np.isfinite(x)
    t, x = t[ok], x[ok]
    n = x.size
    if n < _MIN_SAMPLES:
        raise RingdownNotFoundError(f"only {n} samples; a ring-down needs {_MIN_SAMPLES} or more")
    d = np.diff(x)
    sigma_d = 1.4826 * float(np.median(np.abs(d - np.median(d))))
    span = float(np.ptp(x))
    sigma = max(sigma_d / math.sqrt(2.0), 1e-9 * span, np.finfo(float).tiny)
    spectrum = np.abs(np.fft.rfft(d - d.mean()))
    k = int(np.argmax(spectrum[1:])) + 1 if spectrum.size > 1 else 1
    period = max(2.0, d.size / k)  # samples
    w = int(min(max(8, round(2.0 * period)), max(8, n // 10)))
    active = _moving_std(x, w) > _ACTIVE_SNR * sigma
    runs = _runs(active)
    merged: list[tuple[int, int]] = []
    for a, b in runs:
        if merged and a - merged[-1][1] < w:
            merged[-1] = (merged[-1][0], b)
        else:
            merged.append((a, b))
    candidates = []
    for i, (a, b) in enumerate(merged):
        next_start = merged[i + 1][0] if i + 1 < len(merged) else n
        if next_start - b < w:
            continue  # never back to rest before the next movement or the end
        rest = float(np.median(x[b : min(next_start, b + 5 * w)]))
        excursion = float(np.max(np.abs(x[a:b] - rest)))
        candidates.append((a, b, next_start, rest, excursion))
    strong = [c for c in candidates if c[4] >= _MIN_DECAY_SNR * sigma]
    if not strong:
        if not merged:
            why = f"nothing moves above {_ACTIVE_SNR:g}× the noise ({sigma:.3g} m)"
        elif not candidates:
            why = "the record ends while the cell still rings or moves"
        else:
            best = max(c[4] for c in candidates)
            why = (
                f"the largest decay is {best:.3g} m, {best / sigma:.1f}× the noise "
                f"({sigma:.3g} m); at least {_MIN_DECAY_SNR:g}× is needed"
            )
        raise RingdownNotFoundError(f"no ring-down found ({why})")
    top = max(c[4] for c in strong)
    a, b, next_start, rest, excursion = [c for c in strong if c[4] >= (1 - _TIE) * top][-1]
    start = max(0, a - 1)
    stop = min(next_start - 1, n - 1, b + max(w, int(_TAIL * (b - a))))
    dt = float(np.median(np.diff(t)))
    return RingdownWindow(
        start_s=float(t[start]),
        end_s=float(t[stop]),
        decay_end_s=float(t[min(b, n - 1)]),
        rest_m=rest,
        excursion_m=excursion,
        noise_m=sigma,
        period_s=period * dt,
        candidates=len(strong),
    )
