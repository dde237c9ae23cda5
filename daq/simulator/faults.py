"""Faults a `PtyCell` can play: noise, lost and corrupted samples, a disconnect, a stall."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from daq.errors import FramingError

#: Kinds of `Fault`.
FAULT_KINDS = ("garbage", "drop", "corrupt", "disconnect", "stall")
_MAX_FAULT_COUNT = 1_000_000


@dataclass(frozen=True)
class Fault:
    """A fault the simulated cell plays at a moment of simulated time.

    Attributes:
        kind: one of `FAULT_KINDS`:
            "garbage": `count` random bytes between two samples;
            "drop": `count` samples are never sent;
            "corrupt": `count` consecutive samples are sent with one bit flipped;
            "disconnect": the pseudo-terminal is closed, and a new one opened behind the
            same port name `duration_s` seconds of *real* time later;
            "stall": nothing is sent for `duration_s` seconds of *simulated* time.
        at_s: simulated time, s since the start of the run (repetitions of a loop
            count on); the fault applies before the first sample due at or after it.
        duration_s: s, for "disconnect" (real time, ≥ 0) and "stall" (simulated, > 0).
        count: bytes ("garbage") or samples ("drop", "corrupt"), 1..1_000_000.
    """

    kind: str
    at_s: float
    duration_s: float = 0.0
    count: int = 1

    def __post_init__(self) -> None:
        if self.kind not in FAULT_KINDS:
            raise FramingError(
                f"Fault: kind={self.kind!r} is unknown; use one of " + ", ".join(FAULT_KINDS)
            )
        for name in ("at_s", "duration_s"):
            v = getattr(self, name)
            if isinstance(v, bool) or not isinstance(v, (int, float, np.integer, np.floating)):
                raise FramingError(f"Fault: {name}={v!r} is not a number of seconds")
            if not (math.isfinite(float(v)) and float(v) >= 0.0):
                raise FramingError(f"Fault: {name}={v!r} must be a finite number >= 0")
        if self.kind == "stall" and not float(self.duration_s) > 0.0:
            raise FramingError(
                f"Fault: duration_s={self.duration_s!r} must be > 0 for a stall "
                "(simulated seconds without output)"
            )
        c = self.count
        if (
            isinstance(c, bool)
            or not isinstance(c, (int, np.integer))
            or not 1 <= c <= _MAX_FAULT_COUNT
        ):
            raise FramingError(f"Fault: count={c!r} must be an integer 1..{_MAX_FAULT_COUNT}")
