"""One stream of a run as CSV with exact numbers (`export_run_csv`), in the one dialect
of `daq.csv_dialect`, and the run's facts every export states (`export_metadata`)."""

from __future__ import annotations

import os
from collections.abc import Callable

import numpy as np

from daq.csv_dialect import CsvTableWriter, column_header
from daq.errors import RunFormatError
from daq.runs.blocks import BLOCK_ROWS, iter_stream_blocks
from daq.runs.reader import RunData

__all__ = ["csv_column_name", "export_metadata", "export_run_csv", "stream_of"]


def csv_column_name(field: str, unit: str) -> str:
    """Header text of one CSV column: the field name, a space, the unit in brackets.

    E.g. ``device_time_s [s]``, ``counts [count]``, ``seq [1]`` (``1``: a pure number).
    """
    return column_header(field, unit)


def stream_of(run: RunData, stream: str) -> tuple[np.ndarray, dict[str, str]]:
    """The records of ``stream`` and the unit of each field.

    Raises:
        RunFormatError: the run has no such stream.
    """
    if stream not in run.streams:
        raise RunFormatError(
            f"stream {stream!r} is not in run {run.run_id}; streams: {', '.join(run.streams)}"
        )
    return run.streams[stream], dict(run.description["streams"][stream]["units"])


def export_metadata(run: RunData, stream: str) -> dict[str, str]:
    """What every export of ``run`` states about it, as text: run id, start, cell, the
    software, library and Python versions and the platform it was recorded with, whether it
    was closed, the stream."""
    d = run.description
    closed = f"yes, status {run.status}" if run.closed else "no (the recording did not finish)"
    meta = {
        "run_id": str(d["run_id"]),
        "started_utc": str(d["started_utc"]),
        "cell": str(d["cell_name"]),
        "software_version": str(d["software_version"]),
    }
    for name, version in (d.get("libraries") or {}).items():
        meta[f"{name}_version"] = str(version)
    facts = d.get("platform") or {}
    if "python" in facts:
        meta["python_version"] = str(facts["python"])
    if "system" in facts:
        meta["platform"] = str(facts["system"])
    meta["closed"] = closed
    meta["stream"] = stream
    return meta


def export_run_csv(
    run: RunData,
    path: str | os.PathLike[str],
    *,
    stream: str = "samples",
    progress: Callable[[int], None] | None = None,
    block_rows: int = BLOCK_ROWS,
) -> int:
    """Write one stream of ``run`` to ``path`` as CSV; return the number of data rows.

    The file is in forcelens's CSV dialect (docs/csv-files.md): ``# forcelens run ID``
    and ``# key: value`` lines from `export_metadata`, then a header with one column
    per field named by :func:`csv_column_name`, then one row per record. Floats are
    written as the shortest text that reads back exactly, so ``float(text)`` gives back the
    stored value (``nan``, ``inf`` included). The file is written to a temporary name and renamed.
    The stream is read and written a block at a time (`daq.runs.blocks`): memory stays
    bounded for a run of any length (``block_rows`` records at a time); the text is the
    same, byte for byte, whatever the block size.
    """
    data, units = stream_of(run, stream)
    names = list(data.dtype.names or ())
    with CsvTableWriter(
        path,
        title=f"run {run.run_id}",
        metadata={k: v for k, v in export_metadata(run, stream).items() if k != "run_id"},
        columns=[(n, units[n]) for n in names],
    ) as out:
        for block in iter_stream_blocks(run, stream, block_rows):
            out.write([block[n] for n in names])
            if progress is not None:
                progress(out.rows)
    return out.rows
