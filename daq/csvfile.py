"""Plain CSV files of displacement against time.

The first non-comment line is a header naming the columns with their units:
``time_s`` (or ``device_time_s``, as ``forcelens export`` writes it) and one of
``displacement_m`` / ``displacement_mm`` / ``displacement_um``; a name may carry its unit
in brackets (``displacement_m [m]``), and case does not matter. Other columns are
ignored. Fields are separated by commas, or by semicolons when the header has no comma.
Lines starting with ``#`` are comments. An empty displacement field or ``nan`` marks a
missing sample. Every row has as many fields as the header, and time
strictly increases: a row whose time is equal to or earlier than the one before is an
error naming its line (a reordered or merged file would otherwise be estimated as a
record that restarts at every row).
"""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np

from daq.errors import FramingError, SourceError

__all__ = ["DISPLACEMENT_UNITS", "read_displacement_csv"]

#: Accepted displacement columns and their factor to metres.
DISPLACEMENT_UNITS = {"displacement_m": 1.0, "displacement_mm": 1e-3, "displacement_um": 1e-6}


def read_displacement_csv(path: str | os.PathLike[str]) -> tuple[np.ndarray, np.ndarray]:
    """Read ``(time_s, displacement_m)`` arrays from a plain CSV file.

    Raises:
        SourceError: the file cannot be read.
        FramingError: no usable header, or a row that is not numbers; the message
            names the file, the line and what to fix.
    """
    p = Path(path)
    try:
        text = p.read_text(encoding="utf-8-sig")
    except OSError as exc:
        raise SourceError(f"{p}: cannot read ({exc.strerror or exc})") from exc
    lines = text.splitlines()
    header_at = next(
        (i for i, line in enumerate(lines) if line.strip() and not line.lstrip().startswith("#")),
        None,
    )
    if header_at is None:
        raise FramingError(f"{p}: no header line; expected e.g. 'time_s,displacement_m'")
    sep = "," if "," in lines[header_at] or ";" not in lines[header_at] else ";"
    names = [_column_name(c) for c in lines[header_at].split(sep)]
    if "time_s" not in names and "device_time_s" in names:
        names[names.index("device_time_s")] = "time_s"
    if "time_s" not in names:
        raise FramingError(
            f"{p}:{header_at + 1}: header {lines[header_at]!r} has no 'time_s' column "
            "(time in seconds)"
        )
    found = [n for n in names if n in DISPLACEMENT_UNITS]
    if len(found) != 1:
        raise FramingError(
            f"{p}:{header_at + 1}: header {lines[header_at]!r} needs exactly one of "
            f"{', '.join(DISPLACEMENT_UNITS)}"
        )
    it, ix = names.index("time_s"), names.index(found[0])
    rows = [
        (i + 1, line)
        for i, line in enumerate(lines[header_at + 1 :], start=header_at + 1)
        if line.strip() and not line.lstrip().startswith("#")
    ]
    t = np.empty(len(rows))
    x = np.empty(len(rows))
    try:
        body = np.array([line.split(sep) for _, line in rows], dtype=object)
        if body.ndim != 2:
            raise ValueError("rows have different numbers of fields")
        t[:] = _to_float(body[:, it])
        x[:] = _to_float(body[:, ix])
    except (ValueError, IndexError):
        for lineno, line in rows:  # slow path: find and name the first bad line
            fields = line.split(sep)
            if len(fields) != len(names):
                raise FramingError(
                    f"{p}:{lineno}: {line.strip()!r} has {len(fields)} fields; the header "
                    f"(line {header_at + 1}) has {len(names)}"
                ) from None
            try:
                float(fields[it])
                _to_float(np.array([fields[ix]], dtype=object))
            except (ValueError, IndexError):
                raise FramingError(
                    f"{p}:{lineno}: {line.strip()!r} is not numbers in columns "
                    f"time_s and {found[0]}"
                ) from None
        raise
    if not np.all(np.isfinite(t)):
        bad = rows[int(np.nonzero(~np.isfinite(t))[0][0])]
        raise FramingError(f"{p}:{bad[0]}: time_s must be a finite number, got {bad[1]!r}")
    back = np.flatnonzero(np.diff(t) <= 0.0)
    if back.size:
        i = int(back[0]) + 1
        prev, here = float(t[i - 1]), float(t[i])
        if here == prev:
            what = f"time_s {here!r} repeats that of line {rows[i - 1][0]}"
        else:
            what = f"time_s goes back from {prev!r} (line {rows[i - 1][0]}) to {here!r}"
        raise FramingError(
            f"{p}:{rows[i][0]}: {what}; time must increase from row to row (sort the "
            "file, or remove the repeated rows)"
        )
    return t, x * DISPLACEMENT_UNITS[found[0]]


def _column_name(text: str) -> str:
    """``'Displacement_m [m]'`` → ``'displacement_m'``: case and a bracketed unit dropped."""
    name = text.strip()
    if name.endswith("]") and "[" in name:
        name = name[: name.rindex("[")]
    return name.strip().lower()


def _to_float(column: np.ndarray) -> np.ndarray:
    stripped = np.char.strip(column.astype(str))
    stripped[stripped == ""] = "nan"
    return stripped.astype(float)
