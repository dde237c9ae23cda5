"""One stream of a run as CSV with exact numbers: `export_run_csv`."""

from __future__ import annotations

import contextlib
import os
import tempfile
from pathlib import Path

import numpy as np

from daq.errors import RunFormatError, SourceError
from daq.runs.reader import RunData


def csv_column_name(field: str, unit: str) -> str:
    """Header text of one CSV column: the field name, a space, the unit in brackets.

    E.g. ``device_time_s [s]``, ``counts [count]``, ``seq [1]`` (``1``: a pure number).
    """
    return f"{field} [{unit}]"


def _column_text(values: np.ndarray) -> list[str]:
    """Text of one column; floats with repr (shortest exact), integers and bools as ints."""
    if values.dtype.kind == "f":
        return [repr(v) for v in values.astype(np.float64).tolist()]
    return [str(int(v)) for v in values.tolist()]


def export_run_csv(run: RunData, path: str | os.PathLike[str], *, stream: str = "samples") -> int:
    """Write one stream of ``run`` to ``path`` as CSV; return the number of data rows.

    The file starts with ``#`` comment lines (run id, start, cell, software version,
    closed status, stream), then a header with one column per field named by
    :func:`csv_column_name`, then one row per record. Floats are written with
    :func:`repr`, so ``float(text)`` gives back the exact stored value (``nan``,
    ``inf`` included). The file is written to a temporary name and renamed.
    """
    if stream not in run.streams:
        raise RunFormatError(
            f"stream {stream!r} is not in run {run.run_id}; streams: {', '.join(run.streams)}"
        )
    data = run.streams[stream]
    units = run.description["streams"][stream]["units"]
    names = list(data.dtype.names or ())
    closed = f"yes, status {run.status}" if run.closed else "no (the recording did not finish)"
    head = [
        f"# forcelens run {run.run_id}",
        f"# started_utc: {run.description['started_utc']}",
        f"# cell: {run.description['cell_name']}",
        f"# software_version: {run.description['software_version']}",
        f"# closed: {closed}",
        f"# stream: {stream}",
        ",".join(csv_column_name(n, units[n]) for n in names),
    ]
    target = Path(path)
    fd, tmp_name = tempfile.mkstemp(dir=target.parent, prefix=f".{target.name}.", suffix=".tmp")
    try:
        with os.fdopen(fd, "w", encoding="utf-8", newline="\n") as handle:
            handle.write("\n".join(line.replace("\n", " ") for line in head) + "\n")
            chunk = 65536
            for start in range(0, data.shape[0], chunk):
                part = data[start : start + chunk]
                columns = [_column_text(np.asarray(part[n])) for n in names]
                handle.writelines(",".join(row) + "\n" for row in zip(*columns, strict=True))
        os.replace(tmp_name, target)
    except OSError as exc:
        with contextlib.suppress(FileNotFoundError):
            os.unlink(tmp_name)
        raise SourceError(f"{target}: cannot write the CSV export ({exc})") from exc
    return int(data.shape[0])
