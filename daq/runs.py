"""Recorded runs: one folder per recording, written crash-tolerantly and read back.

A run folder holds ``run.json`` (what was recorded and how), one ``<stream>.bin`` per
stream (raw little-endian records, append-only), ``events.jsonl`` (one JSON object per
line) and, once the recording has ended, ``closing.json`` (status, record counts and
SHA-256 of every file). The format is documented field by field in
``docs/run-format.md``.

* :class:`RunWriter` buffers records and events in memory and writes them with
  ``os.write`` + ``os.fsync`` at most ``flush_interval_s`` apart, so a crash loses at
  most that much data and never corrupts what is already on disk.
* :func:`read_run` reads a run back, tolerating the traces of a crash (no
  ``closing.json``, a torn last record, a torn last event line) and refusing anything
  else that is wrong with a :class:`~daq.errors.RunFormatError` naming the file.
* :func:`verify_run` checks a run and reports instead of raising.
* :func:`export_run_csv` writes one stream as CSV with exact numbers.

Times are SI seconds; UTC timestamps are ISO 8601 text ending in ``Z``.
"""

from __future__ import annotations

import contextlib
import hashlib
import json
import math
import os
import re
import secrets
import tempfile
import time
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from datetime import UTC, datetime
from importlib import metadata
from pathlib import Path
from types import TracebackType
from typing import Any

import numpy as np

from daq.errors import FramingError, RunFormatError, SourceError
from daq.run_files import MAX_EVENTS_BYTES, MAX_JSON_BYTES, checked_file
from daq.samples import FLAG_GAP_BEFORE, FLAG_RECONNECT_BEFORE, SAMPLE_DTYPE, SAMPLE_UNITS

__all__ = [
    "CLOSING_FILE",
    "CLOSING_STATUSES",
    "DESCRIPTION_FILE",
    "EVENTS_FILE",
    "FLUSH_INTERVAL_MAX_S",
    "RUN_FORMAT",
    "RUN_VERSION",
    "SUPPORTED_RUN_VERSIONS",
    "RunData",
    "RunInfo",
    "RunWriter",
    "VerifyReport",
    "csv_column_name",
    "export_run_csv",
    "new_run_id",
    "read_run",
    "read_run_info",
    "utc_text",
    "verify_run",
]

#: Value of the ``format`` key of every ``run.json``.
RUN_FORMAT = "forcelens-run"
#: Layout version this software writes.
RUN_VERSION = 1
#: Layout versions this software reads.
SUPPORTED_RUN_VERSIONS: tuple[int, ...] = (1,)
#: File names inside a run folder.
DESCRIPTION_FILE = "run.json"
EVENTS_FILE = "events.jsonl"
CLOSING_FILE = "closing.json"
#: Allowed values of ``closing.json`` ``status``.
CLOSING_STATUSES: tuple[str, ...] = ("complete", "aborted", "failed")
#: Largest allowed flush interval, s: at most this much data is lost on a crash.
FLUSH_INTERVAL_MAX_S = 1.0

_RUN_ID_RE = re.compile(r"^\d{8}T\d{6}Z-[0-9a-f]{6}$")
_STREAM_NAME_RE = re.compile(r"^[a-z][a-z0-9_]{0,31}$")
_EVENT_KIND_RE = re.compile(r"^[a-z][a-z0-9_-]{0,31}$")
_SHA256_RE = re.compile(r"^[0-9a-f]{64}$")
_FIELD_KINDS = "biuf"  # bool, signed int, unsigned int, float
_EVENT_RESERVED = ("host_time_s", "utc", "kind", "message")


# --------------------------------------------------------------------------- small helpers


def utc_text(moment: datetime) -> str:
    """Return ``moment`` as fixed-width ISO 8601 UTC text, e.g. ``2026-12-01T22:30:15.000000Z``.

    The fixed width makes the text sort in time order. ``moment`` must be timezone-aware.
    """
    if moment.tzinfo is None or moment.utcoffset() is None:
        raise RunFormatError(
            f"time {moment.isoformat()!r} has no time zone; pass an aware datetime, "
            "e.g. datetime.now(timezone.utc)"
        )
    return moment.astimezone(UTC).strftime("%Y-%m-%dT%H:%M:%S.%fZ")


def new_run_id(now: datetime | None = None) -> str:
    """Return a new run id: UTC start time, a dash, 6 random hex digits.

    Example: ``20261201T223015Z-3f9a1c``.

    ``now`` (timezone-aware) defaults to the current time.
    """
    moment = datetime.now(UTC) if now is None else now
    utc_text(moment)  # refuses a naive datetime with a clear message
    return moment.astimezone(UTC).strftime("%Y%m%dT%H%M%SZ-") + secrets.token_hex(3)


def _software_version() -> str:
    try:
        return metadata.version("forcelens")
    except metadata.PackageNotFoundError:
        return "0+unknown"


def _json_default(value: object) -> object:
    """Let NumPy scalars and arrays through :func:`json.dumps`."""
    if isinstance(value, np.generic):
        return value.item()
    if isinstance(value, np.ndarray):
        return value.tolist()
    raise TypeError(f"{type(value).__name__} is not JSON serialisable")


def _to_json(value: object, what: str) -> str:
    """Strict JSON text of ``value`` (no NaN/Infinity); RunFormatError naming ``what``."""
    try:
        return json.dumps(value, default=_json_default, allow_nan=False, ensure_ascii=False)
    except (TypeError, ValueError) as exc:
        raise RunFormatError(
            f"{what}: cannot be stored as JSON ({exc}); use str, int, finite float, bool, "
            "None, lists and mappings with string keys"
        ) from None


def _fsync_folder(folder: Path) -> None:
    """Make a folder's entries (new or renamed files) durable. No-op where unsupported."""
    if os.name == "nt":  # Windows cannot open a folder for fsync
        return
    fd = os.open(folder, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def _umask() -> int:
    """The process's file-creation mask (read by setting it and restoring it)."""
    mask = os.umask(0o022)
    os.umask(mask)
    return mask


def _write_atomic_json(path: Path, value: object) -> None:
    """Write ``value`` as JSON to ``path``: temp file, fsync, rename, fsync of the folder."""
    text = json.dumps(value, indent=2, ensure_ascii=False, allow_nan=False) + "\n"
    fd, tmp_name = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=".tmp")
    try:
        with os.fdopen(fd, "w", encoding="utf-8", newline="\n") as handle:
            handle.write(text)
            handle.flush()
            os.fsync(handle.fileno())
        # mkstemp makes the file private; a run is as readable as its data files.
        os.chmod(tmp_name, 0o666 & ~_umask())
        os.replace(tmp_name, path)
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            os.unlink(tmp_name)
        raise
    _fsync_folder(path.parent)


