"""Typed commands during a headless live run: mark, zero (with confirmation), stop.

A daemon thread reads lines from the terminal into a queue; the acquisition loop hands
each line to `Console.handle`, so every action happens on the consumer thread, between
two polls. Commands (one per line, then Enter):

* ``m [text]`` — mark the run at the latest sample, with an optional note;
* ``z`` — zero (tare); asks for confirmation because the cell must be unloaded and at
  rest, answered with ``y``;
* ``q`` — stop and close the run;
* ``?`` — list the commands.
"""

from __future__ import annotations

import queue
import sys
import threading
from typing import Any, TextIO

from ui.display_units import CellUnits

__all__ = ["HELP", "Console", "start_line_reader"]

HELP = "commands: m [note] = mark, z = zero (cell unloaded), q = stop, ? = this help"
ZERO_QUESTION = "zero now? the cell must be unloaded and at rest: type y then Enter (else cancel)"


class Console:
    """Interprets typed lines for a `ui.session.LiveSession`.

    `handle` returns the reply to print (possibly empty); `stop_requested` turns True on
    ``q``. A zero waits for a ``y`` on the next line; anything else cancels it.
    """

    def __init__(self, session: Any) -> None:
        self.session = session
        self.stop_requested = False
        self._confirm_zero = False

    def handle(self, line: str) -> str:
        """Act on one typed line; returns the reply for the operator."""
        text = line.strip()
        if self._confirm_zero:
            self._confirm_zero = False
            if text.lower() not in ("y", "yes"):
                return "zero cancelled"
            try:
                tare = self.session.tare()
            except ValueError as exc:
                return f"zero refused: {exc}"
            # on the operator's clock (device time) and in the cell's unit, as on screen
            units = CellUnits.for_profile(self.session.pipeline.profile)
            after = self.session.pipeline.last_device_time_s
            when = "" if after is None else f" after {units.time_text(after)}"
            return (
                f"zero set: offset {units.displacement_text(tare.offset_m)} (mean of "
                f"{tare.n_samples} samples), applies from the next sample{when} (seq {tare.seq})"
            )
        if not text:
            return ""
        cmd, _, rest = text.partition(" ")
        if cmd == "m":
            seq = self.session.mark(rest.strip())
            return f"marked at seq {seq}" if seq is not None else "marked (no sample yet)"
        if cmd == "z":
            self._confirm_zero = True
            return ZERO_QUESTION
        if cmd == "q":
            self.stop_requested = True
            return "stopping"
        if cmd in ("?", "h", "help"):
            return HELP
        return f"unknown command {text!r}; {HELP}"


def start_line_reader(stream: TextIO | None = None) -> queue.Queue[str]:
    """Read lines from `stream` (default stdin) in a daemon thread into a queue."""
    source = stream or sys.stdin
    lines: queue.Queue[str] = queue.Queue()

    def pump() -> None:
        for line in source:
            lines.put(line)

    threading.Thread(target=pump, name="console lines", daemon=True).start()
    return lines
