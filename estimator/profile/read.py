"""Reading a profile: from a TOML file, from parsed TOML, or the built-in demo cell's."""

from __future__ import annotations

import dataclasses
import datetime
import importlib.resources
import os
import stat
import tomllib
from collections.abc import Mapping
from typing import Any

from estimator.errors import ProfileError
from estimator.profile.checks import _show, _suggest
from estimator.profile.keys import (
    _MAX_PROFILE_BYTES,
    KEY_HELP,
    PROFILE_FORMAT,
    PROFILE_VERSION,
    SUPPORTED_VERSIONS,
)
from estimator.profile.sections import _OPTIONAL_TABLES, _SECTIONS, CellProfile


def _section_from_table(name: str, table: Mapping[str, Any]) -> Any:
    """Build one section from its TOML table, refusing unknown and missing keys."""
    cls = _SECTIONS[name]
    fields = {f.name: f for f in dataclasses.fields(cls)}
    for key in table:
        if key not in fields:
            raise ProfileError(
                f"[{name}] unknown key {key!r}{_suggest(key, fields)} "
                f"(known keys: {', '.join(fields)})"
            )
    missing = [
        key
        for key, f in fields.items()
        if key not in table
        and f.default is dataclasses.MISSING
        and f.default_factory is dataclasses.MISSING
    ]
    if missing:
        key = missing[0]
        raise ProfileError(f"[{name}] {key} is missing: add it ({KEY_HELP[name][key]})")
    values = dict(table)
    date = values.get("calibration_date")
    is_plain_date = isinstance(date, datetime.date) and not isinstance(date, datetime.datetime)
    if name == "cell" and is_plain_date:
        values["calibration_date"] = date.isoformat()  # an unquoted TOML date is accepted
    return cls(**values)


def profile_from_mapping(data: Mapping[str, Any], origin: str = "<mapping>") -> CellProfile:
    """Validate a parsed TOML document (nested mappings) and return the profile.

    ``origin`` prefixes every error message (normally the file name).
    Raises ProfileError naming the table and key of the first problem found.
    """
    try:
        return _profile_from_mapping(data)
    except ProfileError as exc:
        raise ProfileError(f"{origin}: {exc}") from exc


def _profile_from_mapping(data: Mapping[str, Any]) -> CellProfile:
    if not isinstance(data, Mapping):
        raise ProfileError(f"expected a table of tables, got {type(data).__name__}")
    top_keys = ("format", "version", *_SECTIONS)
    for key in data:
        if key not in top_keys:
            kind = "table" if isinstance(data[key], Mapping) else "key"
            raise ProfileError(
                f"unknown {kind} {key!r}{_suggest(key, top_keys)} "
                f"(known: format, version, {', '.join(f'[{s}]' for s in _SECTIONS)})"
            )
    if "format" not in data:
        raise ProfileError(f'format is missing: add format = "{PROFILE_FORMAT}" at the top')
    if data["format"] != PROFILE_FORMAT:
        raise ProfileError(
            f"format = {_show(data['format'])}: not a cell profile; expected "
            f'format = "{PROFILE_FORMAT}"'
        )
    if "version" not in data:
        raise ProfileError(f"version is missing: add version = {PROFILE_VERSION}")
    version = data["version"]
    if isinstance(version, bool) or not isinstance(version, int):
        raise ProfileError(f"version = {_show(version)}: must be a whole number, e.g. 1")
    if version not in SUPPORTED_VERSIONS:
        readable = ", ".join(str(v) for v in SUPPORTED_VERSIONS)
        hint = "; a newer forcelens is needed to read it" if version > PROFILE_VERSION else ""
        raise ProfileError(
            f"version = {version}: this software reads profile version {readable} only{hint}"
        )
    sections: dict[str, Any] = {}
    for name in _SECTIONS:
        table = data.get(name)
        if table is None:
            if name not in _OPTIONAL_TABLES:
                raise ProfileError(f"table [{name}] is missing: add it")
            table = {}
        if not isinstance(table, Mapping):
            raise ProfileError(f"{name} = {_show(table)}: must be a table, written [{name}]")
        sections[name] = _section_from_table(name, table)
    return CellProfile(**sections)


def load_profile(path: str | os.PathLike[str]) -> CellProfile:
    """Read and validate the profile at ``path``.

    Raises ProfileError (file name first in the message) for bad TOML or bad
    content; OSError if the file cannot be read.
    """
    origin = os.fspath(path)
    try:
        st = os.stat(path)
    except FileNotFoundError:
        raise FileNotFoundError(
            f"{origin}: no such file (a profile is a TOML file; `forcelens profile new` makes one)"
        ) from None
    if not stat.S_ISREG(st.st_mode):
        raise ProfileError(f"{origin}: not a regular file; a profile is a TOML file")
    if st.st_size > _MAX_PROFILE_BYTES:
        raise ProfileError(
            f"{origin}: {st.st_size} bytes; a profile is at most {_MAX_PROFILE_BYTES} bytes"
        )
    with open(path, "rb") as handle:
        try:
            data = tomllib.load(handle)
        except tomllib.TOMLDecodeError as exc:
            raise ProfileError(f"{origin}: not valid TOML: {exc}") from exc
        except RecursionError:
            raise ProfileError(f"{origin}: TOML nested too deeply to be a profile") from None
    return profile_from_mapping(data, origin=origin)


def default_demo_profile() -> CellProfile:
    """Return the built-in demo profile (an invented cell, ``estimator/data/demo-cell.toml``)."""
    resource = importlib.resources.files("estimator").joinpath("data", "demo-cell.toml")
    text = resource.read_text(encoding="utf-8")
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ProfileError(f"estimator/data/demo-cell.toml: not valid TOML: {exc}") from exc
    return profile_from_mapping(data, origin="estimator/data/demo-cell.toml")