def _dtype_to_json(dtype: np.dtype) -> list[list[str]]:
    return [[name, type_str] for name, type_str in dtype.descr]


def _dtype_problem(dtype: np.dtype) -> str | None:
    """Why ``dtype`` cannot be a stream record, or None when it can."""
    if dtype.names is None:
        return "is not a structured dtype (give named fields, e.g. [('t_s', '<f8')])"
    for name in dtype.names:
        field = dtype.fields[name][0]
        if field.shape != () or field.kind not in _FIELD_KINDS:
            return (
                f"field {name!r} has type {field.str}; each field must be one bool, "
                "integer or float value"
            )
        if field.str[0] not in "<|":
            return f"field {name!r} has type {field.str}; fields must be little-endian ('<')"
    try:
        rebuilt = np.dtype([tuple(f) for f in _dtype_to_json(dtype)])
    except (TypeError, ValueError):
        rebuilt = None
    if rebuilt != dtype or any(name == "" for name, _ in dtype.descr):
        return "has padding or unusual offsets; use a packed dtype built from a field list"
    return None


def _layout_text(dtype: np.dtype) -> str:
    fields = ", ".join(f"{name}:{type_str}" for name, type_str in dtype.descr)
    return f"[{fields}] ({dtype.itemsize} bytes per record)"


# --------------------------------------------------------------------------- writing


@dataclass
class _StreamState:
    """Book-keeping of one stream (or of the event log) inside the writer."""

    path: Path
    fd: int
    itemsize: int
    pending: list[bytes]
    written_bytes: int = 0
    sha256: Any = None


