"""Reading a run back (`read_run_info`, `read_run`), with the checks of every file."""

from __future__ import annotations

import json
import os
from collections.abc import Collection, Mapping
from dataclasses import dataclass
from datetime import datetime
from pathlib import Path
from typing import Any

import numpy as np

from daq.errors import RunFormatError
from daq.run_files import MAX_EVENTS_BYTES, MAX_JSON_BYTES, checked_file
from daq.runs.layout import (
    CLOSING_FILE,
    CLOSING_STATUSES,
    DESCRIPTION_FILE,
    EVENT_RESERVED,
    EVENTS_FILE,
    FLUSH_INTERVAL_MAX_S,
    RUN_FORMAT,
    RUN_VERSION,
    SHA256_RE,
    SUPPORTED_RUN_VERSIONS,
    dtype_problem,
    layout_text,
    sha256_of,
)
from daq.runs.loss import lost_data_problems
from daq.samples import SAMPLE_DTYPE


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
    def flush_interval_s(self) -> float:
        """The writer's flush interval (the longest allowed for runs that predate it)."""
        return float(self.description.get("flush_interval_s", FLUSH_INTERVAL_MAX_S))

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
    problem = dtype_problem(dtype)
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
            f"{path}: stream 'samples' has an unsupported layout {layout_text(dtype)}: "
            f"{'; '.join(diffs)}; this software records {layout_text(SAMPLE_DTYPE)}"
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
    libraries = data.get("libraries", {})  # absent in runs recorded before it was kept
    if not isinstance(libraries, dict) or not all(isinstance(v, str) for v in libraries.values()):
        raise RunFormatError(
            f"{path}: libraries = {libraries!r}: must map library names to version strings"
        )
    facts = data.get("platform", {})  # absent in runs recorded before it was kept
    if not isinstance(facts, dict) or not all(isinstance(v, str) for v in facts.values()):
        raise RunFormatError(
            f"{path}: platform = {facts!r}: must map names (python, machine...) to strings"
        )
    flush = data.get("flush_interval_s", FLUSH_INTERVAL_MAX_S)  # absent in older runs
    if not (
        isinstance(flush, int | float)
        and not isinstance(flush, bool)
        and 0.0 < flush <= FLUSH_INTERVAL_MAX_S
    ):
        raise RunFormatError(
            f"{path}: flush_interval_s = {flush!r}: must be a number of seconds > 0 and "
            f"<= {FLUSH_INTERVAL_MAX_S:g}"
        )
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
    if not isinstance(digest, str) or not SHA256_RE.match(digest):
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
    if not isinstance(digest, str) or not SHA256_RE.match(digest):
        raise RunFormatError(
            f"{path}: {where}.sha256 = {digest!r}: must be 64 lower-case hex digits"
        )


def check_run_folder(folder: str | os.PathLike[str]) -> Path:
    """``folder`` as a Path when it is a folder holding a run description; else raises
    RunFormatError saying what it is instead (missing, a file, a folder of something
    else). Nothing is read."""
    root = Path(folder)
    if not root.is_dir():
        if root.exists():
            raise RunFormatError(
                f"{root}: a file, not a run folder (a recorded run is a folder holding "
                f"{DESCRIPTION_FILE})"
            )
        raise RunFormatError(f"{root}: run folder is missing")
    if not (root / DESCRIPTION_FILE).exists():
        raise RunFormatError(
            f"{root / DESCRIPTION_FILE}: missing (not a run folder, or a run that lost its "
            "description)"
        )
    return root


def read_run_info(folder: str | os.PathLike[str]) -> RunInfo:
    """Read and check ``run.json`` and ``closing.json`` and measure the stream files.

    No records are loaded, so this is cheap for any run size. Raises RunFormatError naming
    the file and the problem (missing folder, bad JSON, unknown format or version,
    unsupported layout, missing stream file...).
    """
    root = check_run_folder(folder)
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


