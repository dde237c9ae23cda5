"""Displacement records: time and displacement from a CSV table.

The table is read by `daq.csv_table.read_csv_table` (forcelens's own dialect and plain
files from elsewhere: ``;``, a byte-order mark, ``\\r\\n``; docs/csv-files.md). Time is
the ``time_s`` column (or ``device_time_s``, as ``forcelens export`` writes it);
displacement is exactly one of ``displacement_m`` / ``displacement_mm`` /
``displacement_um``. Other columns are ignored. An empty displacement field or ``nan``
marks a missing sample. Time strictly increases: a row whose time is equal to or
earlier than the one before is an error naming its line (a reordered or merged file
would otherwise be estimated as a record that restarts at every row). A time 1e12 s or
more from zero (`daq.samples.TIME_MAX_S`) and a displacement a metre or more from zero
(`daq.samples.DISPLACEMENT_MAX_M`) are refused at their line: damage or a unit error.

`iter_displacement_csv` gives the record in chunks (bounded memory for a record of any
length; ``replay`` streams it), with the same checks across chunk boundaries;
`read_displacement_csv` joins them.
"""

from __future__ import annotations

import os
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from daq.csv_table import CHUNK_CHARS, CsvChunk, iter_csv_chunks, read_csv_header
from daq.errors import FramingError
from daq.samples import DISPLACEMENT_MAX_M, TIME_MAX_S

__all__ = [
    "DISPLACEMENT_UNITS",
    "DisplacementChunk",
    "iter_displacement_csv",
    "read_displacement_csv",
]

#: Accepted displacement columns and their factor to metres.
DISPLACEMENT_UNITS = {"displacement_m": 1.0, "displacement_mm": 1e-3, "displacement_um": 1e-6}
_EXPECT = "e.g. 'time_s,displacement_m'"


@dataclass(frozen=True)
class DisplacementChunk:
    """Consecutive samples of a displacement record.

    Attributes:
        time_s: times, s, shape (n,), strictly increasing (also from the chunk before).
        displacement_m: displacement, m, shape (n,); NaN is a missing sample.
        first_row: index (0-based) of the chunk's first sample in the record.
        bytes_read: how far into the file reading has got, in bytes (for progress).
    """

    time_s: np.ndarray
    displacement_m: np.ndarray
    first_row: int
    bytes_read: int


def read_displacement_csv(path: str | os.PathLike[str]) -> tuple[np.ndarray, np.ndarray]:
    """Read ``(time_s, displacement_m)`` arrays from a CSV file.

    Raises:
        SourceError: the file cannot be read.
        FramingError: no usable header, or a row that is not numbers; the message
            names the file, the line and what to fix.
    """
    chunks = list(iter_displacement_csv(path))
    if not chunks:
        return np.zeros(0), np.zeros(0)
    t = np.concatenate([c.time_s for c in chunks])
    x = np.concatenate([c.displacement_m for c in chunks])
    return t, x


def iter_displacement_csv(
    path: str | os.PathLike[str], *, chunk_chars: int = CHUNK_CHARS
) -> Iterator[DisplacementChunk]:
    """The record of a displacement CSV file in chunks of about ``chunk_chars`` characters.

    The header is checked before the first chunk is read; a bad row raises when its
    chunk is reached. Errors as `read_displacement_csv`.
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
    scale = DISPLACEMENT_UNITS[found[0]]
    before: tuple[float, CsvChunk] | None = None  # the previous row's time and chunk
    chunks = iter_csv_chunks(
        p, head, columns=[time_name, found[0]], expect=_EXPECT, chunk_chars=chunk_chars
    )
    for chunk in chunks:
        if chunk.rows == 0:
            continue
        t, x = chunk.columns[time_name], chunk.columns[found[0]]
        _check_times(p, time_name, chunk, t, before)
        before = (float(t[-1]), chunk)
        x = x if scale == 1.0 else x * scale
        far = np.abs(x) >= DISPLACEMENT_MAX_M  # NaN (a missing sample) is not far
        if far.any():
            row = int(np.nonzero(far)[0][0])
            raise FramingError(
                f"{p}:{chunk.line_of_row(row)}: {found[0]} = "
                f"{float(chunk.columns[found[0]][row])!r} is a metre or more from zero: not "
                "the displacement of a force cell (check the column's unit)"
            )
        yield DisplacementChunk(t, x, chunk.first_row, chunk.bytes_read)


def _check_times(
    p: Path,
    time_name: str,
    chunk: CsvChunk,
    t: np.ndarray,
    before: tuple[float, CsvChunk] | None,
) -> None:
    """Finite, within ±`TIME_MAX_S` and strictly increasing, from the previous chunk's
    last row on."""
    if not np.all(np.isfinite(t)):
        row = int(np.nonzero(~np.isfinite(t))[0][0])
        raise FramingError(
            f"{p}:{chunk.line_of_row(row)}: {time_name} must be a finite number, got {t[row]!r}"
        )
    far = np.abs(t) >= TIME_MAX_S
    if far.any():
        row = int(np.nonzero(far)[0][0])
        raise FramingError(
            f"{p}:{chunk.line_of_row(row)}: {time_name} = {float(t[row])!r} s is {TIME_MAX_S:g} "
            "s or more from zero (over 30 000 years): not the time of a record; check the "
            "column (seconds expected)"
        )
    back = np.flatnonzero(np.diff(t) <= 0.0)
    if before is not None and t[0] <= before[0]:
        last = before[1]
        prev, line_prev, line = before[0], last.line_of_row(last.rows - 1), chunk.line_of_row(0)
        here = float(t[0])
    elif back.size:
        i = int(back[0]) + 1
        prev, here = float(t[i - 1]), float(t[i])
        line_prev, line = chunk.line_of_row(i - 1), chunk.line_of_row(i)
    else:
        return
    if here == prev:
        what = f"{time_name} {here!r} repeats that of line {line_prev}"
    else:
        what = f"{time_name} goes back from {prev!r} (line {line_prev}) to {here!r}"
    raise FramingError(
        f"{p}:{line}: {what}; time must increase from row to row (sort the "
        "file, or remove the repeated rows)"
    )
