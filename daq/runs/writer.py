"""Writing a run crash-tolerantly: `RunWriter`."""

from __future__ import annotations

import contextlib
import hashlib
import json
import math
import os
import tempfile
import time
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from datetime import UTC, datetime
from pathlib import Path
from types import TracebackType
from typing import Any

import numpy as np

from daq.errors import FramingError, RunFormatError, SourceError
from daq.runs.layout import (
    CLOSING_FILE,
    CLOSING_STATUSES,
    DESCRIPTION_FILE,
    EVENT_KIND_RE,
    EVENTS_FILE,
    FLUSH_INTERVAL_MAX_S,
    RUN_FORMAT,
    RUN_ID_RE,
    RUN_VERSION,
    STREAM_NAME_RE,
    dtype_problem,
    dtype_to_json,
    installed_version,
    layout_text,
    library_versions,
    new_run_id,
    platform_facts,
    sha256_of,
    to_json,
    utc_text,
)
from daq.samples import SAMPLE_DTYPE, SAMPLE_UNITS


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
        libraries: name → version of the libraries a bit-identical replay depends on;
            defaults to the installed versions of ``REPLAY_LIBRARIES`` (NumPy, SciPy,
            numba, filterpy).
        platform_info: the interpreter and the machine (``python``, ``implementation``,
            ``machine``, ``system``); defaults to this one (`platform_facts`).
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
        libraries: Mapping[str, str] | None = None,
        platform_info: Mapping[str, str] | None = None,
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
        if not isinstance(run_id, str) or not RUN_ID_RE.match(run_id):
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
        version = installed_version() if software_version is None else software_version
        if not isinstance(version, str) or not version:
            raise RunFormatError(f"software_version = {version!r}: must be a non-empty string")
        libs = library_versions() if libraries is None else dict(libraries)
        if not all(isinstance(k, str) and isinstance(v, str) for k, v in libs.items()):
            raise RunFormatError(f"libraries = {libs!r}: must map names to version strings")
        plat = platform_facts() if platform_info is None else dict(platform_info)
        if not all(isinstance(k, str) and isinstance(v, str) for k, v in plat.items()):
            raise RunFormatError(f"platform_info = {plat!r}: must map names to strings")
        acq = {} if acquisition is None else acquisition
        if not isinstance(acq, Mapping):
            raise RunFormatError(f"acquisition = {acq!r}: must be a mapping")
        acq_dict = json.loads(to_json(dict(acq), "acquisition"))

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
            "libraries": libs,
            "platform": plat,
            "flush_interval_s": float(flush_interval_s),
            "acquisition": acq_dict,
            "streams": {
                name: {
                    "file": f"{name}.bin",
                    "dtype": dtype_to_json(dtype),
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
                f"{layout_text(dtype)}"
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
        if not isinstance(kind, str) or not EVENT_KIND_RE.match(kind):
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
        line = to_json(record, f"event {kind!r}") + "\n"
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
        summary_dict = json.loads(to_json(dict(summary or {}), "close summary"))
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
                "description_sha256": sha256_of(self._folder / DESCRIPTION_FILE),
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
    if not isinstance(name, str) or not STREAM_NAME_RE.match(name):
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
    problem = dtype_problem(dtype)
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