@dataclass
class _Events:
    """What `_read_events` found: the events kept, every line counted."""

    kept: list[dict[str, Any]]
    lines: int
    torn: bool
    torn_bytes: int
    #: the event naming the highest sample index (kept or not), for the loss check
    furthest: dict[str, Any] | None
    #: how many events of each kind (kept or not)
    kinds: dict[str, int]


def _read_events(path: Path, kinds: Collection[str] | None = None) -> _Events:
    """Parse and check every line of ``events.jsonl``, a line at a time; keep the events
    whose kind is in ``kinds`` (every event when None)."""
    checked_file(path, path.parent, "event log", MAX_EVENTS_BYTES)
    kept: list[dict[str, Any]] = []
    furthest: dict[str, Any] | None = None
    counts: dict[str, int] = {}
    number, tail = 0, b""
    try:
        with open(path, "rb") as handle:
            for line in handle:
                if not line.endswith(b"\n"):  # the last line, torn: ignored
                    tail = line
                    break
                number += 1
                event = _event(path, number, line[:-1])
                index = event.get("index")
                whole = isinstance(index, int) and not isinstance(index, bool)
                if whole and (furthest is None or index > furthest["index"]):
                    furthest = event
                kind = str(event["kind"])
                counts[kind] = counts.get(kind, 0) + 1
                if kinds is None or kind in kinds:
                    kept.append(event)
    except OSError as exc:
        raise RunFormatError(f"{path}: cannot read ({exc.strerror or exc})") from None
    return _Events(kept, number, bool(tail), len(tail), furthest, counts)


def _event(path: Path, number: int, line: bytes) -> dict[str, Any]:
    try:
        event = json.loads(line.decode("utf-8"))
    except (UnicodeDecodeError, json.JSONDecodeError, RecursionError) as exc:
        raise RunFormatError(
            f"{path}: line {number} is not a JSON object ({exc}); the event log is corrupt"
        ) from None
    if not isinstance(event, dict) or not all(k in event for k in EVENT_RESERVED):
        raise RunFormatError(
            f"{path}: line {number} lacks one of {', '.join(EVENT_RESERVED)}; "
            "the event log is corrupt"
        )
    return event


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
        elif check_hash and sha256_of(path) != entry["sha256"]:
            problems.append(
                f"{path}: SHA-256 differs from {closing_path.name}; the file was changed "
                "after the run was closed (tampered or damaged)"
            )
    description_sha = info.closing.get("description_sha256")
    description = info.folder / DESCRIPTION_FILE
    if check_hash and description_sha is not None and sha256_of(description) != description_sha:
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
        elif check_hash and path.exists() and sha256_of(path) != events_entry["sha256"]:
            problems.append(
                f"{path}: SHA-256 differs from {closing_path.name}; the event log was changed "
                "after the run was closed"
            )
    return problems


def read_run(
    folder: str | os.PathLike[str],
    *,
    check_hash: bool = True,
    memmap: bool = True,
    event_kinds: Collection[str] | None = None,
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

    ``event_kinds``: keep only the events of these kinds in ``events`` (None: every
    event). Every line is still read, checked and counted, and the loss check of an
    unclosed run still sees every event; a caller that needs few kinds (``replay``: the
    zeros) saves the memory of a long run's event log (a dict per event).
    """
    info = read_run_info(folder)
    log = _read_events(info.folder / EVENTS_FILE, event_kinds)
    events, torn_line, torn_line_bytes = log.kept, log.torn, log.torn_bytes
    problems = _closing_problems(info, log.lines, check_hash)
    if problems:
        raise RunFormatError("; ".join(problems))
    warnings: list[str] = []
    streams = {name: _load_stream(info, name, memmap) for name in info.dtypes}
    if info.closing is None:
        furthest = [log.furthest] if log.furthest is not None else []
        lost = lost_data_problems(str(info.folder), info.flush_interval_s, streams, furthest)
        warnings += lost or [
            f"{info.folder}: no {CLOSING_FILE}: the recording did not finish (crash or "
            "still running); everything flushed before that is read"
        ]
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
