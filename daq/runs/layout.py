"""The run folder's layout: file names, format version, record layouts, shared helpers."""

from __future__ import annotations

import hashlib
import json
import platform
import re
import secrets
from datetime import UTC, datetime
from importlib import metadata
from pathlib import Path

import numpy as np

from daq.errors import RunFormatError

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
#: The session's log (`ui.session_log`): for people, outside the seal (docs/run-format.md).
LOG_FILE = "session.log"
#: Allowed values of ``closing.json`` ``status``.
CLOSING_STATUSES: tuple[str, ...] = ("complete", "aborted", "failed")
#: Largest allowed flush interval, s: at most this much data is lost on a crash.
FLUSH_INTERVAL_MAX_S = 1.0

RUN_ID_RE = re.compile(r"^\d{8}T\d{6}Z-[0-9a-f]{6}$")
STREAM_NAME_RE = re.compile(r"^[a-z][a-z0-9_]{0,31}$")
EVENT_KIND_RE = re.compile(r"^[a-z][a-z0-9_-]{0,31}$")
SHA256_RE = re.compile(r"^[0-9a-f]{64}$")
FIELD_KINDS = "biuf"  # bool, signed int, unsigned int, float
EVENT_RESERVED = ("host_time_s", "utc", "kind", "message")


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


def installed_version() -> str:
    try:
        return metadata.version("forcelens")
    except metadata.PackageNotFoundError:
        return "0+unknown"


#: The libraries whose versions decide a replay's numbers bit for bit (run.json ``libraries``).
REPLAY_LIBRARIES: tuple[str, ...] = ("numpy", "scipy", "numba", "filterpy")


def library_versions() -> dict[str, str]:
    """The installed version of each of `REPLAY_LIBRARIES` (``"not installed"`` when absent),
    read from the package metadata without importing the libraries."""
    versions = {}
    for name in REPLAY_LIBRARIES:
        try:
            versions[name] = metadata.version(name)
        except metadata.PackageNotFoundError:
            versions[name] = "not installed"
    return versions


def platform_facts() -> dict[str, str]:
    """The interpreter and the machine computing the live estimates (run.json ``platform``):
    Python's version and implementation, the processor architecture (``machine``) and the
    operating system in one line (``system``, `platform.platform`)."""
    return {
        "python": platform.python_version(),
        "implementation": platform.python_implementation(),
        "machine": platform.machine(),
        "system": platform.platform(),
    }


def json_default(value: object) -> object:
    """Let NumPy scalars and arrays through :func:`json.dumps`."""
    if isinstance(value, np.generic):
        return value.item()
    if isinstance(value, np.ndarray):
        return value.tolist()
    raise TypeError(f"{type(value).__name__} is not JSON serialisable")


def to_json(value: object, what: str) -> str:
    """Strict JSON text of ``value`` (no NaN/Infinity); RunFormatError naming ``what``."""
    try:
        return json.dumps(value, default=json_default, allow_nan=False, ensure_ascii=False)
    except (TypeError, ValueError) as exc:
        raise RunFormatError(
            f"{what}: cannot be stored as JSON ({exc}); use str, int, finite float, bool, "
            "None, lists and mappings with string keys"
        ) from None


def dtype_to_json(dtype: np.dtype) -> list[list[str]]:
    return [[name, type_str] for name, type_str in dtype.descr]


def dtype_problem(dtype: np.dtype) -> str | None:
    """Why ``dtype`` cannot be a stream record, or None when it can."""
    if dtype.names is None:
        return "is not a structured dtype (give named fields, e.g. [('t_s', '<f8')])"
    for name in dtype.names:
        field = dtype.fields[name][0]
        if field.shape != () or field.kind not in FIELD_KINDS:
            return (
                f"field {name!r} has type {field.str}; each field must be one bool, "
                "integer or float value"
            )
        if field.str[0] not in "<|":
            return f"field {name!r} has type {field.str}; fields must be little-endian ('<')"
    try:
        rebuilt = np.dtype([tuple(f) for f in dtype_to_json(dtype)])
    except (TypeError, ValueError):
        rebuilt = None
    if rebuilt != dtype or any(name == "" for name, _ in dtype.descr):
        return "has padding or unusual offsets; use a packed dtype built from a field list"
    return None


def layout_text(dtype: np.dtype) -> str:
    fields = ", ".join(f"{name}:{type_str}" for name, type_str in dtype.descr)
    return f"[{fields}] ({dtype.itemsize} bytes per record)"


# --------------------------------------------------------------------------- writing


def sha256_of(path: Path) -> str:
    with path.open("rb") as handle:
        return hashlib.file_digest(handle, "sha256").hexdigest()
