"""The one-line terminal status shown while samples stream in (live and paced replay)."""

from __future__ import annotations

import sys
import time
from typing import Any, TextIO

import numpy as np

from ui.dashboard.wording import rejected_word
from ui.display_units import CellUnits
from ui.model_in_force import model_in_force

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
    units: CellUnits | None = None,
    framing: str = "",
) -> str:
    """One status line from the latest estimates (ESTIMATE_DTYPE, (n,), n ≥ 1).

    With `budget` (an `estimator.uncertainty.ForceUncertainty`) U is the expanded
    combined uncertainty; without it, the observer's part only.

    Shows device time, force ± U with k = 2, displacement, the settling state (in
    brackets), the model in force (`ui.model_in_force`), the connection state, the
    measured sample rate with its drift from the nominal rate, and the counts of lost
    and rejected samples. With `units` (`ui.display_units.CellUnits.for_profile`) the
    numbers are in the cell's units with the digits U supports, as on the dashboard;
    with `framing` (the profile's) the rejected pieces are called lines or frames.
    """
    e = est[-1]
    u = float(e["force_u_n"])
    if budget is not None:  # the GUM combination of observer, calibration and resolution
        u = float(budget.combined_n(e["force_n"], u))
    if units is None:
        parts = [
            f"t {e['time_s']:8.3f} s",
            f"F {e['force_n']:10.4f} N ± {2.0 * u:.4f} N (U, k=2)",
            f"x {e['displacement_m'] * 1e3:9.6f} mm",
        ]
    else:
        force, expanded = float(e["force_n"]), 2.0 * u
        parts = [
            units.time_text(float(e["time_s"])),
            f"F {units.force_text(force, expanded)} ± {units.u_text(expanded)} (U, k=2)",
            f"x {units.displacement_text(float(e['displacement_m']))}",
        ]
    if settling:
        parts.append(f"[{settling.upper()}]")
    model = model_in_force(e["p_hold"], e["p_rate"], e["p_jump"])
    if model.known:
        parts.append(model.headline())
    if state:
        parts.append(state)
    if rate_hz is not None:
        drift = f" ({drift_ppm:+.0f} ppm)" if drift_ppm is not None else ""
        parts.append(f"{rate_hz:8.1f} S/s{drift}")
    parts.append(f"lost {lost}")
    parts.append(f"{rejected} {rejected_word(framing)}" if framing else f"bad {rejected}")
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
