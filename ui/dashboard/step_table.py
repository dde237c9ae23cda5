"""The replay's table of load changes, as text in the cell's units (no Qt here).

One row per `estimator.metrics.ChangeRow`. Levels are in the force unit with the digits
their U (k = 2) supports at that moment of the run (JCGM 100:2008 7.2.6, as in
`ui.display_units`); times in ms resolve one sample period; the overshoot's digits
follow U over the step's size; the last column is the ratio of the two settling
times, each known to one sample period, with the digits that supports.
"""

from __future__ import annotations

import math
from typing import Any

from ui.display_units import CellUnits, Unit, decimals_for, fixed

__all__ = ["step_cells", "step_headers"]

_PLAIN = Unit("", 1.0)


def step_headers(units: CellUnits) -> list[str]:
    """Column headings, each with its unit."""
    f = units.force.symbol
    return [
        "start t (s)",
        f"from ({f})",
        f"to ({f})",
        "rise (ms)",
        "overshoot (%)",
        "settling (ms)",
        "k·x settling (ms)",
        "settling time\nk·x ÷ estimate",
    ]


def step_cells(row: Any, u_before_n: float, u_after_n: float, units: CellUnits) -> list[str]:
    """The texts of one row; `u_before_n`, `u_after_n`: U (k = 2) of the levels, N."""
    obs, static = row.observer, row.static
    amplitude = abs(obs.final - obs.initial)
    # The overshoot is read off both levels: the larger U of the two over the step.
    u_pct = 100.0 * max(u_before_n, u_after_n) / amplitude if amplitude > 0 else math.nan
    return [
        fixed(row.change.t_start_s, units.time_decimals),
        units.force_number(obs.initial, u_before_n),
        units.force_number(obs.final, u_after_n),
        units.duration_ms(obs.rise_time_s),
        fixed(obs.overshoot_pct, decimals_for(u_pct, _PLAIN)),
        units.duration_ms(obs.settling_time_s),
        units.duration_ms(static.settling_time_s) if static else "—",
        _ratio_text(obs.settling_time_s, static.settling_time_s, units) if static else "—",
    ]


def _ratio_text(fast_s: float, slow_s: float, units: CellUnits) -> str:
    """slow/fast as "×N", with the digits one sample period on each time allows."""
    if not (math.isfinite(fast_s) and math.isfinite(slow_s) and fast_s > 0 and slow_s > 0):
        return "—"
    ratio = slow_s / fast_s
    dt = units.sample_period_s
    u_ratio = ratio * math.hypot(dt / fast_s, dt / slow_s)
    return f"×{fixed(ratio, decimals_for(u_ratio, _PLAIN))}"
