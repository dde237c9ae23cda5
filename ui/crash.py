"""What a user sees when forcelens itself fails: one line and a saved report, never a
traceback on the terminal.

An error forcelens anticipates (a bad file, a bad option, a port that cannot open) is a
``ValueError`` or ``OSError`` whose message names the problem: the command prints that
one line and exits 1. Anything else is a fault of forcelens: the traceback, the command
line and the versions go to a crash report file, and the command prints one line with
its path and exits 3, so the report can be attached to a bug report.
"""

from __future__ import annotations

import datetime
import os
import platform
import sys
import tempfile
import traceback
from collections.abc import Sequence
from pathlib import Path

__all__ = ["EXIT_CRASH", "crash_folder", "fault_text", "save_crash_report"]

EXIT_CRASH = 3  #: exit status of an unexpected failure


def crash_folder() -> Path:
    """Where crash reports go: ``$XDG_CACHE_HOME/forcelens/crash`` (default
    ``~/.cache/forcelens/crash``), or the system's temporary folder when that cannot be
    made."""
    base = os.environ.get("XDG_CACHE_HOME") or str(Path.home() / ".cache")
    folder = Path(base) / "forcelens" / "crash"
    try:
        folder.mkdir(parents=True, exist_ok=True)
        return folder
    except OSError:
        return Path(tempfile.gettempdir())


def save_crash_report(exc: BaseException, argv: Sequence[str], version: str) -> Path | None:
    """Write the report of ``exc``; its path, or None when nothing could be written."""
    stamp = datetime.datetime.now(datetime.UTC).strftime("%Y%m%dT%H%M%S.%fZ")
    lines = [
        f"forcelens {version} crash report, {stamp}",
        f"command: forcelens {' '.join(argv)}",
        f"python {sys.version.split()[0]} on {platform.platform()}",
        "",
        *traceback.format_exception(exc),
    ]
    try:
        import numpy
        import scipy

        lines.insert(3, f"numpy {numpy.__version__}, scipy {scipy.__version__}")
    except ImportError:  # pragma: no cover - both are dependencies
        pass
    path = crash_folder() / f"crash-{stamp}-{os.getpid()}.txt"
    try:
        path.write_text("\n".join(line.rstrip("\n") for line in lines) + "\n", "utf-8")
    except OSError:
        return None
    return path


def fault_text(exc: BaseException, argv: Sequence[str], version: str) -> str:
    """Save the report of ``exc`` and return the one line that names it and its file."""
    path = save_crash_report(exc, argv, version)
    where = f"details in {path}" if path else "no crash report could be written"
    return f"internal error ({type(exc).__name__}: {exc}); {where}; please report it"
