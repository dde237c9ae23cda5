"""The progress bar of an archive job: runs done out of runs to do, on a terminal."""

from __future__ import annotations

import sys
import time
from typing import TextIO

__all__ = ["RunProgress"]

_WIDTH = 30  # characters of the bar
_PERIOD_S = 0.2  # shortest time between redraws, s


class RunProgress:
    """``label [#########.........]  12/40 runs  0:07`` rewritten in place on stderr.

    Drawn only on a terminal (``enabled`` None) or when ``enabled`` is True; the last
    state is always drawn before `close` ends the line.
    """

    def __init__(
        self,
        total: int,
        label: str,
        *,
        stream: TextIO | None = None,
        enabled: bool | None = None,
    ) -> None:
        self.total = int(total)
        self.label = label
        self.done = 0
        self.stream = stream or sys.stderr
        self.enabled = self.stream.isatty() if enabled is None else enabled
        self._start = time.monotonic()
        self._last = -float("inf")
        self._drawn = False

    def advance(self, n: int = 1) -> None:
        """Count ``n`` more runs as done and redraw when due."""
        self.done = min(self.total, self.done + n)
        now = time.monotonic()
        if self.done >= self.total or now - self._last >= _PERIOD_S:
            self._last = now
            self._draw(now)

    def text(self, now: float | None = None) -> str:
        """The bar as it is drawn now."""
        elapsed = int((time.monotonic() if now is None else now) - self._start)
        filled = _WIDTH * self.done // max(self.total, 1)
        bar = "#" * filled + "." * (_WIDTH - filled)
        return (
            f"{self.label} [{bar}] {self.done}/{self.total} runs  "
            f"{elapsed // 60}:{elapsed % 60:02d}"
        )

    def _draw(self, now: float) -> None:
        if not self.enabled:
            return
        self.stream.write("\r" + self.text(now))
        self.stream.flush()
        self._drawn = True

    def close(self) -> None:
        """Draw the final state and end the line."""
        if self.enabled and not self._drawn:
            self._draw(time.monotonic())
        if self._drawn:
            self.stream.write("\n")
            self.stream.flush()
            self._drawn = False