class RunWriter:
    """Write one run folder: description first, then records and events, then the closing.

    Args:
        folder: the run folder; created if missing (with parents). An existing folder
            must be empty, else SourceError.
        run_id: defaults to a new id made from ``started_utc``.
        started_utc: start of the run (aware datetime); defaults to now.
        cell_name, operator_note, tags, profile_toml, software_version, acquisition:
            copied into ``run.json`` (see docs/run-format.md). ``profile_toml`` is the
            cell profile text; ``acquisition`` is any JSON-able mapping (framing, port,
            nominal rate...). ``software_version`` defaults to the installed version.
        extra_streams: more append-only streams, ``{name: (dtype, {field: unit})}``.
            ``"samples"`` (dtype ``SAMPLE_DTYPE``) always exists and cannot be redeclared.
        flush_interval_s: buffered data is written and fsynced once this long has passed
            since the last flush; ``0 < flush_interval_s <= FLUSH_INTERVAL_MAX_S`` (1 s).
        clock: monotonic clock in seconds, used for the flush rule and event times.

    Data reach the disk when :meth:`append`, :meth:`event` or :meth:`maybe_flush` is called
    after the interval has elapsed, or on :meth:`flush` / :meth:`close`. A loop that may
    go without data should call :meth:`maybe_flush` regularly. Not thread-safe: use it from
    one thread. As a context manager it closes with ``"complete"``, or with ``"failed"``
    when the block raises (the exception propagates).
    """

    def __init__(
        self,
        folder: str | os.PathLike[str],
        *,
        run_id: str | None = None,
        started_utc: datetime | None = None,
        cell_name: str = "",
        operator_note: str = "",
        tags: Sequence[str] = (),
        profile_toml: str = "",
        software_version: str | None = None,
        acquisition: Mapping[str, Any] | None = None,
        extra_streams: Mapping[str, tuple[np.dtype, Mapping[str, str]]] | None = None,
        flush_interval_s: float = 0.25,
        clock: Callable[[], float] = time.monotonic,
    ) -> None:
        self._folder = Path(folder)
        if isinstance(flush_interval_s, bool) or not isinstance(flush_interval_s, int | float):
            raise RunFormatError(f"flush_interval_s = {flush_interval_s!r}: must be a number")
        if not 0.0 < flush_interval_s <= FLUSH_INTERVAL_MAX_S:
            raise RunFormatError(
                f"flush_interval_s = {flush_interval_s!r}: must be > 0 and <= "
                f"{FLUSH_INTERVAL_MAX_S:g} s (at most that much data is lost on a crash)"
            )
        started = datetime.now(UTC) if started_utc is None else started_utc
        started_text = utc_text(started)
        run_id = new_run_id(started) if run_id is None else run_id
        if not isinstance(run_id, str) or not _RUN_ID_RE.match(run_id):
            raise RunFormatError(
                f"run_id = {run_id!r}: must look like 20261201T223015Z-3f9a1c (use new_run_id())"
            )
        for key, text in (
            ("cell_name", cell_name),
            ("operator_note", operator_note),
            ("profile_toml", profile_toml),
        ):
            if not isinstance(text, str):
                raise RunFormatError(f"{key} = {text!r}: must be a string")
        tag_list = _check_tags(tags)
        version = _software_version() if software_version is None else software_version
        if not isinstance(version, str) or not version:
            raise RunFormatError(f"software_version = {version!r}: must be a non-empty string")
        acq = {} if acquisition is None else acquisition
        if not isinstance(acq, Mapping):
            raise RunFormatError(f"acquisition = {acq!r}: must be a mapping")
        acq_dict = json.loads(_to_json(dict(acq), "acquisition"))

        streams: dict[str, tuple[np.dtype, dict[str, str]]] = {
            "samples": (SAMPLE_DTYPE, dict(SAMPLE_UNITS))
        }
        for name, spec in (extra_streams or {}).items():
            streams[name] = _check_stream_spec(name, spec)

        self._clock = clock
        self._interval_s = float(flush_interval_s)
        self._dtypes = {name: dtype for name, (dtype, _) in streams.items()}
        self._closed = False
        self._event_lines = 0

        self._make_empty_folder()
        self._description: dict[str, Any] = {
            "format": RUN_FORMAT,
            "version": RUN_VERSION,
            "run_id": run_id,
            "started_utc": started_text,
            "operator_note": operator_note,
            "tags": tag_list,
            "cell_name": cell_name,
            "profile_toml": profile_toml,
            "software_version": version,
            "acquisition": acq_dict,
            "streams": {
                name: {
                    "file": f"{name}.bin",
                    "dtype": _dtype_to_json(dtype),
                    "itemsize": dtype.itemsize,
                    "byte_order": "little",
                    "units": units,
                }
                for name, (dtype, units) in streams.items()
            },
        }
        self._streams: dict[str, _StreamState] = {}
        try:
            _write_atomic_json(self._folder / DESCRIPTION_FILE, self._description)
            for name, dtype in self._dtypes.items():
                self._streams[name] = self._open_append(f"{name}.bin", dtype.itemsize)
            self._events = self._open_append(EVENTS_FILE, 1)
            _fsync_folder(self._folder)
        except OSError as exc:
            self._close_files()
            raise SourceError(f"{self._folder}: cannot start the run ({exc})") from exc
        self._last_flush_s = self._clock()

    @classmethod
    def new(cls, root: str | os.PathLike[str], **kwargs: Any) -> RunWriter:
        """Start a run in a new folder ``<root>/<run_id>``; keyword arguments as for the class."""
        started = kwargs.pop("started_utc", None) or datetime.now(UTC)
        run_id = kwargs.pop("run_id", None) or new_run_id(started)
        return cls(Path(root) / run_id, run_id=run_id, started_utc=started, **kwargs)

    # ----------------------------------------------------------------------- properties

    @property
    def folder(self) -> Path:
        """The run folder."""
        return self._folder

    @property
    def run_id(self) -> str:
        """The run id stored in ``run.json``."""
        return str(self._description["run_id"])

    @property
    def description(self) -> dict[str, Any]:
        """A copy of what was written to ``run.json``."""
        return json.loads(json.dumps(self._description))

    @property
    def closed(self) -> bool:
        """True once :meth:`close` has run."""
        return self._closed

    @property
    def flushed_records(self) -> int:
        """Samples written and fsynced so far (safe on disk even if the process dies now)."""
        return self.records_on_disk("samples")

    def records_on_disk(self, stream: str = "samples") -> int:
        """Records of ``stream`` written and fsynced so far."""
        state = self._stream(stream)
        return state.written_bytes // state.itemsize

    def pending_records(self, stream: str = "samples") -> int:
        """Records of ``stream`` accepted but still in memory."""
        state = self._stream(stream)
        return sum(len(b) for b in state.pending) // state.itemsize

    # ----------------------------------------------------------------------- data in

    def append(self, block: np.ndarray, stream: str = "samples") -> None:
        """Accept a 1-D block of records of ``stream``'s dtype, shape (n,); flush if due.

        Raises FramingError naming the stream and both dtypes when the dtype differs.
        """
        self._check_open("append")
        state = self._stream(stream)
        dtype = self._dtypes[stream]
        if not isinstance(block, np.ndarray) or block.dtype != dtype:
            got = getattr(block, "dtype", type(block).__name__)
            raise FramingError(
                f"append to stream {stream!r}: block has dtype {got}; this stream records "
                f"{_layout_text(dtype)}"
            )
        if block.ndim != 1:
            raise FramingError(
                f"append to stream {stream!r}: block has shape {block.shape}; pass a 1-D block"
            )
        if block.size:
            state.pending.append(np.ascontiguousarray(block).tobytes())
        self.maybe_flush()

    def event(
        self,
        kind: str,
        message: str = "",
        *,
        host_time_s: float | None = None,
        utc: str | datetime | None = None,
        **fields: Any,
    ) -> None:
        """Log one event line; flushed with the same rule as records.

        ``kind`` is a short lower-case word (``mark``, ``alarm``, ``disconnected``,
        ``reconnected``, ``tare``, ``note``...: letters, digits, ``-``, ``_``).
        ``host_time_s`` defaults to the writer's clock, ``utc`` to now. Extra ``fields``
        (e.g. ``seq=1234``) must be JSON-able.
        """
        self._check_open("event")
        if not isinstance(kind, str) or not _EVENT_KIND_RE.match(kind):
            raise RunFormatError(
                f"event kind {kind!r}: must be 1-32 lower-case letters, digits, '-' or '_', "
                "starting with a letter (e.g. 'mark')"
            )
        if not isinstance(message, str):
            raise RunFormatError(f"event message {message!r}: must be a string")
        t = self._clock() if host_time_s is None else host_time_s
        if isinstance(t, bool) or not isinstance(t, int | float | np.floating | np.integer):
            raise RunFormatError(f"event host_time_s = {t!r}: must be a number of seconds")
        if isinstance(utc, datetime):
            utc_str = utc_text(utc)
        elif utc is None:
            utc_str = utc_text(datetime.now(UTC))
        else:
            utc_str = str(utc)
        record: dict[str, Any] = {
            "host_time_s": float(t) if math.isfinite(float(t)) else None,
            "utc": utc_str,
            "kind": kind,
            "message": message,
        }
        record.update(fields)
        line = _to_json(record, f"event {kind!r}") + "\n"
        self._events.pending.append(line.encode("utf-8"))
        self.maybe_flush()

    # ----------------------------------------------------------------------- flushing

    def maybe_flush(self) -> bool:
        """Flush if data are waiting and ``flush_interval_s`` has passed since the last flush.

        Returns True when it flushed.
        """
        if self._closed or not self._has_pending():
            return False
        if self._clock() - self._last_flush_s < self._interval_s:
            return False
        self.flush()
        return True

    def flush(self) -> int:
        """Write and fsync everything buffered now; return :attr:`flushed_records`."""
        self._check_open("flush")
        for state in (*self._streams.values(), self._events):
            self._write_pending(state)
        self._last_flush_s = self._clock()
        return self.flushed_records

    # ----------------------------------------------------------------------- closing

    def close(self, status: str = "complete", summary: Mapping[str, Any] | None = None) -> None:
        """Flush, then write ``closing.json`` with ``status`` and the caller's ``summary``.

        ``status`` is one of ``complete``, ``aborted``, ``failed``. A second call does nothing.
        """
        if self._closed:
            return
        if status not in CLOSING_STATUSES:
            raise RunFormatError(
                f"close status {status!r}: must be one of {', '.join(CLOSING_STATUSES)}"
            )
        summary_dict = json.loads(_to_json(dict(summary or {}), "close summary"))
        try:
            self.flush()
            closing = {
                "status": status,
                "ended_utc": utc_text(datetime.now(UTC)),
                "streams": {
                    name: {
                        "records": state.written_bytes // state.itemsize,
                        "sha256": state.sha256.hexdigest(),
                    }
                    for name, state in self._streams.items()
                },
                "events": {
                    "lines": self._event_lines,
                    "sha256": self._events.sha256.hexdigest(),
                },
                # run.json too: its copy of the profile decides every replayed number.
                "description_sha256": _sha256_of(self._folder / DESCRIPTION_FILE),
                "summary": summary_dict,
            }
            self._close_files()
            _write_atomic_json(self._folder / CLOSING_FILE, closing)
        except SourceError:
            raise
        except OSError as exc:
            raise SourceError(f"{self._folder}: cannot close the run ({exc})") from exc
        finally:
            self._closed = True
            self._close_files()

    def __enter__(self) -> RunWriter:
        return self

    def __exit__(
        self,
        exc_type: type[BaseException] | None,
        exc: BaseException | None,
        tb: TracebackType | None,
    ) -> None:
        if exc is None:
            self.close("complete")
            return
        try:
            self.close("failed", {"error": f"{type(exc).__name__}: {exc}"})
        except Exception as close_exc:  # keep the original exception in front
            exc.add_note(f"the run in {self._folder} could not be closed: {close_exc}")

    # ----------------------------------------------------------------------- internals

    def _make_empty_folder(self) -> None:
        folder = self._folder
        try:
            if folder.exists():
                if not folder.is_dir():
                    raise SourceError(f"{folder}: exists and is not a folder; choose a new path")
                if any(folder.iterdir()):
                    raise SourceError(
                        f"{folder}: folder is not empty; a run needs a new or empty folder"
                    )
            else:
                folder.mkdir(parents=True)
                _fsync_folder(folder.parent)
        except SourceError:
            raise
        except OSError as exc:
            raise SourceError(f"{folder}: cannot create the run folder ({exc})") from exc

    def _open_append(self, name: str, itemsize: int) -> _StreamState:
        path = self._folder / name
        flags = os.O_WRONLY | os.O_CREAT | os.O_EXCL | os.O_APPEND | getattr(os, "O_BINARY", 0)
        fd = os.open(path, flags, 0o644)
        return _StreamState(path, fd, itemsize, [], 0, hashlib.sha256())

    def _close_files(self) -> None:
        states = list(self._streams.values())
        if hasattr(self, "_events"):
            states.append(self._events)
        for state in states:
            if state.fd >= 0:
                with contextlib.suppress(OSError):
                    os.close(state.fd)
                state.fd = -1

    def _has_pending(self) -> bool:
        return any(s.pending for s in self._streams.values()) or bool(self._events.pending)

    def _write_pending(self, state: _StreamState) -> None:
        """os.write every pending byte of one file, then fsync it; hash what was written."""
        if not state.pending:
            return
        data = memoryview(b"".join(state.pending))
        state.pending.clear()
        done = 0
        try:
            while done < len(data):
                n = os.write(state.fd, data[done:])
                state.sha256.update(data[done : done + n])
                done += n
            os.fsync(state.fd)
        except OSError as exc:
            if done < len(data):  # keep what did not reach the file for the next attempt
                state.pending.insert(0, bytes(data[done:]))
            raise SourceError(f"{state.path}: cannot write ({exc})") from exc
        finally:
            state.written_bytes += done
            if state is self._events:
                self._event_lines += data[:done].tobytes().count(b"\n")

    def _stream(self, stream: str) -> _StreamState:
        try:
            return self._streams[stream]
        except KeyError:
            raise RunFormatError(
                f"stream {stream!r} is not declared in this run; known streams: "
                f"{', '.join(self._streams)} (declare more with extra_streams=)"
            ) from None

    def _check_open(self, action: str) -> None:
        if self._closed:
            raise SourceError(f"{self._folder}: cannot {action}: the run writer is closed")


