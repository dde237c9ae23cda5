"""Where the ring-down is in a whole record: `find_ringdown_window`.

A bench record for a ring-down holds more than the free decay: the cell at rest, loaded,
then released (or tapped), ringing, and at rest again. ``identify --test ringdown`` needs
the free decay itself. This finds it from the data alone, over the active stretches of
`estimator.record_windows.activity`:

1. each active stretch followed by at least 2P at rest is a candidate decay toward the
   level of that rest; the candidate whose largest excursion from that level is largest
   wins (the last one when several are within 10 % of each other: in a rest–load–release
   record that is the release);
2. the window: from the start of that stretch (a little of the plateau before it is
   harmless: the identification starts just past the largest excursion) until the
   amplitude has reached the noise, plus half as long again at rest so that the
   identification sees the rest level and the noise at its end.

It refuses (`WindowNotFoundError`, one line, with the largest decay's window when there
is one) when no stretch rings above 20σ (the identification's own threshold for a decay)
or none comes back to rest before the record ends.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from estimator.identify.common import MIN_DECAY_SNR, MIN_SAMPLES
from estimator.record_windows.activity import WindowNotFoundError, find_activity

__all__ = ["RingdownWindow", "find_ringdown_window"]

_TIE = 0.10  # excursions within 10 % of the largest are ties; the last one wins
_TAIL = 0.5  # rest after the decay, as a share of the decay's length


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
            f"window found: {self.start_s:.6g} s to {self.end_s:.6g} s, a free decay about "
            f"the rest position {self.rest_m:.6g} m (largest excursion {self.excursion_m:.3g} "
            f"m), ringing above the noise until {self.decay_end_s:.6g} s and at rest after "
            f"it{other}; --from/--to choose another"
        )


def find_ringdown_window(time_s: np.ndarray, displacement_m: np.ndarray) -> RingdownWindow:
    """The free decay in a whole record (arrays of shape (n,), s and m); see the module.

    Raises:
        WindowNotFoundError: no decay that rings above 20σ, comes back to rest and holds
            the samples a fit needs.
    """
    act = find_activity(time_s, displacement_m, "ring-down")
    t, x, n, w, sigma = act.t, act.x, act.n, act.w, act.sigma
    candidates = []
    for i, (a, b) in enumerate(act.stretches):
        next_start = act.rest_after(i)
        if next_start - b < w:
            continue  # never back to rest before the next movement or the end
        rest = float(np.median(x[b : min(next_start, b + 5 * w)]))
        excursion = float(np.max(np.abs(x[a:b] - rest)))
        stop = min(next_start - 1, n - 1, b + max(w, int(_TAIL * (b - a))))
        candidates.append((max(0, a - 1), b, stop, rest, excursion))
    strong = [c for c in candidates if c[4] >= MIN_DECAY_SNR * sigma]
    if not strong:
        if not act.stretches:
            why = act.nothing_moves()
        elif not candidates:
            why = "the record ends while the cell still rings or moves"
        else:
            start, _, stop, _, best = max(candidates, key=lambda c: c[4])
            why = (
                f"the largest decay, {t[start]:.6g} s to {t[stop]:.6g} s, is {best:.3g} m, "
                f"{best / sigma:.1f}× the noise ({sigma:.3g} m); at least "
                f"{MIN_DECAY_SNR:g}× is needed"
            )
        raise WindowNotFoundError(f"no ring-down found ({why})")
    fit = [c for c in strong if c[2] - c[0] + 1 >= MIN_SAMPLES]
    if not fit:
        start, _, stop, _, _ = max(strong, key=lambda c: c[4])
        raise WindowNotFoundError(
            f"no ring-down found (the largest decay, {t[start]:.6g} s to {t[stop]:.6g} s, "
            f"holds {stop - start + 1} samples and a fit needs {MIN_SAMPLES}: no free "
            "ringing, or too short for this sample rate)"
        )
    top = max(c[4] for c in fit)
    start, b, stop, rest, excursion = [c for c in fit if c[4] >= (1 - _TIE) * top][-1]
    return RingdownWindow(
        start_s=float(t[start]),
        end_s=float(t[stop]),
        decay_end_s=float(t[min(b, n - 1)]),
        rest_m=rest,
        excursion_m=excursion,
        noise_m=sigma,
        period_s=act.period * act.dt(),
        candidates=len(strong),
    )
