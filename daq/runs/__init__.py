"""Recorded runs: one folder per recording, written crash-tolerantly and read back.

A run folder holds ``run.json`` (what was recorded and how), one ``<stream>.bin`` per
stream (raw little-endian records, append-only), ``events.jsonl`` (one JSON object per
line) and, once the recording has ended, ``closing.json`` (status, record counts and
SHA-256 of every file). The format is documented field by field in
``docs/run-format.md``.

* :class:`RunWriter` buffers records and events in memory and writes them with
  ``os.write`` + ``os.fsync`` at most ``flush_interval_s`` apart, so a crash loses at
  most that much data and never corrupts what is already on disk.
* :func:`read_run` reads a run back, tolerating the traces of a crash (no
  ``closing.json``, a torn last record, a torn last event line) and refusing anything
  else that is wrong with a :class:`~daq.errors.RunFormatError` naming the file.
* :func:`verify_run` checks a run and reports instead of raising.
* :func:`export_run_csv` writes one stream as CSV with exact numbers;
  :func:`export_run_mat` as a MATLAB/Octave file, :func:`export_run_hdf5` as HDF5
  (SciPy and h5py imported only when called).

Times are SI seconds; UTC timestamps are ISO 8601 text ending in ``Z``.

The package splits it by concept: `layout` (names, versions, record layouts), `writer`,
`reader`, `blocks` (a stream read a block at a time, bounded memory), `verify`,
`export` (CSV), `export_mat`, `export_hdf5`.
"""

from __future__ import annotations

from daq.runs.export import csv_column_name, export_run_csv
from daq.runs.export_hdf5 import export_run_hdf5
from daq.runs.export_mat import export_run_mat
from daq.runs.layout import (
    CLOSING_FILE,
    CLOSING_STATUSES,
    DESCRIPTION_FILE,
    EVENTS_FILE,
    FLUSH_INTERVAL_MAX_S,
    RUN_FORMAT,
    RUN_VERSION,
    SUPPORTED_RUN_VERSIONS,
    new_run_id,
    utc_text,
)
from daq.runs.reader import RunData, RunInfo, check_run_folder, read_run, read_run_info
from daq.runs.verify import VerifyReport, verify_run
from daq.runs.writer import RunWriter

__all__ = [
    "CLOSING_FILE",
    "CLOSING_STATUSES",
    "DESCRIPTION_FILE",
    "EVENTS_FILE",
    "FLUSH_INTERVAL_MAX_S",
    "RUN_FORMAT",
    "RUN_VERSION",
    "SUPPORTED_RUN_VERSIONS",
    "RunData",
    "RunInfo",
    "RunWriter",
    "VerifyReport",
    "check_run_folder",
    "csv_column_name",
    "export_run_csv",
    "export_run_hdf5",
    "export_run_mat",
    "new_run_id",
    "read_run",
    "read_run_info",
    "utc_text",
    "verify_run",
]