def _check_tags(tags: Sequence[str]) -> list[str]:
    if isinstance(tags, str):
        raise RunFormatError(f"tags = {tags!r}: pass a list of strings, e.g. ['creep', 'cell-3']")
    out: list[str] = []
    for tag in tags:
        if not isinstance(tag, str) or not tag.strip() or tag != tag.strip():
            raise RunFormatError(
                f"tag {tag!r}: each tag must be a non-empty string without surrounding spaces"
            )
        if tag not in out:
            out.append(tag)
    return out


def _check_stream_spec(name: str, spec: object) -> tuple[np.dtype, dict[str, str]]:
    if not isinstance(name, str) or not _STREAM_NAME_RE.match(name):
        raise RunFormatError(
            f"stream name {name!r}: must be 1-32 lower-case letters, digits or '_', "
            "starting with a letter"
        )
    if name == "samples":
        raise RunFormatError(
            "stream name 'samples' is reserved for the samples stream; choose another name"
        )
    try:
        raw_dtype, units = spec  # type: ignore[misc]
        dtype = np.dtype(raw_dtype)
    except (TypeError, ValueError):
        raise RunFormatError(
            f"stream {name!r}: give (dtype, {{field: unit}}), got {spec!r}"
        ) from None
    problem = _dtype_problem(dtype)
    if problem:
        raise RunFormatError(f"stream {name!r}: dtype {dtype} {problem}")
    if not isinstance(units, Mapping) or set(units) != set(dtype.names or ()):
        raise RunFormatError(
            f"stream {name!r}: units {units!r} must name exactly the fields "
            f"{', '.join(dtype.names or ())}, e.g. {{'t_s': 's'}} ('1' for a pure number)"
        )
    for field, unit in units.items():
        if not isinstance(unit, str) or not unit:
            raise RunFormatError(
                f"stream {name!r}: unit of {field!r} is {unit!r}; give a non-empty string"
            )
    return dtype, {field: units[field] for field in dtype.names or ()}


# --------------------------------------------------------------------------- reading


