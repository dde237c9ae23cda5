"""Live settling monitor: may a reading be taken now?

A :class:`SettlingMonitor` is fed the observer's estimate blocks (``ESTIMATE_DTYPE``)
in stream order and keeps one of five states, each a plain word:

``waiting``
    no estimate has arrived yet.
``changing``
    the force is moving: the newest estimate lies outside the band around the mean of
    the recent estimates, or the observer has just held a suspect sample or taken a
    load jump
    after a load jump (both mean the data disagree with the current estimate).
``settling``
    the newest estimate agrees with the recent ones, but they have not yet stayed
    inside the band for the whole hold time (also the state right after a gap in the
    data or a missing sample: the hold starts again).
``settled``
    every estimate of the last hold time lies inside the band around their mean; the
    reading (that mean, with its expanded uncertainty) may be taken.
``out-of-range``
    the newest estimate lies outside the calibrated force range.

The rule (:class:`SettlingRule`, shown to the user by :meth:`SettlingRule.describe`):

* band half-width ``b = max(band_fraction·|mean|, k·u, band_floor_n)``, where ``mean``
  is the mean of the estimates of the hold window and ``u`` the newest estimate's
  standard uncertainty, so the band is never narrower than the expanded uncertainty
  ``U = k·u`` nor than the absolute floor;
* *enter* ``settled`` when the hold window (the last ``N + 1`` samples,
  ``N = round(hold_s · sample_rate_hz)``, so they span exactly ``hold_s``) is complete
  and every estimate in it lies within ``mean ± b``;
* *leave* ``settled`` when the spread, or the newest estimate's distance from the mean,
  exceeds ``release_factor · b`` (hysteresis), or when the observer holds a sample as a
  possible outlier or its jump model takes over;
* *enter* ``out-of-range`` when the newest estimate is outside
  ``[force_min_n, force_max_n]``; *leave* it when the estimate is back inside by at
  least the band (hysteresis).

A gap in time (``FLAG_GAP``), a missing sample (``FLAG_MISSING``), a load jump
(``FLAG_JUMP``), a sample held as a possible outlier (``FLAG_REJECTED``, or a row whose
decision waits, ``FLAG_DEFERRED``: right after a load change the observer's σ is large,
and a band widened by it must not let the old window pass for settled), a non-finite
estimate or a time that goes back (device restart) starts the hold window again: the
monitor never claims the force stayed steady over a time it did not observe.

Determinism: every decision depends only on the estimates given, and the window sums
are accumulated in a fixed order over a fixed number of columns, so any cutting of the
stream into blocks gives bit-identical states, transitions and readings.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from estimator.errors import ParameterError
from estimator.observer import (
    ESTIMATE_DTYPE,
    FLAG_DEFERRED,
    FLAG_GAP,
    FLAG_JUMP,
    FLAG_MISSING,
    FLAG_REJECTED,
)
from estimator.window_stats import WindowState, window_stats

__all__ = [
    "CHANGING",
    "OUT_OF_RANGE",
    "SETTLED",
    "SETTLING",
    "SETTLING_EVENT",
    "STATES",
    "WAITING",
    "MonitorTrace",
    "Reading",
    "SettlingMonitor",
    "SettlingRule",
    "StateChange",
]

WAITING = "waiting"
CHANGING = "changing"
SETTLING = "settling"
SETTLED = "settled"
OUT_OF_RANGE = "out-of-range"
#: Every state; a state's code in :class:`MonitorTrace` is its position here.
STATES: tuple[str, ...] = (WAITING, CHANGING, SETTLING, SETTLED, OUT_OF_RANGE)
#: Event kind of a state change in a run's event log.
SETTLING_EVENT = "settling"

_CODE = {name: i for i, name in enumerate(STATES)}


def _finite(name: str, value: float, *, low: float, inclusive: bool = True) -> float:
    ok = isinstance(value, int | float) and not isinstance(value, bool) and math.isfinite(value)
    if ok:
        ok = value >= low if inclusive else value > low
    if not ok:
        sign = ">=" if inclusive else ">"
        raise ParameterError(f"{name} = {value!r}: must be a finite number {sign} {low:g}")
    return float(value)


@dataclass(frozen=True)
class SettlingRule:
    """When the force counts as settled.

    Attributes:
        band_fraction: relative half-width of the band, of |mean| (0.02 = 2 %).
        band_floor_n: smallest half-width of the band, N (an absolute floor, e.g. the
            resolution the user cares about near zero load).
        hold_s: how long every estimate must stay inside the band, s.
        k: coverage factor of the expanded uncertainty ``U = k·u`` (2 ≈ 95 %).
        release_factor: once settled, the spread may grow to this many bands before
            the reading stops being valid (≥ 1; hysteresis against flicker).
    """

    band_fraction: float = 0.02
    band_floor_n: float = 0.0
    hold_s: float = 0.02
    k: float = 2.0
    release_factor: float = 1.5

    def __post_init__(self) -> None:
        _finite("band_fraction", self.band_fraction, low=0.0)
        if self.band_fraction >= 1.0:
            raise ParameterError(
                f"band_fraction = {self.band_fraction!r}: must be below 1 (0.02 means 2 %)"
            )
        _finite("band_floor_n", self.band_floor_n, low=0.0)
        _finite("hold_s", self.hold_s, low=0.0, inclusive=False)
        _finite("k", self.k, low=0.0, inclusive=False)
        _finite("release_factor", self.release_factor, low=1.0)

    @classmethod
    def for_range(
        cls, force_min_n: float, force_max_n: float, floor_fraction: float = 0.001, **kwargs: Any
    ) -> SettlingRule:
        """A rule whose floor is ``floor_fraction`` of the calibrated span (0.1 % by default).

        Other fields are passed on (``band_fraction``, ``hold_s``, ...).
        """
        span = _finite("force_max_n", force_max_n, low=-math.inf) - _finite(
            "force_min_n", force_min_n, low=-math.inf
        )
        if not span > 0:
            raise ParameterError(
                f"force_min_n = {force_min_n!r}, force_max_n = {force_max_n!r}: "
                "the calibrated range must have force_min_n < force_max_n"
            )
        _finite("floor_fraction", floor_fraction, low=0.0)
        return cls(band_floor_n=floor_fraction * span, **kwargs)

    def band_n(self, mean_n: float, u_n: float) -> float:
        """Half-width of the band, N, around ``mean_n`` for a standard uncertainty ``u_n``."""
        return max(self.band_fraction * abs(mean_n), self.k * u_n, self.band_floor_n)

    def describe(self, force_unit: tuple[str, float] = ("N", 1.0)) -> str:
        """The rule in one sentence, for the user; its force floor in ``force_unit``
        (symbol, newtons per unit), the unit the screen shows forces in."""
        parts = [f"{_number(self.band_fraction * 100)} % of the reading", f"U (k = {self.k:g})"]
        if self.band_floor_n > 0:
            symbol, size = force_unit
            parts.append(f"{_number(self.band_floor_n / size)} {symbol}")
        return (
            f"settled when every force estimate of the last {_number(self.hold_s * 1e3)} ms "
            f"stays within ±max({', '.join(parts)}) of their mean; the reading stays valid "
            f"until their spread exceeds {_number(self.release_factor)} times that band"
        )


def _number(x: float) -> str:
    return f"{x:.4g}"


@dataclass(frozen=True)
class StateChange:
    """One transition of the monitor.

    Attributes:
        index: stream position of the sample at which it happened (0 = first sample fed).
        time_s: that sample's time, s (the estimate's ``time_s``).
        old: state before.
        new: state from this sample on.
        force_n: mean of the hold window at that sample (the newest estimate if the
            window is empty), N.
        band_n: half-width of the band at that sample, N (NaN if unknown).
    """

    index: int
    time_s: float
    old: str
    new: str
    force_n: float
    band_n: float

    def message(self) -> str:
        """A line for the run log."""
        text = f"{self.old} → {self.new} at {self.time_s:.6f} s"
        if math.isfinite(self.force_n):
            text += f", force {self.force_n:.6g} N"
        if math.isfinite(self.band_n):
            text += f", band ±{self.band_n:.3g} N"
        return text

    def event_fields(self) -> dict[str, Any]:
        """The fields of a ``settling`` event in a run's log."""
        return {
            "index": self.index,
            "time_s": self.time_s,
            "old": self.old,
            "new": self.new,
            "force_n": self.force_n,
            "band_n": self.band_n,
        }


