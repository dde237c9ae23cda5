"""Reading any CSV table of numbers: forcelens's own dialect and plain files from elsewhere.

What is accepted (docs/csv-files.md): UTF-8 with or without a byte-order mark; ``\\n``
or ``\\r\\n`` line ends; ``#`` lines are comments anywhere and blank lines are skipped;
the first other line is the header, its fields separated by commas, or by semicolons
when it has no comma; a column name may carry its unit in brackets and case does not
matter (`daq.csv_dialect.split_column_header`); every row has as many fields as the
header; an empty field or ``nan`` is a missing value (NaN).

Large files take NumPy's compiled text reader; a file it cannot take (a missing value,
a text column, a ragged row) is read line by line, and the first bad line is named.
"""

from __future__ import annotations

import os
import warnings
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import TextIO

import numpy as np

from daq.csv_dialect import split_column_header
from daq.errors import FramingError, SourceError

__all__ = ["CsvHeader", "CsvTable", "read_csv_header", "read_csv_table"]


@dataclass(frozen=True)
class CsvTable:
    """The numbers of a CSV table, by column name.

    Attributes:
        path: the file read.
        header_line: line number (1-based) of the header.
        names: every column's name, lower case, without its unit.
        units: every column's bracketed unit as written, or None.
        metadata: the ``# key: value`` lines before the header.
        columns: the columns read, name → float64 array of shape (rows,).
    """

    path: Path
    header_line: int
    names: tuple[str, ...]
    units: tuple[str | None, ...]
    metadata: dict[str, str]
    columns: dict[str, np.ndarray] = field(repr=False)

    @property
    def rows(self) -> int:
        return next(iter(self.columns.values())).size if self.columns else 0

    def unit(self, name: str) -> str | None:
        """The bracketed unit of column ``name``, or None when the header gives none."""
        return self.units[self.names.index(name)]

    def line_of_row(self, row: int) -> int:
        """Line number (1-based) of data row ``row`` (0-based); reads the file again."""
        seen = -1
        with _open(self.path) as handle:
            for lineno, line in enumerate(handle, start=1):
                if lineno <= self.header_line or _skipped(line):
                    continue
                seen += 1
                if seen == row:
                    return lineno
        raise IndexError(row)


def _open(path: Path) -> TextIO:
    return open(path, encoding="utf-8-sig", newline=None)


def _skipped(line: str) -> bool:
    stripped = line.strip()
    return not stripped or stripped.startswith("#")


@dataclass(frozen=True)
class CsvHeader:
    """The header of a CSV table: its line number (1-based), text, delimiter, the
    columns' names (lower case, no unit) and units (or None), and the ``# key: value``
    lines before it."""

    line: int
    text: str
    delimiter: str
    names: tuple[str, ...]
    units: tuple[str | None, ...]
    metadata: dict[str, str]


def read_csv_header(
    path: str | os.PathLike[str], *, expect: str = "e.g. 'time_s,displacement_m'"
) -> CsvHeader:
    """The header of a CSV table (reads only up to it); ``expect`` is said when none.

    Raises:
        SourceError: the file cannot be read.
        FramingError: no header line.
    """
    p = Path(path)
    try:
        header_line, header, metadata = _header(p)
    except (OSError, UnicodeDecodeError) as exc:
        reason = exc.strerror if isinstance(exc, OSError) and exc.strerror else exc
        raise SourceError(f"{p}: cannot read ({reason})") from exc
    if header is None:
        raise FramingError(f"{p}: no header line; expected {expect}")
    text = header.strip()
    sep = "," if "," in text or ";" not in text else ";"
    split = [split_column_header(c) for c in text.split(sep)]
    return CsvHeader(
        header_line,
        text,
        sep,
        tuple(n for n, _ in split),
        tuple(u for _, u in split),
        metadata,
    )


def read_csv_table(
    path: str | os.PathLike[str],
    *,
    columns: Sequence[str] | None = None,
    expect: str = "e.g. 'time_s,displacement_m'",
) -> CsvTable:
    """Read the numbers of ``columns`` (every column when None) from a CSV table.

    ``columns`` are lower-case names without units; a missing one is an error naming
    the header. ``expect`` says in an error what header was wanted.

    Raises:
        SourceError: the file cannot be read.
        FramingError: no header, a wanted column missing, a ragged row or a field that
            is not a number; the message names the file, the line and what to fix.
    """
    p = Path(path)
    head = read_csv_header(p, expect=expect)
    names = head.names
    wanted = list(names) if columns is None else list(columns)
    for name in wanted:
        if name not in names:
            raise FramingError(
                f"{p}:{head.line}: header {head.text!r} has no {name!r} column; expected {expect}"
            )
    table = CsvTable(p, head.line, names, head.units, head.metadata, {})
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", UserWarning)  # "input contained no data"
            data = np.loadtxt(
                p,
                delimiter=head.delimiter,
                comments="#",
                skiprows=head.line,
                dtype=np.float64,
                ndmin=2,
                encoding="utf-8-sig",
            )
        if data.shape[0] and data.shape[1] != len(names):
            raise ValueError("rows and header differ in width")
        data = data.reshape(-1, len(names))
        got = {name: np.ascontiguousarray(data[:, names.index(name)]) for name in wanted}
    except (ValueError, IndexError):
        got = _slow(table, head.delimiter, wanted)
    table.columns.update(got)
    return table


def _header(p: Path) -> tuple[int, str | None, dict[str, str]]:
    """(line number, text, metadata) of the header: the first line that is not a comment."""
    metadata: dict[str, str] = {}
    with _open(p) as handle:
        for lineno, line in enumerate(handle, start=1):
            if _skipped(line):
                text = line.strip()[1:].strip()
                if ":" in text:
                    key, value = text.split(":", 1)
                    metadata.setdefault(key.strip(), value.strip())
                continue
            return lineno, line, metadata
    return 0, None, metadata


def _slow(table: CsvTable, sep: str, wanted: list[str]) -> dict[str, np.ndarray]:
    """Line by line: empty fields are NaN, and the first bad line is named."""
    p, names = table.path, table.names
    index = [names.index(n) for n in wanted]
    values: list[list[float]] = [[] for _ in wanted]
    with _open(p) as handle:
        for lineno, line in enumerate(handle, start=1):
            if lineno <= table.header_line or _skipped(line):
                continue
            fields = line.rstrip("\r\n").split(sep)
            if len(fields) != len(names):
                raise FramingError(
                    f"{p}:{lineno}: {line.strip()!r} has {len(fields)} fields; the header "
                    f"(line {table.header_line}) has {len(names)}"
                )
            for out, i in zip(values, index, strict=True):
                text = fields[i].strip()
                try:
                    out.append(float(text) if text else np.nan)
                except ValueError:
                    raise FramingError(
                        f"{p}:{lineno}: {line.strip()!r} is not numbers in column "
                        f"{names[i]} ({text!r}); columns {', '.join(wanted)} must be numbers"
                    ) from None
    return {name: np.array(v, dtype=np.float64) for name, v in zip(wanted, values, strict=True)}
