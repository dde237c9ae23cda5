"""Where the load step is in a whole record: `find_step_window`.

A bench record for a step test holds more than the step: the cell at rest, the step,
the response settling at the new level, and often more (the load taken off again, other
steps). ``identify --test step`` needs one step from rest to a settled new level. This
finds it from the data alone, over the active stretches of
`estimator.record_windows.activity`:

1. each active stretch with at least 2P at rest before and after it is a candidate step,
   from the level before (median of up to 10P of rest before it) to the level after
   (median of up to 10P of rest after it);
2. the candidate with the largest level change wins (the first of those within 10 % of
   it: in a rest–load–release record that is the loading, where the cell starts from
   rest at its zero);
3. the window: from as long before the stretch as the stretch lasts (at least 2P, within
   the rest before it) to as long again after it (at least 2P, within the rest after it),
   so that the fit sees the initial level, the whole response and a settled final level.

It refuses (`WindowNotFoundError`, one line, with the largest step's window when there
is one) when no candidate changes the level by 20σ or more (the step fit itself wants
10σ) or none has rest on both sides.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from estimator.record_windows.activity import ACTIVE_SNR, WindowNotFoundError, find_activity

__all__ = ["StepWindow", "find_step_window"]

_MIN_STEP_SNR = 20.0  # a step's level change, in σ
_TIE = 0.10  # changes within 10 % of the largest are ties; the first one wins
_LEVEL_PERIODS = 5  # the levels are medians of up to this many moving windows (2P each)


@dataclass(frozen=True)
class StepWindow:
    """The load step found in a record (times in s, levels in m).

    Attributes:
        start_s, end_s: the window to identify from.
        moves_s, settled_s: the first sample more than 4σ off the level before, and the
            sample after the last one more than 4σ off the level after.
        before_m, after_m: the levels before and after the step.
        noise_m: the noise σ of one sample.
        candidates: the number of steps seen (the chosen one included).
    """

    start_s: float
    end_s: float
    moves_s: float
    settled_s: float
    before_m: float
    after_m: float
    noise_m: float
    candidates: int

    def text(self) -> str:
        """One line saying what was found and how to choose another window."""
        other = f" ({self.candidates - 1} other step(s) seen)" if self.candidates > 1 else ""
        return (
            f"window found: {self.start_s:.6g} s to {self.end_s:.6g} s, the step of "
            f"{self.after_m - self.before_m:+.3g} m from {self.before_m:.6g} m, moving from "
            f"{self.moves_s:.6g} s, settled by {self.settled_s:.6g} s{other}; --from/--to "
            "choose another"
        )


def find_step_window(time_s: np.ndarray, displacement_m: np.ndarray) -> StepWindow:
    """The load step in a whole record (arrays of shape (n,), s and m); see the module.

    Raises:
        WindowNotFoundError: no level change of 20σ or more with rest on both sides.
    """
    act = find_activity(time_s, displacement_m, "step")
    t, x, w, sigma = act.t, act.x, act.w, act.sigma
    reach = _LEVEL_PERIODS * w
    candidates = []
    for i, (a, b) in enumerate(act.stretches):
        rest_from, rest_to = act.rest_before(i), act.rest_after(i)
        if a - rest_from < w or rest_to - b < w:
            continue  # no rest before the step, or none after it
        before = float(np.median(x[max(rest_from, a - reach) : a]))
        after = float(np.median(x[b : min(rest_to, b + reach)]))
        margin = max(w, b - a)
        start = max(rest_from, a - margin)
        stop = min(rest_to - 1, b + margin)
        candidates.append((start, a, b, stop, before, after))
    strong = [c for c in candidates if abs(c[5] - c[4]) >= _MIN_STEP_SNR * sigma]
    if not strong:
        if not act.stretches:
            why = act.nothing_moves()
        elif not candidates:
            why = "no movement has the cell at rest both before and after it"
        else:
            start, _, _, stop, before, after = max(candidates, key=lambda c: abs(c[5] - c[4]))
            change = abs(after - before)
            why = (
                f"the largest level change, {t[start]:.6g} s to {t[stop]:.6g} s, is "
                f"{change:.3g} m, {change / sigma:.1f}× the noise ({sigma:.3g} m); at least "
                f"{_MIN_STEP_SNR:g}× is needed"
            )
        raise WindowNotFoundError(f"no step found ({why})")
    top = max(abs(c[5] - c[4]) for c in strong)
    start, a, b, stop, before, after = next(
        c for c in strong if abs(c[5] - c[4]) >= (1 - _TIE) * top
    )
    # within the stretch (its edges are half a moving window wide): the first sample off
    # the level before and the last one off the level after
    off_before = np.flatnonzero(np.abs(x[a:b] - before) > ACTIVE_SNR * sigma)
    off_after = np.flatnonzero(np.abs(x[a:b] - after) > ACTIVE_SNR * sigma)
    moves = a + (int(off_before[0]) if off_before.size else 0)
    settled = a + (int(off_after[-1]) + 1 if off_after.size else b - a - 1)
    return StepWindow(
        start_s=float(t[start]),
        end_s=float(t[stop]),
        moves_s=float(t[moves]),
        settled_s=float(t[min(settled, stop)]),
        before_m=before,
        after_m=after,
        noise_m=sigma,
        candidates=len(strong),
    )