@dataclass(frozen=True)
class RunInfo:
    """What a run folder says about itself, without loading records.

    ``records`` and ``torn_bytes`` come from the file sizes: whole records on disk and
    the bytes of an incomplete last record, per stream. ``closing`` is None for a run
    that was never closed.
    """

    folder: Path
    description: dict[str, Any]
    closing: dict[str, Any] | None
    dtypes: dict[str, np.dtype]
    records: dict[str, int]
    torn_bytes: dict[str, int]

    @property
    def run_id(self) -> str:
        """The run id from ``run.json``."""
        return str(self.description["run_id"])

    @property
    def closed(self) -> bool:
        """True when ``closing.json`` exists."""
        return self.closing is not None

    @property
    def status(self) -> str | None:
        """``complete``, ``aborted``, ``failed``, or None when not closed."""
        return None if self.closing is None else str(self.closing["status"])


@dataclass(frozen=True)
class RunData:
    """A run read back by :func:`read_run`.

    Attributes:
        description: ``run.json`` as a dict.
        samples: shape (n,), dtype ``SAMPLE_DTYPE``; may be a read-only memmap.
        streams: every stream by name (``"samples"`` included), 1-D structured arrays.
        events: ``events.jsonl`` lines as dicts, in file order.
        closing: ``closing.json`` as a dict, or None when the run was not closed.
        closed: True when ``closing.json`` exists.
        torn_bytes: per stream, bytes ignored at the end because the last record was torn.
        torn_event_line: True when an incomplete last line of ``events.jsonl`` was ignored.
        warnings: human-readable remarks about what was tolerated.
        folder: the run folder.
    """

    description: dict[str, Any]
    samples: np.ndarray
    streams: dict[str, np.ndarray]
    events: list[dict[str, Any]]
    closing: dict[str, Any] | None
    closed: bool
    torn_bytes: dict[str, int]
    torn_event_line: bool
    warnings: list[str]
    folder: Path

    @property
    def run_id(self) -> str:
        """The run id from ``run.json``."""
        return str(self.description["run_id"])

    @property
    def status(self) -> str | None:
        """``complete``, ``aborted``, ``failed``, or None when not closed."""
        return None if self.closing is None else str(self.closing["status"])


def _load_json(path: Path) -> Any:
    checked_file(path, path.parent, "run description or closing record", MAX_JSON_BYTES)
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise RunFormatError(f"{path}: missing") from None
    except OSError as exc:
        raise RunFormatError(f"{path}: cannot read ({exc.strerror or exc})") from None
    except UnicodeDecodeError as exc:
        raise RunFormatError(f"{path}: not UTF-8 text ({exc.reason})") from None
    try:
        return json.loads(text)
    except json.JSONDecodeError as exc:
        raise RunFormatError(
            f"{path}: not valid JSON (line {exc.lineno}, column {exc.colno}: {exc.msg})"
        ) from None
    except RecursionError:
        raise RunFormatError(f"{path}: JSON nested too deeply to be a forcelens file") from None


def _need(path: Path, data: Mapping[str, Any], key: str, types: Any, what: str) -> Any:
    if key not in data:
        raise RunFormatError(f"{path}: key {key!r} is missing ({what})")
    value = data[key]
    if isinstance(value, bool) and bool not in (types if isinstance(types, tuple) else (types,)):
        raise RunFormatError(f"{path}: {key} = {value!r}: must be {what}")
    if not isinstance(value, types):
        raise RunFormatError(f"{path}: {key} = {value!r}: must be {what}")
    return value


def _check_stream_description(path: Path, name: str, spec: object) -> np.dtype:
    where = f"streams.{name}"
    if not isinstance(spec, Mapping):
        raise RunFormatError(f"{path}: {where} must be a mapping")
    file_name = _need(path, spec, "file", str, f"the {where} data file name")
    if Path(file_name).name != file_name or file_name in ("", ".", ".."):
        raise RunFormatError(f"{path}: {where}.file = {file_name!r}: must be a plain file name")
    descr = _need(path, spec, "dtype", list, f"the {where} NumPy dtype descr, a list")
    try:
        dtype = np.dtype([tuple(field) for field in descr])
    except (TypeError, ValueError) as exc:
        raise RunFormatError(f"{path}: {where}.dtype = {descr!r}: not a dtype ({exc})") from None
    problem = _dtype_problem(dtype)
    if problem:
        raise RunFormatError(f"{path}: {where}.dtype {problem}")
    itemsize = _need(path, spec, "itemsize", int, f"the {where} record size in bytes")
    if itemsize != dtype.itemsize:
        raise RunFormatError(
            f"{path}: {where}.itemsize = {itemsize} but its dtype has "
            f"{dtype.itemsize} bytes per record; the layout is inconsistent"
        )
    byte_order = _need(path, spec, "byte_order", str, "'little'")
    if byte_order != "little":
        raise RunFormatError(
            f"{path}: {where}.byte_order = {byte_order!r}: this software reads 'little' only"
        )
    units = _need(path, spec, "units", dict, "a mapping field -> unit")
    if set(units) != set(dtype.names or ()):
        raise RunFormatError(
            f"{path}: {where}.units names {sorted(units)}; must name exactly the fields "
            f"{list(dtype.names or ())}"
        )
    if name == "samples" and dtype != SAMPLE_DTYPE:
        got = dict(dtype.descr)
        want = dict(SAMPLE_DTYPE.descr)
        diffs = [f"field {f!r} missing" for f in want if f not in got]
        diffs += [f"unknown field {f!r}" for f in got if f not in want]
        diffs += [
            f"field {f!r} is {got[f]}, expected {want[f]}"
            for f in want
            if f in got and got[f] != want[f]
        ]
        if not diffs:
            diffs.append("fields in a different order")
        raise RunFormatError(
            f"{path}: stream 'samples' has an unsupported layout {_layout_text(dtype)}: "
            f"{'; '.join(diffs)}; this software records {_layout_text(SAMPLE_DTYPE)}"
        )
    return dtype


