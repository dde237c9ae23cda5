"""Displacement records: time and displacement from a CSV table.

The table is read by `daq.csv_table.read_csv_table` (forcelens's own dialect and plain
files from elsewhere: ``;``, a byte-order mark, ``\\r\\n``; docs/csv-files.md). Time is
the ``time_s`` column (or ``device_time_s``, as ``forcelens export`` writes it);
displacement is exactly one of ``displacement_m`` / ``displacement_mm`` /
``displacement_um``. Other columns are ignored. An empty displacement field or ``nan``
marks a missing sample. Time strictly increases: a row whose time is equal to or
earlier than the one before is an error naming its line (a reordered or merged file
would otherwise be estimated as a record that restarts at every row).
"""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np

from daq.csv_table import read_csv_header, read_csv_table
from daq.errors import FramingError

__all__ = ["DISPLACEMENT_UNITS", "read_displacement_csv"]

#: Accepted displacement columns and their factor to metres.
DISPLACEMENT_UNITS = {"displacement_m": 1.0, "displacement_mm": 1e-3, "displacement_um": 1e-6}
_EXPECT = "e.g. 'time_s,displacement_m'"


def read_displacement_csv(path: str | os.PathLike[str]) -> tuple[np.ndarray, np.ndarray]:
    """Read ``(time_s, displacement_m)`` arrays from a CSV file.

    Raises:
        SourceError: the file cannot be read.
        FramingError: no usable header, or a row that is not numbers; the message
            names the file, the line and what to fix.
    """
    p = Path(path)
    head = read_csv_header(p, expect=_EXPECT)
    names = head.names
    time_name = "time_s" if "time_s" in names else "device_time_s"
    if time_name not in names:
        raise FramingError(
            f"{p}:{head.line}: header {head.text!r} has no 'time_s' column (time in seconds)"
        )
    found = [n for n in names if n in DISPLACEMENT_UNITS]
    if len(found) != 1:
        raise FramingError(
            f"{p}:{head.line}: header {head.text!r} needs exactly one of "
            f"{', '.join(DISPLACEMENT_UNITS)}"
        )
    table = read_csv_table(p, columns=[time_name, found[0]], expect=_EXPECT)
    t, x = table.columns[time_name], table.columns[found[0]]
    if not np.all(np.isfinite(t)):
        row = int(np.nonzero(~np.isfinite(t))[0][0])
        raise FramingError(
            f"{p}:{table.line_of_row(row)}: {time_name} must be a finite number, got {t[row]!r}"
        )
    back = np.flatnonzero(np.diff(t) <= 0.0)
    if back.size:
        i = int(back[0]) + 1
        prev, here = float(t[i - 1]), float(t[i])
        line_prev, line = table.line_of_row(i - 1), table.line_of_row(i)
        if here == prev:
            what = f"{time_name} {here!r} repeats that of line {line_prev}"
        else:
            what = f"{time_name} goes back from {prev!r} (line {line_prev}) to {here!r}"
        raise FramingError(
            f"{p}:{line}: {what}; time must increase from row to row (sort the "
            "file, or remove the repeated rows)"
        )
    scale = DISPLACEMENT_UNITS[found[0]]
    return t, (x if scale == 1.0 else x * scale)
