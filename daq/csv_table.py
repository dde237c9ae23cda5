"""Reading any CSV table of numbers: forcelens's own dialect and plain files from elsewhere.

What is accepted (docs/csv-files.md): UTF-8 with or without a byte-order mark; ``\\n``
or ``\\r\\n`` line ends; ``#`` lines are comments anywhere and blank lines are skipped;
the first other line is the header, its fields separated by commas, or by semicolons
when it has no comma; a column name may carry its unit in brackets and case does not
matter (`daq.csv_dialect.split_column_header`); every row has as many fields as the
header; an empty field or ``nan`` is a missing value (NaN).

The rows are read in chunks of a few megabytes (`iter_csv_chunks`), so a record of any
length is read in bounded memory; `read_csv_table` joins the chunks. Each chunk goes
through NumPy's compiled text reader (``numpy.loadtxt``, correctly rounded like
``float()``); a chunk with empty fields is read again with them written as ``nan``; a
chunk it still cannot take (a text column, a ragged row, a field that is not a number)
is read line by line, and the first bad line is named.
"""

from __future__ import annotations

import io
import os
import re
import warnings
from collections.abc import Iterator, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import TextIO

import numpy as np

from daq.csv_dialect import split_column_header
from daq.errors import FramingError, SourceError

__all__ = [
    "CsvChunk",
    "CsvHeader",
    "CsvTable",
    "iter_csv_chunks",
    "read_csv_header",
    "read_csv_table",
]

#: Characters of text read per chunk (about 35 000 rows of two columns, ~13 MB to parse).
CHUNK_CHARS = 1 << 20
#: a number written with a decimal comma ("0,5", "-1,25e-3"), named in the refusal
_DECIMAL_COMMA = re.compile(r"[+-]?\d+,\d*([eE][+-]?\d+)?")


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


def _lines(text: str) -> list[str]:
    """The lines of ``text`` read with universal newlines (``\\n`` ends; no other breaks)."""
    lines = text.split("\n")
    if lines and not lines[-1]:
        lines.pop()
    return lines


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
    wanted = list(head.names) if columns is None else list(columns)
    parts: dict[str, list[np.ndarray]] = {name: [] for name in wanted}
    for chunk in iter_csv_chunks(p, head, columns=wanted, expect=expect):
        for name in wanted:
            parts[name].append(chunk.columns[name])
    got = {name: np.concatenate(v) if v else np.zeros(0, np.float64) for name, v in parts.items()}
    return CsvTable(p, head.line, head.names, head.units, head.metadata, got)


@dataclass(frozen=True)
class CsvChunk:
    """Consecutive data rows of a CSV table, as read by `iter_csv_chunks`.

    Attributes:
        first_row: index (0-based) in the table of the chunk's first data row.
        first_line: line number (1-based) in the file of the chunk's first line.
        columns: the columns read, name → float64 array of shape (rows,).
        bytes_read: how far into the file reading has got, in bytes (for progress).
    """

    first_row: int
    first_line: int
    columns: dict[str, np.ndarray] = field(repr=False)
    bytes_read: int
    text: str = field(repr=False)

    @property
    def rows(self) -> int:
        return next(iter(self.columns.values())).size if self.columns else 0

    def line_of_row(self, row: int) -> int:
        """Line number (1-based) of the chunk's data row ``row`` (0-based in the chunk)."""
        seen = -1
        for lineno, line in enumerate(_lines(self.text), start=self.first_line):
            if _skipped(line):
                continue
            seen += 1
            if seen == row:
                return lineno
        raise IndexError(row)


