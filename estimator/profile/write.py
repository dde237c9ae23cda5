"""Writing a profile: TOML text with a comment on every key, saved atomically and checked to
read back identically."""

from __future__ import annotations

import contextlib
import dataclasses
import os
import tempfile
import tomllib
from pathlib import Path

from estimator.errors import ProfileError
from estimator.profile.keys import KEY_HELP, PROFILE_FORMAT, PROFILE_VERSION
from estimator.profile.read import profile_from_mapping
from estimator.profile.sections import _SECTIONS, CellProfile
from estimator.profile.toml_text import _toml_string, _toml_value

_HEADER = f"""\
# forcelens cell profile ({PROFILE_FORMAT}, version {PROFILE_VERSION}).
# Units are SI throughout: kg, m, N, s, Hz, V; N/m for stiffness, N^2/s for
# process noise. Keys ending in _u_<unit> or _u are standard uncertainties
# (coverage factor k=1). Every key is described in docs/cell-profile.md.
"""


def profile_to_toml(profile: CellProfile) -> str:
    """Return the TOML text of ``profile``: header, ``format``, ``version``, one table per section.

    Optional values that are None are left out; each key carries a comment with its unit.
    """
    if not isinstance(profile, CellProfile):
        raise ProfileError(f"expected a CellProfile, got {type(profile).__name__}")
    lines = [_HEADER, f"format = {_toml_string(PROFILE_FORMAT)}", f"version = {PROFILE_VERSION}"]
    for name in _SECTIONS:
        section = getattr(profile, name)
        rows = [
            (f.name, _toml_value(getattr(section, f.name)))
            for f in dataclasses.fields(section)
            if getattr(section, f.name) is not None
        ]
        width = max(len(f"{key} = {text}") for key, text in rows)
        lines.append("")
        lines.append(f"[{name}]")
        for key, text in rows:
            assignment = f"{key} = {text}"
            lines.append(f"{assignment.ljust(width)}  # {KEY_HELP[name][key]}")
    return "\n".join(lines) + "\n"


def save_profile(profile: CellProfile, path: str | os.PathLike[str]) -> None:
    """Write ``profile`` to ``path`` atomically (temporary file in the same folder, then rename).

    The text is parsed back before it is written and must give the same profile.
    An existing file keeps its permission bits; a new one gets 0o644.
    """
    text = profile_to_toml(profile)
    if profile_from_mapping(tomllib.loads(text), origin="<written text>") != profile:
        raise ProfileError("internal error: the written profile does not read back identically")
    target = Path(path)
    try:
        mode = target.stat().st_mode & 0o777
    except FileNotFoundError:
        mode = 0o644
    fd, tmp_name = tempfile.mkstemp(
        dir=target.parent,
        prefix=f".{target.name}.",
        suffix=".tmp",
    )
    try:
        with os.fdopen(fd, "w", encoding="utf-8", newline="\n") as handle:
            handle.write(text)
            handle.flush()
            os.fsync(handle.fileno())
        os.chmod(tmp_name, mode)
        os.replace(tmp_name, target)
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            os.unlink(tmp_name)
        raise