def _check_description(path: Path, data: object) -> dict[str, np.dtype]:
    """Validate ``run.json``; return the dtype of each stream."""
    if not isinstance(data, dict):
        raise RunFormatError(f"{path}: must hold a JSON object, got {type(data).__name__}")
    fmt = data.get("format")
    if fmt != RUN_FORMAT:
        raise RunFormatError(
            f"{path}: format = {fmt!r}: not a forcelens run (expected {RUN_FORMAT!r})"
        )
    version = data.get("version")
    if isinstance(version, bool) or not isinstance(version, int):
        raise RunFormatError(f"{path}: version = {version!r}: must be a whole number, e.g. 1")
    if version not in SUPPORTED_RUN_VERSIONS:
        readable = ", ".join(str(v) for v in SUPPORTED_RUN_VERSIONS)
        hint = "; a newer forcelens is needed to read it" if version > RUN_VERSION else ""
        raise RunFormatError(
            f"{path}: version = {version}: unknown run version; this software reads "
            f"version {readable} only{hint}"
        )
    _need(path, data, "run_id", str, "the run id, a string")
    started = _need(path, data, "started_utc", str, "ISO 8601 UTC text ending in Z")
    _parse_utc(path, "started_utc", started)
    for key in ("operator_note", "cell_name", "profile_toml", "software_version"):
        _need(path, data, key, str, "a string")
    tags = _need(path, data, "tags", list, "a list of strings")
    if not all(isinstance(tag, str) for tag in tags):
        raise RunFormatError(f"{path}: tags = {tags!r}: must be a list of strings")
    _need(path, data, "acquisition", dict, "a mapping")
    streams = _need(path, data, "streams", dict, "a mapping of stream name -> layout")
    if "samples" not in streams:
        raise RunFormatError(f"{path}: streams has no 'samples' stream")
    return {name: _check_stream_description(path, name, spec) for name, spec in streams.items()}


def _parse_utc(path: Path, key: str, text: str) -> datetime:
    try:
        moment = datetime.fromisoformat(text)
    except ValueError:
        moment = None
    if moment is None or not text.endswith("Z"):
        raise RunFormatError(
            f"{path}: {key} = {text!r}: must be ISO 8601 UTC text ending in Z, "
            "e.g. 2026-12-01T22:30:15.000000Z"
        )
    return moment


def _check_closing(path: Path, data: object, dtypes: Mapping[str, np.dtype]) -> dict[str, Any]:
    if not isinstance(data, dict):
        raise RunFormatError(f"{path}: must hold a JSON object, got {type(data).__name__}")
    status = _need(path, data, "status", str, "one of " + ", ".join(CLOSING_STATUSES))
    if status not in CLOSING_STATUSES:
        raise RunFormatError(
            f"{path}: status = {status!r}: must be one of {', '.join(CLOSING_STATUSES)}"
        )
    ended = _need(path, data, "ended_utc", str, "ISO 8601 UTC text ending in Z")
    _parse_utc(path, "ended_utc", ended)
    _need(path, data, "summary", dict, "a mapping")
    streams = _need(path, data, "streams", dict, "a mapping of stream name -> counts")
    for name in dtypes:
        if name not in streams:
            raise RunFormatError(f"{path}: streams has no entry for stream {name!r}")
    for name, entry in streams.items():
        if name not in dtypes:
            raise RunFormatError(f"{path}: streams.{name} is not a stream of run.json")
        _check_count_entry(path, f"streams.{name}", entry, "records")
    # Every key is required and no other is allowed: a closing record with a hash
    # removed (or one added) no longer vouches for the files, and verify must say so
    # instead of skipping the check.
    unknown = sorted(set(data) - _CLOSING_KEYS)
    if unknown:
        raise RunFormatError(
            f"{path}: unknown key(s) {', '.join(map(repr, unknown))}; a closing record holds "
            f"exactly {', '.join(sorted(_CLOSING_KEYS))}"
        )
    if "events" not in data:
        raise RunFormatError(
            f"{path}: key 'events' is missing (line count and SHA-256 of {EVENTS_FILE}); "
            "without it the closing record cannot vouch for the event log (removed?)"
        )
    _check_count_entry(path, "events", data["events"], "lines")
    digest = data.get("description_sha256")
    if not isinstance(digest, str) or not _SHA256_RE.match(digest):
        raise RunFormatError(
            f"{path}: description_sha256 = {digest!r}: must be 64 lower-case hex digits (the "
            f"SHA-256 of {DESCRIPTION_FILE}); without it the closing record cannot vouch for "
            "the run description and its profile copy (removed?)"
        )
    return data


_CLOSING_KEYS = frozenset(
    {"status", "ended_utc", "summary", "streams", "events", "description_sha256"}
)


def _check_count_entry(path: Path, where: str, entry: object, count_key: str) -> None:
    if not isinstance(entry, dict):
        raise RunFormatError(f"{path}: {where} must be a mapping")
    count = entry.get(count_key)
    if isinstance(count, bool) or not isinstance(count, int) or count < 0:
        raise RunFormatError(f"{path}: {where}.{count_key} = {count!r}: must be a whole number")
    digest = entry.get("sha256")
    if not isinstance(digest, str) or not _SHA256_RE.match(digest):
        raise RunFormatError(
            f"{path}: {where}.sha256 = {digest!r}: must be 64 lower-case hex digits"
        )


def read_run_info(folder: str | os.PathLike[str]) -> RunInfo:
    """Read and check ``run.json`` and ``closing.json`` and measure the stream files.

    No records are loaded, so this is cheap for any run size. Raises RunFormatError naming
    the file and the problem (missing folder, bad JSON, unknown format or version,
    unsupported layout, missing stream file...).
    """
    root = Path(folder)
    if not root.is_dir():
        raise RunFormatError(f"{root}: run folder is missing")
    desc_path = root / DESCRIPTION_FILE
    description = _load_json(desc_path)
    dtypes = _check_description(desc_path, description)
    closing_path = root / CLOSING_FILE
    closing = None
    if closing_path.exists():
        closing = _check_closing(closing_path, _load_json(closing_path), dtypes)
    records: dict[str, int] = {}
    torn: dict[str, int] = {}
    for name, dtype in dtypes.items():
        path = root / description["streams"][name]["file"]
        size = checked_file(path, root, f"data file of stream {name!r}")
        records[name], torn[name] = divmod(size, dtype.itemsize)
    return RunInfo(root, description, closing, dtypes, records, torn)


def _stream_path(info: RunInfo, name: str) -> Path:
    return info.folder / info.description["streams"][name]["file"]


def _load_stream(info: RunInfo, name: str, use_memmap: bool) -> np.ndarray:
    path = _stream_path(info, name)
    dtype = info.dtypes[name]
    n = info.records[name]
    if n == 0:
        return np.empty(0, dtype=dtype)
    if use_memmap:
        return np.memmap(path, dtype=dtype, mode="r", shape=(n,))
    return np.fromfile(path, dtype=dtype, count=n)


