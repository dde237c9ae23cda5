"""The report's tables as rows of text: the per-change table, the GUM budget, the
summary of the load changes. Shared by the HTML page and the PDF."""

from __future__ import annotations

from typing import Any

__all__ = ["CHANGE_COLUMNS", "budget_lines", "cell", "change_rows"]

#: Per-change columns: key in figures.json, header words, unit, format.
CHANGE_COLUMNS = (
    ("t_start_s", "start", "s", ".4f"),
    ("before_n", "from", "N", ".4g"),
    ("after_n", "to", "N", ".4g"),
    ("rise_ms", "rise", "ms", ".2f"),
    ("overshoot_pct", "overshoot", "%", ".2f"),
    ("settle_ms", "settle", "ms", ".2f"),
    ("settle50_ms", "settle50", "ms", ".2f"),
    ("static_settle_ms", "k·x settle", "ms", ".2f"),
    ("ratio", "k·x / estimate", "×", ".1f"),
)


def cell(value: Any, fmt: str) -> str:
    """A number as text, or an em dash when there is none."""
    return "—" if value is None else format(value, fmt)


def change_rows(changes: list[dict[str, Any]]) -> list[list[str]]:
    """One row of text per load change, in `CHANGE_COLUMNS` order."""
    return [[cell(c[key], fmt) for key, _, _, fmt in CHANGE_COLUMNS] for c in changes]


def budget_lines(u: dict[str, Any], calibration_stated: bool = True) -> list[str]:
    """The GUM budget of a settled reading, one line per contribution; a note when the
    profile states no stiffness uncertainty (a calibration term of 0 is not a calibration
    known exactly: U then leaves the calibration out)."""
    rows = [
        ("observer (noise, force model, m and b)", u["observer_n"]),
        ("calibration (stiffness)", u["calibration_n"]),
        ("resolution (one count, rectangular)", u["resolution_n"]),
        ("model (relative term)", u["model_n"]),
        ("combined u_c", u["combined_n"]),
        ("expanded U (k = 2, about 95 %)", u["expanded_n_k2"]),
    ]
    lines = [f"at F = {u['force_n']:.6g} N"]
    lines += [f"  {name:38s} {cell(value, '.3g')} N" for name, value in rows]
    if not calibration_stated:
        lines += [
            "  note: the profile states no stiffness uncertainty, so U leaves the calibration",
            "  out; give stiffness_u_n_per_m from the cell's calibration (forcelens calibrate",
            "  --profile writes it, or profile new --stiffness-u-n-per-m)",
        ]
    return lines
