"""The log file of a live session (issue 12, item 7): what happened, when, in plain lines.

`forcelens live` and the dashboard's acquisition log, with Python's `logging`, one line per
event: start and stop, the source and the profile, connections lost and regained, alarms
raised and cleared, zeros, marks, recordings begun and closed, errors. Nothing is logged per
sample: the lines come from the session's events, so the per-sample path is untouched.

Where the lines go:

* while a run is recorded: ``session.log`` in the run folder (`daq.runs.layout.LOG_FILE`);
  it is outside the run's seal (docs/run-format.md): a diary for people, not data;
* otherwise: a file of its own per session in the per-user log folder
  (`user_log_folder`, e.g. ``~/.local/state/forcelens/log`` on Linux), named
  ``forcelens-<UTC start>-<command>-<pid>.log``; the newest `KEEP_USER_LOGS` are kept.

A dashboard session that starts and stops recordings writes the recorded stretch into the
run folder and the rest into its per-user file, each file saying where the other part is.
Every line is written and flushed when it happens (a crash keeps what was logged). A log that
cannot be written never stops an acquisition: the first failure is said once on stderr and
the session goes on without a log.
"""

from __future__ import annotations

import contextlib
import logging
import os
import re
import sys
from collections.abc import Iterable
from datetime import UTC, datetime
from pathlib import Path
from types import TracebackType
from typing import Any, TextIO

__all__ = [
    "KEEP_USER_LOGS",
    "LOGGER_NAME",
    "LOG_DIR_ENV",
    "MAX_LOG_BYTES",
    "SessionLog",
    "log_start",
    "session_logger",
    "user_log_folder",
]

#: The logger every producer of session lines writes to.
LOGGER_NAME = "forcelens.session"
#: Environment variable naming another per-user log folder (tests, shared machines).
LOG_DIR_ENV = "FORCELENS_LOG_DIR"
#: Per-user session logs kept; older ones of ours are removed when a new one starts.
KEEP_USER_LOGS = 200
#: A log file stops growing at this size (a flapping alarm cannot fill a disk).
MAX_LOG_BYTES = 16 * 2**20

_USER_LOG_RE = re.compile(r"^forcelens-\d{8}T\d{6}Z-[a-z]+-\d+\.log$")

logging.getLogger(LOGGER_NAME).addHandler(logging.NullHandler())


def session_logger() -> logging.Logger:
    """The logger of session events (``forcelens.session``)."""
    return logging.getLogger(LOGGER_NAME)


def user_log_folder() -> Path:
    """The per-user folder of session logs: ``$FORCELENS_LOG_DIR`` when set, else the
    platform's user log folder (platformdirs: ``$XDG_STATE_HOME/forcelens/log``, by default
    ``~/.local/state/forcelens/log``, on Linux; ``~/Library/Logs/forcelens`` on macOS;
    ``%LOCALAPPDATA%\\forcelens\\Logs`` on Windows)."""
    chosen = os.environ.get(LOG_DIR_ENV)
    if chosen:
        return Path(chosen)
    import platformdirs

    return Path(platformdirs.user_log_dir("forcelens", appauthor=False))


def _utc(seconds: float) -> str:
    return datetime.fromtimestamp(seconds, UTC).strftime("%Y-%m-%dT%H:%M:%S.%fZ")


class _Formatter(logging.Formatter):
    """``2026-12-04T20:31:05.123456Z WARNING disconnected: ...`` (UTC, fixed width)."""

    def format(self, record: logging.LogRecord) -> str:
        text = f"{_utc(record.created)} {record.levelname:<7} {record.getMessage()}"
        if record.exc_info and record.exc_info[1] is not None:
            exc = record.exc_info[1]
            text += f" ({type(exc).__name__}: {exc})"
        return text.replace("\n", " | ")


class _LogFile(logging.Handler):
    """Appends formatted records to one file at a time; `switch` changes the file."""

    def __init__(self, max_bytes: int) -> None:
        super().__init__(logging.INFO)
        self.setFormatter(_Formatter())
        self.max_bytes = max_bytes
        self.path: Path | None = None
        self.problem = ""
        self._stream: TextIO | None = None
        self._size = 0
        self._full = False

    def switch(self, path: Path | None) -> bool:
        """Close the current file and append to ``path`` from now on (None: no file).
        False, with `problem` set, when ``path`` cannot be opened."""
        with self.lock or contextlib.nullcontext():
            self._close_stream()
            self.path, self._full = path, False
            if path is None:
                return True
            try:
                path.parent.mkdir(parents=True, exist_ok=True)
                self._stream = path.open("a", encoding="utf-8", newline="\n")
                self._size = path.stat().st_size
            except OSError as exc:
                self._fail(f"cannot open {path} ({exc.strerror or exc})")
                return False
            return True

    def emit(self, record: logging.LogRecord) -> None:
        if self._stream is None:
            return
        text = self.format(record) + "\n"
        size = len(text.encode("utf-8"))
        try:
            if self._size + size > self.max_bytes:
                if not self._full:
                    self._full = True
                    self._stream.write(
                        f"{_utc(record.created)} WARNING log full ({self.max_bytes} bytes): "
                        "later lines are dropped (a recorded run keeps its events in "
                        "events.jsonl)\n"
                    )
                    self._stream.flush()
                return
            self._stream.write(text)
            self._stream.flush()
            self._size += size
        except OSError as exc:
            self._fail(f"cannot write {self.path} ({exc.strerror or exc})")

    def handleError(self, record: logging.LogRecord) -> None:  # noqa: N802 - logging's name
        exc = sys.exc_info()[1]
        self._fail(f"cannot log to {self.path} ({type(exc).__name__}: {exc})")

    def _fail(self, problem: str) -> None:
        """Say the first failure once on stderr; go on without a file."""
        if not self.problem:
            self.problem = problem
            with contextlib.suppress(OSError, ValueError):
                print(f"forcelens: session log: {problem}; continuing without it", file=sys.stderr)
        self._close_stream()

    def _close_stream(self) -> None:
        if self._stream is not None:
            with contextlib.suppress(OSError):
                self._stream.close()
            self._stream = None

    def close(self) -> None:
        with self.lock or contextlib.nullcontext():
            self._close_stream()
        super().close()


