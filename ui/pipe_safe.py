"""Standard output that may close while a session runs (``forcelens live | head``).

A recording must not stop because the program reading its console went away: the first
write that meets a closed pipe sends standard output to the null device, logs it once,
and every later write is dropped; one line on standard error says so. The session goes on
to its own end (``--duration``, ``q``, Ctrl-C) and seals its run as usual.
"""

from __future__ import annotations

import contextlib
import logging
import os
import sys
from collections.abc import Iterator
from typing import TextIO

__all__ = ["PipeSafeStream", "stdout_may_close"]

_log = logging.getLogger("forcelens.session")
_log.addHandler(logging.NullHandler())  # the session's log file, when there is one
_GONE = "standard output closed by its reader; the session goes on without it"


class PipeSafeStream:
    """A text stream that turns a broken pipe into silence (see the module notes).

    Args:
        stream: the stream written to while its reader is there.
    """

    def __init__(self, stream: TextIO) -> None:
        self._stream = stream
        #: True once a write or flush met a closed pipe
        self.broken = False

    def write(self, text: str) -> int:
        if not self.broken:
            try:
                return self._stream.write(text)
            except BrokenPipeError:
                self._gone()
        return len(text)

    def flush(self) -> None:
        if not self.broken:
            try:
                self._stream.flush()
            except BrokenPipeError:
                self._gone()

    def isatty(self) -> bool:
        return not self.broken and self._stream.isatty()

    def fileno(self) -> int:
        return self._stream.fileno()

    def __getattr__(self, name: str) -> object:  # encoding, errors, ... as the stream's
        return getattr(self._stream, name)

    def _gone(self) -> None:
        self.broken = True
        with contextlib.suppress(OSError, ValueError):
            # what is still in the stream's buffer goes nowhere, not to a closed pipe
            devnull = os.open(os.devnull, os.O_WRONLY)
            os.dup2(devnull, self._stream.fileno())
            os.close(devnull)
        _log.warning(_GONE)
        with contextlib.suppress(OSError, ValueError):
            print(f"forcelens: {_GONE} (q or Ctrl-C stops it)", file=sys.stderr, flush=True)


@contextlib.contextmanager
def stdout_may_close() -> Iterator[PipeSafeStream]:
    """``sys.stdout`` as a `PipeSafeStream` for the duration of the block."""
    before = sys.stdout
    safe = PipeSafeStream(before)
    sys.stdout = safe  # type: ignore[assignment]
    try:
        yield safe
    finally:
        sys.stdout = before
