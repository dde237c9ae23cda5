"""Checks of single profile values, each failing with a `ProfileError` that names the table,
the key, the bad value and the rule broken."""

from __future__ import annotations

import difflib
import math
from typing import Any

from estimator.errors import ProfileError
from estimator.profile.keys import KEY_HELP
from estimator.profile.toml_text import _toml_string


def _show(value: object) -> str:
    """Render a value the way it would look in TOML (strings quoted)."""
    if isinstance(value, str):
        return _toml_string(value)
    return repr(value)


def _fail(table: str, key: str, value: object, rule: str) -> ProfileError:
    """Build the error for ``[table] key = value`` breaking ``rule``."""
    help_text = KEY_HELP.get(table, {}).get(key, "")
    suffix = f" ({help_text})" if help_text else ""
    return ProfileError(f"[{table}] {key} = {_show(value)}: {rule}{suffix}")


def _real(
    table: str,
    key: str,
    value: object,
    *,
    above: float | None = None,
    at_least: float | None = None,
    nonzero: bool = False,
) -> float:
    """Check that ``value`` is a finite real number obeying the bound; return it as float."""
    if isinstance(value, bool) or not isinstance(value, int | float):
        raise _fail(table, key, value, "must be a number (write it without quotes)")
    try:
        number = float(value)
    except OverflowError:  # a whole number of hundreds of digits
        number = math.inf
    if not math.isfinite(number):
        raise _fail(table, key, value, "must be a finite number")
    if above is not None and not number > above:
        raise _fail(table, key, value, f"must be > {above:g}")
    if at_least is not None and not number >= at_least:
        raise _fail(table, key, value, f"must be >= {at_least:g}")
    if nonzero and number == 0.0:
        raise _fail(table, key, value, "must not be 0")
    return number


def _integer(table: str, key: str, value: object, *, at_least: int) -> int:
    """Check that ``value`` is an integer (not a bool, not a float) >= ``at_least``."""
    if isinstance(value, bool) or not isinstance(value, int):
        raise _fail(table, key, value, "must be a whole number (no quotes, no decimal point)")
    if value < at_least:
        raise _fail(table, key, value, f"must be >= {at_least}")
    return int(value)


def _text(table: str, key: str, value: object) -> str:
    """Check that ``value`` is a string."""
    if not isinstance(value, str):
        raise _fail(table, key, value, "must be a string in double quotes")
    return value


def _set(obj: object, name: str, value: object) -> None:
    """Store a normalised value on a frozen dataclass during ``__post_init__``."""
    object.__setattr__(obj, name, value)


def _suggest(word: str, known: Any) -> str:
    """Return ``"; did you mean 'x'?"`` for the closest known word, or ``""``."""
    close = difflib.get_close_matches(word, list(known), n=1, cutoff=0.6)
    return f"; did you mean {close[0]!r}?" if close else ""
