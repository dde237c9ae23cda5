"""The dashboard's words: one word per thing, the same live and in replay (no Qt here).

The glossary of these words is `docs/glossary.md`. Times are always device time on the
plots' axis ("t = 4.1225 s"); forces and displacements in the cell's units
(`ui.display_units.CellUnits`).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

from ui.display_units import CellUnits

__all__ = [
    "EVENT_WORDS",
    "LIVE_ONLY_REASON",
    "NO_ALARMS",
    "TileText",
    "alarm_text",
    "event_text",
    "rejected_word",
    "rule_words",
    "tile_text",
]

#: What the alarm list shows when nothing is raised.
NO_ALARMS = "no active alarms"

#: Why the controls that act on a cell are off while a recorded run is shown.
LIVE_ONLY_REASON = (
    "Replay of a recorded run: recording, mark, zero and acknowledge act on a live cell "
    "only. Back to live to use them."
)

#: Words for the event kinds of a run's log (`docs/run-format.md`). The log's kind
#: ``tare`` is the file's key for what the window and the log's messages call a zero.
EVENT_WORDS: dict[str, str] = {
    "tare": "zero",
    "mark": "mark",
    "settling": "settling",
    "alarm": "alarm",
    "connected": "connected",
    "open-failed": "port did not open",
    "disconnected": "disconnected",
    "reconnected": "reconnected",
    "unread-dropped": "samples dropped unread",
    "observer-restart": "observer restarted",
}

# The settling tile: our own words, symbols and colour keys (ui/dashboard/palette.py).
_TILE_WORDS: dict[str, tuple[str, str]] = {
    "waiting": ("…", "WAITING"),
    "changing": ("▲▼", "CHANGING"),
    "settling": ("◧", "SETTLING"),
    "settled": ("■", "SETTLED"),
    "out-of-range": ("✕", "OUT OF RANGE"),
}


def rejected_word(framing: str) -> str:
    """What a rejected piece of the serial stream is called: a line or a frame."""
    return "bad lines" if framing == "ascii-lines" else "bad frames"


@dataclass(frozen=True)
class TileText:
    """The settling tile: its headline, the line below it and its state (colour key)."""

    headline: str
    detail: str
    state: str


def tile_text(state: str, since_s: float | None, units: CellUnits, *, replay: bool) -> TileText:
    """The tile for a settling state.

    Live, a settled reading is to be read now and says since when it is valid; in
    replay it is a past reading and says when the run settled.
    """
    symbol, word = _TILE_WORDS.get(state, ("", state.upper()))
    known = state in _TILE_WORDS
    detail = ""
    if state == "settled" and not replay:
        headline = f"{symbol}  {word} — read now"
        if since_s is not None:
            detail = f"valid since {units.time_text(since_s)}"
    elif state == "settled":
        headline = f"{symbol}  {word}"
        if since_s is not None:
            detail = f"settled at {units.time_text(since_s)} (recorded run)"
    else:
        headline = f"{symbol}  {word}" if symbol else word
        detail = "in the recorded run" if replay else ""
    return TileText(headline, detail, state if known else "changing")


def rule_words(rule: Mapping[str, float] | None, hold_samples: int, units: CellUnits) -> str:
    """The settling rule in words, in the cell's units.

    `rule`: the numbers of an `estimator.monitor.SettlingRule` (`band_fraction`,
    `band_floor_n`, `hold_s`, `k`, `release_factor`), as `worker.rule_numbers` gives them.
    """
    if rule is None:
        return ""
    parts = [f"{_number(rule['band_fraction'] * 100)} % of the reading"]
    parts.append(f"the observer's U (k = {rule['k']:g})")
    if rule["band_floor_n"] > 0:
        floor = units.force.of(rule["band_floor_n"])
        parts.append(f"{_number(floor)} {units.force.symbol}")
    return (
        f"Settled when every estimate of the last {_number(rule['hold_s'] * 1e3)} ms "
        f"({hold_samples + 1} samples) stays within ±max({', '.join(parts)}) of their "
        f"mean; the reading stays valid until their spread exceeds "
        f"{_number(rule['release_factor'])} × that band."
    )


def _number(x: float) -> str:
    return f"{x:.4g}"


def alarm_text(severity: str, message: str, since_s: float, units: CellUnits, ack: bool) -> str:
    """One line of the alarm list: severity, since when (device time), what."""
    since = f" since {units.time_text(since_s)}" if math.isfinite(since_s) else ""
    return f"{severity.upper()}{since}: {message}" + ("  (acknowledged)" if ack else "")


def event_text(
    kind: str, message: str, fields: dict[str, Any], time_s: float, units: CellUnits
) -> str:
    """One line of the replay's event list: device time, what happened."""
    word = EVENT_WORDS.get(kind, kind)
    if kind == "settling" and fields.get("old") and fields.get("new"):
        what = f"{fields['old']} → {fields['new']}"
    elif kind == "tare":
        what = "set"
        if isinstance(fields.get("offset_m"), int | float):
            what += f", {units.displacement_text(float(fields['offset_m']))} subtracted"
    elif kind == "alarm" and fields.get("event"):
        what = f"{fields['event']}: {message}"
    else:
        what = message
    return f"{units.time_text(time_s)}  {word}" + (f": {what}" if what else "")