def _read_events(path: Path) -> tuple[list[dict[str, Any]], bool, int]:
    """Parse ``events.jsonl``; return (events, torn last line?, torn byte count)."""
    checked_file(path, path.parent, "event log", MAX_EVENTS_BYTES)
    try:
        raw = path.read_bytes()
    except OSError as exc:
        raise RunFormatError(f"{path}: cannot read ({exc.strerror or exc})") from None
    lines = raw.split(b"\n")
    tail = lines.pop()  # bytes after the last newline: empty unless the last line is torn
    events: list[dict[str, Any]] = []
    for number, line in enumerate(lines, start=1):
        try:
            event = json.loads(line.decode("utf-8"))
        except (UnicodeDecodeError, json.JSONDecodeError, RecursionError) as exc:
            raise RunFormatError(
                f"{path}: line {number} is not a JSON object ({exc}); the event log is corrupt"
            ) from None
        if not isinstance(event, dict) or not all(k in event for k in _EVENT_RESERVED):
            raise RunFormatError(
                f"{path}: line {number} lacks one of {', '.join(_EVENT_RESERVED)}; "
                "the event log is corrupt"
            )
        events.append(event)
    return events, bool(tail), len(tail)


def _closing_problems(info: RunInfo, event_lines: int | None, check_hash: bool) -> list[str]:
    """Compare the files with ``closing.json``: counts always, SHA-256 when asked."""
    if info.closing is None:
        return []
    problems: list[str] = []
    closing_path = info.folder / CLOSING_FILE
    for name, entry in info.closing["streams"].items():
        path = _stream_path(info, name)
        itemsize = info.dtypes[name].itemsize
        want = entry["records"]
        size = path.stat().st_size
        if size != want * itemsize:
            change = "truncated after closing" if size < want * itemsize else "grew after closing"
            problems.append(
                f"{path}: {change}: {closing_path.name} says {want} records "
                f"({want * itemsize} bytes) but the file holds {size} bytes "
                f"({size // itemsize} whole records)"
            )
        elif check_hash and _sha256_of(path) != entry["sha256"]:
            problems.append(
                f"{path}: SHA-256 differs from {closing_path.name}; the file was changed "
                "after the run was closed (tampered or damaged)"
            )
    description_sha = info.closing.get("description_sha256")
    description = info.folder / DESCRIPTION_FILE
    if check_hash and description_sha is not None and _sha256_of(description) != description_sha:
        problems.append(
            f"{description}: SHA-256 differs from {closing_path.name}; the run description "
            "(with its copy of the cell profile) was changed after the run was closed"
        )
    events_entry = info.closing.get("events")
    if events_entry is not None:
        path = info.folder / EVENTS_FILE
        if event_lines is not None and event_lines != events_entry["lines"]:
            problems.append(
                f"{path}: {closing_path.name} says {events_entry['lines']} lines but the file "
                f"holds {event_lines}"
            )
        elif check_hash and path.exists() and _sha256_of(path) != events_entry["sha256"]:
            problems.append(
                f"{path}: SHA-256 differs from {closing_path.name}; the event log was changed "
                "after the run was closed"
            )
    return problems


def _sha256_of(path: Path) -> str:
    with path.open("rb") as handle:
        return hashlib.file_digest(handle, "sha256").hexdigest()


def read_run(
    folder: str | os.PathLike[str], *, check_hash: bool = True, memmap: bool = True
) -> RunData:
    """Read a run folder written by :class:`RunWriter`.

    Tolerated (reported in ``warnings``): no ``closing.json`` (``closed`` False); a torn
    last record of a stream (``torn_bytes``); a torn last line of ``events.jsonl``
    (``torn_event_line``). Everything else raises RunFormatError naming the file: missing
    folder or file, invalid JSON, wrong format, unknown version, unsupported layout, a
    corrupt event line before the last, record counts differing from ``closing.json``,
    and, when ``check_hash`` is True and the run is closed, a SHA-256 mismatch.

    With ``memmap`` True the streams are read-only memory maps (nothing is loaded until
    used); otherwise they are read into memory.
    """
    info = read_run_info(folder)
    events, torn_line, torn_line_bytes = _read_events(info.folder / EVENTS_FILE)
    problems = _closing_problems(info, len(events), check_hash)
    if problems:
        raise RunFormatError("; ".join(problems))
    warnings: list[str] = []
    if info.closing is None:
        warnings.append(
            f"{info.folder}: no {CLOSING_FILE}: the recording did not finish (crash or "
            "still running); everything flushed before that is read"
        )
    for name, extra in info.torn_bytes.items():
        if extra:
            warnings.append(
                f"{_stream_path(info, name)}: last {extra} bytes ignored (a torn record of "
                f"{info.dtypes[name].itemsize} bytes)"
            )
    if torn_line:
        warnings.append(
            f"{info.folder / EVENTS_FILE}: torn last line ({torn_line_bytes} bytes) ignored"
        )
    streams = {name: _load_stream(info, name, memmap) for name in info.dtypes}
    return RunData(
        description=info.description,
        samples=streams["samples"],
        streams=streams,
        events=events,
        closing=info.closing,
        closed=info.closed,
        torn_bytes=dict(info.torn_bytes),
        torn_event_line=torn_line,
        warnings=warnings,
        folder=info.folder,
    )


# --------------------------------------------------------------------------- verifying


@dataclass(frozen=True)
class VerifyReport:
    """Result of :func:`verify_run`.

    ``ok`` is True when the run is closed, every file matches ``closing.json`` (counts and
    SHA-256) and the sample sequence numbers are consistent. ``records`` gives whole records
    per stream. ``problems`` make ``ok`` False; ``notes`` are facts worth knowing (flagged
    gaps, reconnections, an aborted or failed status) that do not.
    """

    ok: bool
    closed: bool
    status: str | None
    records: dict[str, int]
    problems: list[str]
    notes: list[str]
    folder: str = ""

    def text(self) -> str:
        """Plain-text report, one fact per line, for the command line."""
        lines = [f"run folder: {self.folder}", f"verdict: {'OK' if self.ok else 'NOT OK'}"]
        lines.append(f"closed: yes, status {self.status}" if self.closed else "closed: no")
        for name, count in self.records.items():
            lines.append(f"records in {name}: {count}")
        lines += [f"problem: {p}" for p in self.problems]
        lines += [f"note: {n}" for n in self.notes]
        return "\n".join(lines)