class SessionLog:
    """The log file of one session, attached to the ``forcelens.session`` logger.

    Args:
        command: the command writing it (``live``, ``dashboard``): part of the file name.
        run_folder: the run being recorded from the start (its ``session.log``); None
            logs into the per-user folder until `follow_run` is called.
        max_bytes: size at which a file stops growing.

    Use it as a context manager, or call `close`.
    """

    def __init__(
        self, command: str, *, run_folder: Path | None = None, max_bytes: int = MAX_LOG_BYTES
    ) -> None:
        if not re.fullmatch(r"[a-z]+", command):
            raise ValueError(f"session log: command {command!r} must be lower-case letters")
        self.command = command
        self.started = datetime.now(UTC)
        self.user_file: Path | None = None  # made when first needed
        self.run_file: Path | None = None
        self._handler = _LogFile(max_bytes)
        self._logger = session_logger()
        self._logger.setLevel(logging.INFO)
        self._logger.propagate = False  # the lines go to the file, not to the terminal
        self._logger.addHandler(self._handler)
        if run_folder is not None:
            self._open_run_file(Path(run_folder), continued_from=None)
        else:
            self._open_user_file(continued_from=None)

    # ---------------------------------------------------------------- where
    @property
    def path(self) -> Path | None:
        """The file written now (None when it could not be opened)."""
        return self._handler.path if self._handler._stream is not None else None

    @property
    def problem(self) -> str:
        """Why logging stopped ("" while it works)."""
        return self._handler.problem

    def follow_run(self, folder: Path) -> None:
        """A recording has begun in ``folder``: log into its ``session.log`` from now on."""
        from daq.runs.layout import LOG_FILE

        was = self.path
        self._logger.info("log continues in %s while the run is recorded", Path(folder) / LOG_FILE)
        self._open_run_file(Path(folder), continued_from=was)

    def leave_run(self) -> None:
        """The recording was closed: back to the per-user file."""
        was = self.path
        self._logger.info("run closed; log continues in the per-user folder")
        self.run_file = None
        self._open_user_file(continued_from=was)

    def close(self) -> None:
        """Detach from the logger and close the file (idempotent)."""
        if self._handler in self._logger.handlers:
            self._logger.removeHandler(self._handler)
        self._handler.close()

    def __enter__(self) -> SessionLog:
        return self

    def __exit__(
        self,
        exc_type: type[BaseException] | None,
        exc: BaseException | None,
        tb: TracebackType | None,
    ) -> None:
        self.close()

    # ---------------------------------------------------------------- internals
    def _open_run_file(self, folder: Path, continued_from: Path | None) -> None:
        from daq.runs.layout import LOG_FILE

        self.run_file = folder / LOG_FILE
        if self._handler.switch(self.run_file):
            self._header(continued_from)

    def _open_user_file(self, continued_from: Path | None) -> None:
        if self.user_file is None:
            stamp = self.started.strftime("%Y%m%dT%H%M%SZ")
            folder = user_log_folder()
            self.user_file = folder / f"forcelens-{stamp}-{self.command}-{os.getpid()}.log"
            _prune(folder, keep=KEEP_USER_LOGS - 1)
        if self._handler.switch(self.user_file):
            self._header(continued_from)

    def _header(self, continued_from: Path | None) -> None:
        import platform

        from daq.runs.layout import library_versions
        from ui.version import software_version

        libs = ", ".join(f"{k} {v}" for k, v in library_versions().items())
        self._logger.info(
            "forcelens %s %s, pid %d, session started %s; Python %s on %s; %s",
            software_version(),
            self.command,
            os.getpid(),
            _utc(self.started.timestamp()),
            platform.python_version(),
            platform.platform(),
            libs,
        )
        if continued_from is not None:
            self._logger.info("continued from %s", continued_from)


def _prune(folder: Path, keep: int) -> None:
    """Remove our own per-user session logs beyond the newest ``keep`` (by name: UTC start)."""
    try:
        ours: Iterable[Path] = sorted(
            p for p in folder.iterdir() if _USER_LOG_RE.match(p.name) and p.is_file()
        )
    except OSError:
        return
    ours = list(ours)
    for old in ours[: max(0, len(ours) - keep)]:
        with contextlib.suppress(OSError):
            old.unlink()


def log_start(command_line: str, source: str, profile: Any, profile_path: str | None) -> None:
    """Log what a session reads and with which model: the command, the source, the profile
    (its file, cell name and the SHA-256 of its TOML text, as `profile_to_toml` writes it)."""
    import hashlib

    from estimator.profile import profile_to_toml

    digest = hashlib.sha256(profile_to_toml(profile).encode("utf-8")).hexdigest()
    log = session_logger()
    log.info("command: %s", command_line)
    log.info("source: %s", source)
    log.info(
        "profile: %s, cell %r, SHA-256 %s",
        profile_path or "the built-in demo profile (invented cell)",
        profile.cell.name,
        digest,
    )
