"""The one-line terminal status shown while samples stream in (live and paced replay)."""

from __future__ import annotations

import sys
import time
from typing import Any, TextIO

import numpy as np

__all__ = ["StatusLine", "format_status"]


def format_status(
    est: np.ndarray,
    *,
    state: str = "",
    settling: str = "",
    rate_hz: float | None = None,
    drift_ppm: float | None = None,
    lost: int = 0,
    rejected: int = 0,
    recording: str = "",
    budget: Any = None,
) -> str:
    """One status line from the latest estimates (ESTIMATE_DTYPE, (n,), n ≥ 1).

    With `budget` (an `estimator.uncertainty.ForceUncertainty`) U is the expanded
    combined uncertainty; without it, the observer's part only.

    Shows device time, force ± U with k = 2, displacement, the settling state (in
    brackets), the connection state, the
    measured sample rate with its drift from the nominal rate, and the counts of lost
    and rejected samples.
    """
    e = est[-1]
    u = float(e["force_u_n"])
    if budget is not None:  # the GUM combination of observer, calibration and resolution
        u = float(budget.combined_n(e["force_n"], u))
    parts = [
        f"t {e['time_s']:8.3f} s",
        f"F {e['force_n']:10.4f} N ± {2.0 * u:.4f} N (U, k=2)",
        f"x {e['displacement_m'] * 1e3:9.6f} mm",
    ]
    if settling:
        parts.append(f"[{settling.upper()}]")
    if state:
        parts.append(state)
    if rate_hz is not None:
        drift = f" ({drift_ppm:+.0f} ppm)" if drift_ppm is not None else ""
        parts.append(f"{rate_hz:8.1f} S/s{drift}")
    parts.append(f"lost {lost}")
    parts.append(f"bad {rejected}")
    if recording:
        parts.append(f"rec {recording}")
    return "  ".join(parts)


class StatusLine:
    """Rewrites one line on a terminal (every 0.1 s) or prints a line every 2 s otherwise."""

    def __init__(self, stream: TextIO | None = None, *, enabled: bool = True) -> None:
        self.stream = stream or sys.stdout
        self.tty = self.stream.isatty()
        self.period_s = 0.1 if self.tty else 2.0
        self.enabled = enabled
        self._last = -float("inf")
        self._shown = False

    def due(self) -> bool:
        """True when the next line should be shown."""
        return self.enabled and time.monotonic() - self._last >= self.period_s

    def show(self, text: str) -> None:
        """Show `text` now."""
        self._last = time.monotonic()
        if self.tty:
            self.stream.write("\r" + text + "\x1b[K")
            self._shown = True
        else:
            self.stream.write(text + "\n")
        self.stream.flush()

    def finish(self) -> None:
        """End the rewritten line so later output starts on a fresh line."""
        if self._shown:
            self.stream.write("\n")
            self.stream.flush()
            self._shown = False