@dataclass(frozen=True)
class Reading:
    """A settled reading.

    Attributes:
        force_n: mean of the estimates of the hold window, N.
        expanded_u_n: expanded uncertainty ``U = k·u`` of the newest estimate, N.
        k: coverage factor.
        valid_since_s: time at which the monitor entered ``settled``, s.
        time_s: time of the newest estimate, s.
        index: stream position of the newest estimate.
    """

    force_n: float
    expanded_u_n: float
    k: float
    valid_since_s: float
    time_s: float
    index: int


@dataclass(frozen=True, eq=False)
class MonitorTrace:
    """Per-sample view of one block, shape (n,) each.

    Attributes:
        state: state code (position in :data:`STATES`), uint8.
        mean_n: mean of the hold window (partial after a restart of the window), N;
            NaN where the sample itself is unusable.
        band_n: half-width of the band, N; NaN where unusable.
    """

    state: np.ndarray
    mean_n: np.ndarray
    band_n: np.ndarray


class SettlingMonitor:
    """Block-fed settling state machine (see the module docstring for the states).

    Args:
        rule: the settling rule.
        sample_rate_hz: nominal sample rate, Hz; the hold window is
            ``N + 1`` samples with ``N = max(1, round(hold_s · sample_rate_hz))``.
        force_min_n, force_max_n: calibrated range, N (profile ``[limits]``); the
            default is unbounded (no ``out-of-range`` state).
    """

    def __init__(
        self,
        rule: SettlingRule,
        sample_rate_hz: float,
        *,
        force_min_n: float = -math.inf,
        force_max_n: float = math.inf,
    ) -> None:
        if not isinstance(rule, SettlingRule):
            raise ParameterError(f"rule = {rule!r}: must be a SettlingRule")
        fs = _finite("sample_rate_hz", sample_rate_hz, low=0.0, inclusive=False)
        if math.isnan(force_min_n) or math.isnan(force_max_n) or not force_min_n < force_max_n:
            raise ParameterError(
                f"force_min_n = {force_min_n!r}, force_max_n = {force_max_n!r}: "
                "need force_min_n < force_max_n (N)"
            )
        self.rule = rule
        self.sample_rate_hz = fs
        self.force_min_n = float(force_min_n)
        self.force_max_n = float(force_max_n)
        #: samples before the newest one in a full hold window
        self.hold_samples = max(1, round(rule.hold_s * fs))
        h = self.hold_samples
        self._window = WindowState(h)
        self._pos = 0  # stream position of the next sample
        self._anchor = 0  # first usable position of the current stretch
        self._t_last = -math.inf
        self._settled = False
        self._oor = False
        self._state = WAITING
        self._valid_since_s: float | None = None
        self._last: tuple[float, float, float, int] | None = None  # mean, u, time, index

    # ------------------------------------------------------------------ queries
    @property
    def state(self) -> str:
        """Current state (one of :data:`STATES`)."""
        return self._state

    @property
    def valid_since_s(self) -> float | None:
        """Time at which the current reading became valid, s; None unless settled."""
        return self._valid_since_s if self._state == SETTLED else None

    @property
    def samples_seen(self) -> int:
        """How many estimates have been fed."""
        return self._pos

    def reading(self) -> Reading | None:
        """The settled reading with its expanded uncertainty, or None when not settled."""
        if self._state != SETTLED or self._last is None or self._valid_since_s is None:
            return None
        mean, u, t, index = self._last
        return Reading(mean, self.rule.k * u, self.rule.k, self._valid_since_s, t, index)

    def describe(self, force_unit: tuple[str, float] = ("N", 1.0)) -> str:
        """The rule as shown to the user, with the window length in samples; forces in
        ``force_unit`` (symbol, newtons per unit)."""
        return (
            f"{self.rule.describe(force_unit)} ({self.hold_samples + 1} samples at "
            f"{self.sample_rate_hz:g} Hz)"
        )

    # ------------------------------------------------------------------ feeding
    def update(self, estimates: np.ndarray) -> list[StateChange]:
        """Feed one block of estimates (``ESTIMATE_DTYPE``, shape (n,)); return its transitions.

        The block's per-sample trace is kept in ``last_trace`` for a reader that shares
        this monitor (the zero-drift alarm of `estimator.alarms.AlarmSet`).
        """
        changes, self.last_trace = self.update_with_trace(estimates)
        return changes

    def update_with_trace(self, estimates: np.ndarray) -> tuple[list[StateChange], MonitorTrace]:
        """As :meth:`update`, also returning the per-sample :class:`MonitorTrace`."""
        if not isinstance(estimates, np.ndarray) or estimates.dtype != ESTIMATE_DTYPE:
            dtype = getattr(estimates, "dtype", type(estimates).__name__)
            raise ParameterError(
                f"estimates have dtype {dtype}; pass an estimator.observer.ESTIMATE_DTYPE array"
            )
        est = estimates.reshape(-1)
        n = est.size
        if n == 0:
            empty = np.zeros(0)
            return [], MonitorTrace(np.zeros(0, np.uint8), empty, empty)
        rule, h = self.rule, self.hold_samples
        f = est["force_n"].astype(float)
        u = est["force_u_n"].astype(float)
        t = est["time_s"].astype(float)
        flags = est["flags"]
        pos = self._pos + np.arange(n, dtype=np.int64)

        # --- where the hold window starts again
        finite = np.isfinite(f) & np.isfinite(u)
        t_prev = np.concatenate(([self._t_last], t[:-1]))
        back = ~(t > t_prev)  # time went back (or NaN): device restart
        held = FLAG_REJECTED | FLAG_DEFERRED
        restart_here = ((flags & (FLAG_GAP | FLAG_JUMP | held)) != 0) | back
        restart_after = ((flags & FLAG_MISSING) != 0) | ~finite
        candidate = np.where(restart_after, pos + 1, np.where(restart_here, pos, -1))
        anchor = np.maximum.accumulate(np.maximum(candidate, self._anchor))
        usable = anchor <= pos

        # --- hold-window statistics, sliding: the window's state is carried from one
        # block to the next, so the results do not depend on block sizes.
        total = np.empty(n)
        high = np.empty(n)
        low = np.empty(n)
        window_stats(self._window, np.where(finite, f, 0.0), pos, anchor, total, high, low)
        count = np.clip(pos - anchor + 1, 0, h + 1)
        with np.errstate(invalid="ignore", divide="ignore"):
            mean = np.where(count > 0, total / np.maximum(count, 1), np.nan)
            band = np.maximum.reduce(
                [rule.band_fraction * np.abs(mean), rule.k * u, np.full(n, rule.band_floor_n)]
            )
            band = np.where(usable, band, np.nan)
            spread = np.maximum(high - mean, mean - low)
            full = count == h + 1
            steady = usable & full & (spread <= band)
            holds = usable & full & (spread <= rule.release_factor * band)
            jumped = (flags & (held | FLAG_JUMP)) != 0
            step = np.abs(f - mean)
            changing = usable & (jumped | (step > band))
            # once settled, only a step beyond the release band unsettles (hysteresis)
            breaks_hold = usable & (jumped | (step > rule.release_factor * band))
            # out of range, with the band as hysteresis margin
            own_band = np.maximum.reduce(
                [rule.band_fraction * np.abs(f), rule.k * u, np.full(n, rule.band_floor_n)]
            )
            outside = finite & ((f > self.force_max_n) | (f < self.force_min_n))
            back_in = (
                finite & (f <= self.force_max_n - own_band) & (f >= self.force_min_n + own_band)
            )
        settled = _latch(steady & ~changing, ~holds | breaks_hold, self._settled)
        oor = _latch(outside, back_in & ~outside, self._oor)

        code = np.full(n, _CODE[SETTLING], dtype=np.uint8)
        code[changing] = _CODE[CHANGING]
        code[settled] = _CODE[SETTLED]
        code[oor] = _CODE[OUT_OF_RANGE]

        # --- transitions
        prev_code = np.concatenate(([_CODE[self._state]], code[:-1]))
        changes = []
        for i in np.flatnonzero(code != prev_code).tolist():
            shown = mean[i] if math.isfinite(mean[i]) else f[i]
            change = StateChange(
                int(pos[i]),
                float(t[i]),
                STATES[prev_code[i]],
                STATES[code[i]],
                float(shown),
                float(band[i]),
            )
            changes.append(change)
            if change.new == SETTLED:
                self._valid_since_s = change.time_s

        # --- carry
        self._anchor = int(anchor[-1])
        self._t_last = float(t[-1]) if math.isfinite(t[-1]) else self._t_last
        self._settled = bool(settled[-1])
        self._oor = bool(oor[-1])
        self._state = STATES[code[-1]]
        self._last = (float(mean[-1]), float(u[-1]), float(t[-1]), int(pos[-1]))
        self._pos += n
        return changes, MonitorTrace(code, np.where(usable, mean, np.nan), band)


def _latch(set_: np.ndarray, reset: np.ndarray, state0: bool) -> np.ndarray:
    """A set/reset latch over samples: True from a ``set_`` sample until a ``reset`` one.

    ``set_`` wins where both hold. Returns bool, shape (n,). Vectorised: each sample
    takes the decision of the last sample (at or before it) where either holds.
    """
    decision = np.where(set_, 1, np.where(reset, 0, -1))
    idx = np.where(decision >= 0, np.arange(decision.size), -1)
    last = np.maximum.accumulate(idx)
    return np.where(last >= 0, decision[np.maximum(last, 0)] == 1, state0)
