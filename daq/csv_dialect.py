"""The one CSV dialect forcelens writes (docs/csv-files.md), and its writer.

Every CSV file forcelens writes (``export``, ``replay --out``, the demo's
``estimates.csv`` and ``truth.csv``, ``simulate --truth``) is:

* UTF-8 without a byte-order mark, ``\\n`` line ends, fields separated by commas;
* ``#`` lines first: ``# forcelens <what the file is>``, then ``# key: value`` lines;
* one header row naming every column as ``name [unit]``: the field name in lower case
  as the code spells it (``force_u_n``), a space, the unit in brackets as SI writes it
  (``[N]``, ``[m/s]``; ``[1]`` for a pure number, ``[count]`` for raw counts);
* one row per record; floats written with :func:`repr` (the shortest text that reads
  back to the same double, ``nan`` and ``inf`` included), integers and flags as integers.

`split_column_header` is the readers' side of the names: case and a bracketed unit
are dropped, so a reader finds ``force_u_n`` in ``Force_U_N [N]`` or a plain ``force_u_n``.
"""

from __future__ import annotations

import contextlib
import os
import tempfile
from collections.abc import Callable, Mapping, Sequence
from pathlib import Path

import numpy as np

from daq.errors import SourceError

__all__ = [
    "DELIMITER",
    "column_header",
    "number_texts",
    "split_column_header",
    "write_csv_table",
]

DELIMITER = ","
_CHUNK_ROWS = 65_536


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


def number_texts(values: np.ndarray) -> list[str]:
    """Text of one column: floats with repr (exact), integers and bools as integers."""
    values = np.asarray(values)
    if values.dtype.kind == "f":
        return [repr(v) for v in values.astype(np.float64).tolist()]
    return [str(int(v)) for v in values.tolist()]


def write_csv_table(
    path: str | os.PathLike[str],
    *,
    title: str,
    metadata: Mapping[str, object] | None = None,
    columns: Sequence[tuple[str, str, np.ndarray]],
    progress: Callable[[int], None] | None = None,
) -> int:
    """Write ``columns`` (``(name, unit, values)``, all of one length) to ``path``.

    The file is written under a temporary name in the same folder and renamed over
    ``path`` once complete, so a reader sees the old file or the whole new one.
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
    head = [f"# forcelens {title}"]
    head += [f"# {key}: {value}" for key, value in (metadata or {}).items()]
    head = [line.replace("\r", " ").replace("\n", " ") for line in head]
    head.append(DELIMITER.join(column_header(name, unit) for name, unit, _ in columns))
    target = Path(path)
    fd, tmp_name = tempfile.mkstemp(dir=target.parent, prefix=f".{target.name}.", suffix=".tmp")
    try:
        with os.fdopen(fd, "w", encoding="utf-8", newline="\n") as handle:
            handle.write("\n".join(head) + "\n")
            for start in range(0, n, _CHUNK_ROWS):
                stop = start + _CHUNK_ROWS
                texts = [number_texts(values[start:stop]) for *_, values in columns]
                handle.writelines(DELIMITER.join(row) + "\n" for row in zip(*texts, strict=True))
                if progress is not None:
                    progress(min(n, start + _CHUNK_ROWS))
        os.chmod(tmp_name, 0o666 & ~_umask())
        os.replace(tmp_name, target)
    except OSError as exc:
        with contextlib.suppress(FileNotFoundError):
            os.unlink(tmp_name)
        raise SourceError(f"{target}: cannot write the CSV file ({exc.strerror or exc})") from exc
    return n


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask
