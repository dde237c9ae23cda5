"""The change table as plain text: `format_change_table`."""

from __future__ import annotations

import math
from collections.abc import Sequence

from estimator.metrics.changes import ChangeRow

__all__ = ["format_change_table"]


def _cell(value: float, fmt: str) -> str:
    return "-" if not math.isfinite(value) else format(value, fmt)


def format_change_table(rows: Sequence[ChangeRow]) -> str:
    """Plain-text table of the rows, one line per change, units in the header.

    Forces in N, instants in s, durations in ms, overshoot in %. "settle" counts from
    the start of the change, "settle50" from its 50 % crossing (IEEE Std 181); the
    ``k·x`` columns and the ratio appear when any row has static metrics. NaN prints "-".
    """
    with_static = any(r.static is not None for r in rows)
    header = [
        "#",
        "t_start s",
        "before N",
        "after N",
        "step N",
        "rise ms",
        "overshoot %",
        "settle ms",
        "settle50 ms",
    ]
    if with_static:
        header += ["k·x settle ms", "k·x overshoot %", "ratio"]
    body: list[list[str]] = []
    for n, row in enumerate(rows, start=1):
        m = row.observer
        line = [
            str(n),
            _cell(row.change.t_start_s, ".4f"),
            _cell(row.change.level_before_n, ".5g"),
            _cell(row.change.level_after_n, ".5g"),
            _cell(row.change.step_n, "+.5g"),
            _cell(m.rise_time_s * 1e3, ".2f"),
            _cell(m.overshoot_pct, ".1f"),
            _cell(m.settling_time_s * 1e3, ".2f"),
            _cell(m.settling_time_mid_s * 1e3, ".2f"),
        ]
        if with_static:
            s = row.static
            line += (
                ["-", "-", "-"]
                if s is None
                else [
                    _cell(s.settling_time_s * 1e3, ".2f"),
                    _cell(s.overshoot_pct, ".1f"),
                    _cell(row.settling_ratio, ".1f"),
                ]
            )
        body.append(line)
    widths = [max(len(r[c]) for r in [header, *body]) for c in range(len(header))]
    lines = [
        "  ".join(cell.rjust(w) for cell, w in zip(r, widths, strict=True))
        for r in [header, *body]
    ]
    if rows:
        m = rows[0].observer
        floors = [
            r.observer.band_abs
            for r in rows
            if r.observer.band_abs > r.observer.band * abs(r.observer.amplitude)
        ]
        band = f"±{m.band * 100.0:g} % of the step"
        if floors:
            band += f" (at least ±{min(floors):.4g} N)"
        lines.append(
            f"settling band {band}; settle from the start of the change, "
            "settle50 from its 50 % crossing"
        )
    else:
        lines.append("no load change found")
    return "\n".join(lines) + "\n"