def iter_csv_chunks(
    path: str | os.PathLike[str],
    head: CsvHeader | None = None,
    *,
    columns: Sequence[str] | None = None,
    expect: str = "e.g. 'time_s,displacement_m'",
    chunk_chars: int = CHUNK_CHARS,
) -> Iterator[CsvChunk]:
    """The data rows of a CSV table in chunks of about ``chunk_chars`` characters (whole
    lines, at least one), each with the numbers of ``columns`` (every column when None).

    ``head`` is the table's header when the caller has read it already. Errors as
    `read_csv_table`; a bad row is found when its chunk is read.
    """
    p = Path(path)
    if head is None:
        head = read_csv_header(p, expect=expect)
    names = head.names
    wanted = list(names) if columns is None else list(columns)
    for name in wanted:
        if name not in names:
            raise FramingError(
                f"{p}:{head.line}: header {head.text!r} has no {name!r} column; expected {expect}"
            )
    index = [names.index(n) for n in wanted]
    reader = _ChunkReader(p, head, wanted, index)
    try:
        with _open(p) as handle:
            for _ in range(head.line):
                handle.readline()
            line, row = head.line + 1, 0
            while True:
                text = handle.read(max(1, chunk_chars))
                if not text:
                    return
                if not text.endswith("\n"):
                    text += handle.readline()
                got = reader.numbers(text, line)
                yield CsvChunk(row, line, got, handle.buffer.tell(), text)
                row += next(iter(got.values())).size if got else 0
                line += text.count("\n")
    except (OSError, UnicodeDecodeError) as exc:
        reason = exc.strerror if isinstance(exc, OSError) and exc.strerror else exc
        raise SourceError(f"{p}: cannot read ({reason})") from exc


class _ChunkReader:
    """The numbers of one chunk of text: compiled reader first, line by line if need be."""

    def __init__(self, p: Path, head: CsvHeader, wanted: list[str], index: list[int]) -> None:
        self.p, self.head, self.wanted, self.index = p, head, wanted, index
        sep = re.escape(head.delimiter)
        # an empty field (only blanks between separators or the line's ends) -> "nan"
        self._first_empty = re.compile(rf"(?m)^[ \t]*(?={sep})")
        self._other_empty = re.compile(rf"(?m){sep}[ \t]*(?={sep}|$)")

    def numbers(self, text: str, first_line: int) -> dict[str, np.ndarray]:
        data = self._compiled(text)
        if data is None:
            filled = self._first_empty.sub("nan", text)
            filled = self._other_empty.sub(self.head.delimiter + "nan", filled)
            data = self._compiled(filled) if filled != text else None
        if data is None:
            return self._by_line(text, first_line)
        return {
            n: np.ascontiguousarray(data[:, i])
            for n, i in zip(self.wanted, self.index, strict=True)
        }

    def _compiled(self, text: str) -> np.ndarray | None:
        width = len(self.head.names)
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", UserWarning)  # "input contained no data"
                data = np.loadtxt(
                    io.StringIO(text),
                    delimiter=self.head.delimiter,
                    comments="#",
                    dtype=np.float64,
                    ndmin=2,
                )
        except (ValueError, IndexError):
            return None
        if data.shape[0] and data.shape[1] != width:
            return None
        return data.reshape(-1, width)

    def _by_line(self, text: str, first_line: int) -> dict[str, np.ndarray]:
        """Line by line: empty fields are NaN, and the first bad line is named."""
        p, names, head = self.p, self.head.names, self.head
        values: list[list[float]] = [[] for _ in self.wanted]
        for lineno, line in enumerate(_lines(text), start=first_line):
            if _skipped(line):
                continue
            fields = line.split(head.delimiter)
            if len(fields) != len(names):
                raise FramingError(
                    f"{p}:{lineno}: {line.strip()!r} has {len(fields)} fields; the header "
                    f"(line {head.line}) has {len(names)}"
                )
            for out, i in zip(values, self.index, strict=True):
                field_text = fields[i].strip()
                try:
                    out.append(float(field_text) if field_text else np.nan)
                except ValueError:
                    hint = ""
                    if _DECIMAL_COMMA.fullmatch(field_text):
                        hint = " (a decimal comma? write the decimal mark as '.')"
                    raise FramingError(
                        f"{p}:{lineno}: {line.strip()!r} is not numbers in column "
                        f"{names[i]} ({field_text!r}){hint}; columns "
                        f"{', '.join(self.wanted)} must be numbers"
                    ) from None
        return {n: np.array(v, dtype=np.float64) for n, v in zip(self.wanted, values, strict=True)}


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
