"""TOML scalars as the profile writer writes them: basic strings and numbers that read back
bit for bit."""

from __future__ import annotations

import math

from estimator.errors import ProfileError

_ESCAPES = {
    '"': '\\"',
    "\\": "\\\\",
    "\b": "\\b",
    "\t": "\\t",
    "\n": "\\n",
    "\f": "\\f",
    "\r": "\\r",
}


def _toml_string(text: str) -> str:
    """Quote ``text`` as a TOML basic string."""
    out = []
    for char in text:
        if char in _ESCAPES:
            out.append(_ESCAPES[char])
        elif ord(char) < 0x20 or ord(char) == 0x7F:
            out.append(f"\\u{ord(char):04X}")
        else:
            out.append(char)
    return '"' + "".join(out) + '"'


def _toml_value(value: object) -> str:
    """Write one scalar; floats use repr() so they read back bit for bit."""
    if isinstance(value, bool):  # never produced by a valid profile; kept for safety
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        if not math.isfinite(value):
            raise ProfileError(f"cannot write the non-finite number {value!r}")
        return repr(value)
    if isinstance(value, str):
        return _toml_string(value)
    raise ProfileError(f"cannot write a {type(value).__name__} to a profile")
