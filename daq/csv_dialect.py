"""The one CSV dialect forcelens writes (docs/csv-files.md), and its writer.

Every CSV file forcelens writes (``export``, ``replay --out``, the demo's
``estimates.csv`` and ``truth.csv``, ``simulate --truth``) is:

* UTF-8 without a byte-order mark, ``\\n`` line ends, fields separated by commas;
* ``#`` lines first: ``# forcelens <what the file is>``, then ``# key: value`` lines;
* one header row naming every column as ``name [unit]``: the field name in lower case
  as the code spells it (``force_u_n``), a space, the unit in brackets as SI writes it
  (``[N]``, ``[m/s]``; ``[1]`` for a pure number, ``[count]`` for raw counts);
* one row per record; floats written as the shortest text that reads back to the same
  double (``nan`` and ``inf`` included), integers and flags as integers.

`split_column_header` is the readers' side of the names: case and a bracketed unit
are dropped, so a reader finds ``force_u_n`` in ``Force_U_N [N]`` or a plain ``force_u_n``.
"""

from __future__ import annotations

import contextlib
import os
import tempfile
from collections.abc import Callable, Mapping, Sequence
from pathlib import Path
from typing import NoReturn

import numpy as np
import orjson

from daq.errors import SourceError

__all__ = [
    "DELIMITER",
    "CsvTableWriter",
    "column_header",
    "number_texts",
    "rows_text",
    "split_column_header",
    "write_csv_table",
]

DELIMITER = ","
_SEP = DELIMITER.encode("ascii")
_CHUNK_ROWS = 16_384  # rows formatted at a time (~15 MB of text objects)


def column_header(name: str, unit: str) -> str:
    """Header text of one column: ``time_s [s]``, ``force_u_n [N]``, ``flags [1]``."""
    return f"{name} [{unit}]"


def split_column_header(text: str) -> tuple[str, str | None]:
    """``'Force_U_N [N]'`` → ``('force_u_n', 'N')``; ``'time_s'`` → ``('time_s', None)``.

    The name is stripped and lower-cased; the unit is what the brackets hold, as written.
    """
    name = text.strip()
    unit = None
    if name.endswith("]") and "[" in name:
        unit = name[name.rindex("[") + 1 : -1].strip()
        name = name[: name.rindex("[")]
    return name.strip().lower(), unit


def number_texts(values: np.ndarray) -> list[bytes]:
    """Text of one column, one UTF-8 item per row: floats as the shortest text that reads
    back to the same double (``nan``, ``inf``, ``-inf`` included), integers and bools as
    integers.

    orjson writes the numbers (as exact as :func:`repr`, in C: ``4.5e-6`` where ``repr``
    says ``4.5e-06``; a table of 11 columns is written 4 times faster, 0.70 against
    0.17 M rows/s); it writes every non-finite float as ``null``, so those rows are
    spelled here.
    """
    values = np.asarray(values)
    if values.size == 0:
        return []
    if values.dtype.kind == "f":
        values = np.ascontiguousarray(values, dtype=np.float64)
        texts = orjson.dumps(values, option=orjson.OPT_SERIALIZE_NUMPY)[1:-1].split(b",")
        bad = np.flatnonzero(~np.isfinite(values))
        for i in bad.tolist():
            texts[i] = repr(float(values[i])).encode("ascii")
        return texts
    values = np.ascontiguousarray(
        values, dtype=np.uint64 if values.dtype.kind == "u" else np.int64
    )
    return orjson.dumps(values, option=orjson.OPT_SERIALIZE_NUMPY)[1:-1].split(b",")


def rows_text(columns: Sequence[np.ndarray]) -> bytes:
    """The rows of a table (one array per column, all of one length) as dialect text,
    each row ending in ``\\n``: the fields of `number_texts`, joined by commas.

    When every value is finite and every integer column is below 2⁵³, the whole block is
    one orjson dump of a 2-D float array (``[[a,b],[c,d]]``), rewritten in one compiled
    pass (`daq.csv_rows_kernel`): the same bytes, several times faster than joining each
    row's fields in Python. Otherwise each row's fields are joined.
    """
    n = len(columns[0]) if columns else 0
    if n == 0:
        return b""
    arrays = [np.asarray(v) for v in columns]
    fast = _block_text(arrays, n)
    if fast is not None:
        return fast
    texts = [number_texts(v) for v in arrays]
    return b"".join(_SEP.join(row) + b"\n" for row in zip(*texts, strict=True))


def _block_text(arrays: list[np.ndarray], n: int) -> bytes | None:
    """`rows_text` by one 2-D dump, or None when the block does not allow it."""
    width = len(arrays)
    table = np.empty((n, width))
    whole = []  # the integer columns
    for k, v in enumerate(arrays):
        if v.dtype.kind in "iub":
            if v.dtype.kind != "b" and (v.max() >= 2**53 or v.min() <= -(2**53)):
                return None
            whole.append(k)
        elif v.dtype.kind != "f":
            return None
        table[:, k] = v
    if not np.isfinite(table).all():
        return None  # orjson writes null for nan and inf
    from daq.csv_rows_kernel import dump_to_rows  # numba: only when a table is written

    dump = np.frombuffer(orjson.dumps(table, option=orjson.OPT_SERIALIZE_NUMPY), np.uint8)
    out = np.empty_like(dump)
    flags = np.zeros(width, np.bool_)
    flags[whole] = True
    size = dump_to_rows(dump, flags, out)
    return None if size < 0 else out[:size].tobytes()