def _sequence_findings(seq: np.ndarray, flags: np.ndarray) -> tuple[list[str], list[str]]:
    """Problems and notes about sample sequence numbers; arrays of shape (n,)."""
    problems: list[str] = []
    notes: list[str] = []
    if seq.size < 2:
        return problems, notes
    step = np.diff(seq)
    flagged = (flags[1:] & FLAG_GAP_BEFORE) != 0
    odd = step != 1
    unflagged = np.flatnonzero(odd & ~flagged)
    if unflagged.size:
        i = int(unflagged[0]) + 1
        problems.append(
            f"samples: {unflagged.size} unflagged break(s) in seq, first at record {i} "
            f"(seq {int(seq[i - 1])} -> {int(seq[i])}) without FLAG_GAP_BEFORE"
        )
    gaps = odd & flagged & (step > 1)
    if gaps.any():
        lost = int(np.sum(step[gaps] - 1))
        notes.append(f"samples: {int(gaps.sum())} flagged gap(s), {lost} sample(s) lost in them")
    restarts = odd & flagged & (step <= 0)
    if restarts.any():
        notes.append(f"samples: seq restarted {int(restarts.sum())} time(s) (flagged)")
    return problems, notes


def verify_run(folder: str | os.PathLike[str]) -> VerifyReport:
    """Check a run folder and report; never raises RunFormatError.

    Checks: the description and closing are valid; the run was closed; record counts and
    SHA-256 of every file match ``closing.json``; no torn record or event line; sample
    ``seq`` increases by 1 except where ``FLAG_GAP_BEFORE`` marks a gap (counted in notes).
    """
    where = str(folder)
    try:
        info = read_run_info(folder)
    except RunFormatError as exc:
        return VerifyReport(False, False, None, {}, [str(exc)], [], where)
    problems: list[str] = []
    notes: list[str] = []
    event_lines: int | None = None
    try:
        events, torn_line, torn_line_bytes = _read_events(info.folder / EVENTS_FILE)
        event_lines = len(events)
        if torn_line:
            problems.append(
                f"{info.folder / EVENTS_FILE}: torn last line ({torn_line_bytes} bytes)"
            )
        kinds: dict[str, int] = {}
        for event in events:
            kinds[str(event["kind"])] = kinds.get(str(event["kind"]), 0) + 1
        if kinds:
            notes.append("events: " + ", ".join(f"{k} {n}" for k, n in sorted(kinds.items())))
    except RunFormatError as exc:
        problems.append(str(exc))
    if info.closing is None:
        problems.append(f"{info.folder}: not closed (no {CLOSING_FILE}); the recording stopped")
    else:
        problems += _closing_problems(info, event_lines, check_hash=True)
        if info.status != "complete":
            notes.append(f"closed with status {info.status!r}")
    for name, extra in info.torn_bytes.items():
        if extra:
            problems.append(f"{_stream_path(info, name)}: {extra} bytes of a torn last record")
    samples = _load_stream(info, "samples", use_memmap=True)
    seq_problems, seq_notes = _sequence_findings(
        np.asarray(samples["seq"]), np.asarray(samples["flags"])
    )
    problems += seq_problems
    notes += seq_notes
    reconnects = int(np.count_nonzero(np.asarray(samples["flags"]) & FLAG_RECONNECT_BEFORE))
    if reconnects:
        notes.append(f"samples: {reconnects} reconnection(s) flagged")
    return VerifyReport(
        ok=not problems,
        closed=info.closed,
        status=info.status,
        records=dict(info.records),
        problems=problems,
        notes=notes,
        folder=where,
    )


# --------------------------------------------------------------------------- CSV export


def csv_column_name(field: str, unit: str) -> str:
    """Header text of one CSV column: the field name, a space, the unit in brackets.

    E.g. ``device_time_s [s]``, ``counts [count]``, ``seq [1]`` (``1``: a pure number).
    """
    return f"{field} [{unit}]"


def _column_text(values: np.ndarray) -> list[str]:
    """Text of one column; floats with repr (shortest exact), integers and bools as ints."""
    if values.dtype.kind == "f":
        return [repr(v) for v in values.astype(np.float64).tolist()]
    return [str(int(v)) for v in values.tolist()]


def export_run_csv(run: RunData, path: str | os.PathLike[str], *, stream: str = "samples") -> int:
    """Write one stream of ``run`` to ``path`` as CSV; return the number of data rows.

    The file starts with ``#`` comment lines (run id, start, cell, software version,
    closed status, stream), then a header with one column per field named by
    :func:`csv_column_name`, then one row per record. Floats are written with
    :func:`repr`, so ``float(text)`` gives back the exact stored value (``nan``,
    ``inf`` included). The file is written to a temporary name and renamed.
    """
    if stream not in run.streams:
        raise RunFormatError(
            f"stream {stream!r} is not in run {run.run_id}; streams: {', '.join(run.streams)}"
        )
    data = run.streams[stream]
    units = run.description["streams"][stream]["units"]
    names = list(data.dtype.names or ())
    closed = f"yes, status {run.status}" if run.closed else "no (the recording did not finish)"
    head = [
        f"# forcelens run {run.run_id}",
        f"# started_utc: {run.description['started_utc']}",
        f"# cell: {run.description['cell_name']}",
        f"# software_version: {run.description['software_version']}",
        f"# closed: {closed}",
        f"# stream: {stream}",
        ",".join(csv_column_name(n, units[n]) for n in names),
    ]
    target = Path(path)
    fd, tmp_name = tempfile.mkstemp(dir=target.parent, prefix=f".{target.name}.", suffix=".tmp")
    try:
        with os.fdopen(fd, "w", encoding="utf-8", newline="\n") as handle:
            handle.write("\n".join(line.replace("\n", " ") for line in head) + "\n")
            chunk = 65536
            for start in range(0, data.shape[0], chunk):
                part = data[start : start + chunk]
                columns = [_column_text(np.asarray(part[n])) for n in names]
                handle.writelines(",".join(row) + "\n" for row in zip(*columns, strict=True))
        os.replace(tmp_name, target)
    except OSError as exc:
        with contextlib.suppress(FileNotFoundError):
            os.unlink(tmp_name)
        raise SourceError(f"{target}: cannot write the CSV export ({exc})") from exc
    return int(data.shape[0])