class CsvTableWriter:
    """Write a table in the dialect block by block (a record of any length in bounded
    memory); the file appears under ``path`` only when the writer is closed without an
    error.

    Use it as a context manager: ``with CsvTableWriter(path, title=..., columns=[(name,
    unit), ...]) as out: out.write([values, ...])``. The rows written are the same text,
    byte for byte, however the table is cut into blocks. The file is written under a
    temporary name in the same folder and renamed over ``path`` once complete, so a
    reader sees the old file or the whole new one.

    Raises:
        SourceError: the file cannot be written.
    """

    def __init__(
        self,
        path: str | os.PathLike[str],
        *,
        title: str,
        metadata: Mapping[str, object] | None = None,
        columns: Sequence[tuple[str, str]],
    ) -> None:
        self.path = Path(path)
        self.rows = 0
        self._width = len(columns)
        head = [f"# forcelens {title}"]
        head += [f"# {key}: {value}" for key, value in (metadata or {}).items()]
        head = [line.replace("\r", " ").replace("\n", " ") for line in head]
        head.append(DELIMITER.join(column_header(name, unit) for name, unit in columns))
        try:
            fd, self._tmp = tempfile.mkstemp(
                dir=self.path.parent, prefix=f".{self.path.name}.", suffix=".tmp"
            )
            self._handle = os.fdopen(fd, "wb")
            self._handle.write(("\n".join(head) + "\n").encode("utf-8"))
        except OSError as exc:
            self._fail(exc)

    def write(self, values: Sequence[np.ndarray]) -> None:
        """Append rows: one array per column, all of one length, in the header's order."""
        if len(values) != self._width:
            raise ValueError(f"{len(values)} columns given; the table has {self._width}")
        lengths = {int(np.shape(v)[0]) for v in values}
        if len(lengths) > 1:
            raise ValueError(f"columns of different lengths {sorted(lengths)}")
        n = lengths.pop() if lengths else 0
        try:
            for start in range(0, n, _CHUNK_ROWS):
                self._handle.write(rows_text([v[start : start + _CHUNK_ROWS] for v in values]))
        except OSError as exc:
            self._fail(exc)
        self.rows += n

    def close(self) -> None:
        """Finish the file and rename it over ``path``."""
        try:
            self._handle.close()
            os.chmod(self._tmp, 0o666 & ~_umask())
            os.replace(self._tmp, self.path)
        except OSError as exc:
            self._fail(exc)

    def discard(self) -> None:
        """Drop the unfinished file; ``path`` is left as it was."""
        with contextlib.suppress(OSError):
            self._handle.close()
        with contextlib.suppress(FileNotFoundError):
            os.unlink(self._tmp)

    def _fail(self, exc: OSError) -> NoReturn:
        if hasattr(self, "_handle"):
            self.discard()
        elif hasattr(self, "_tmp"):
            with contextlib.suppress(FileNotFoundError):
                os.unlink(self._tmp)
        raise SourceError(
            f"{self.path}: cannot write the CSV file ({exc.strerror or exc})"
        ) from exc

    def __enter__(self) -> CsvTableWriter:
        return self

    def __exit__(self, kind: type[BaseException] | None, *rest: object) -> None:
        if kind is None:
            self.close()
        else:
            self.discard()


def write_csv_table(
    path: str | os.PathLike[str],
    *,
    title: str,
    metadata: Mapping[str, object] | None = None,
    columns: Sequence[tuple[str, str, np.ndarray]],
    progress: Callable[[int], None] | None = None,
) -> int:
    """Write ``columns`` (``(name, unit, values)``, all of one length) to ``path``.

    The whole table at once through `CsvTableWriter` (atomically).
    ``progress(rows)`` is called after each chunk with the rows written so far.
    Returns the number of data rows.

    Raises:
        SourceError: the file cannot be written.
        ValueError: the columns have different lengths.
    """
    lengths = {int(np.shape(values)[0]) for _, _, values in columns}
    if len(lengths) > 1:
        raise ValueError(f"columns of different lengths {sorted(lengths)}")
    n = lengths.pop() if lengths else 0
    with CsvTableWriter(
        path, title=title, metadata=metadata, columns=[(name, unit) for name, unit, _ in columns]
    ) as out:
        for start in range(0, n, _CHUNK_ROWS):
            out.write([values[start : start + _CHUNK_ROWS] for *_, values in columns])
            if progress is not None:
                progress(min(n, start + _CHUNK_ROWS))
    return n


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask
