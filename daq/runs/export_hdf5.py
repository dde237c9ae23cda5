"""One stream of a run as an HDF5 file (`export_run_hdf5`), with h5py.

The file holds one dataset per field of the stream at the root, named as the field
(``/device_time_s``, ``/displacement_m``, ...), in its recorded type, each with an
attribute ``unit`` (``'m'``, ``'s'``, ``'1'`` for a pure number); the root's attributes
hold the facts of `daq.runs.export.export_metadata` (run id, start, cell, software and
library versions, closed, stream), the run's cell profile (``profile_toml``) and
``format = 'forcelens-export'``. The stream is read and written a block of records at a
time (`daq.runs.blocks`), so a run of any length is exported in bounded memory. In
MATLAB: ``h5read('x.h5', '/displacement_m')`` and
``h5readatt('x.h5', '/displacement_m', 'unit')``.
"""

from __future__ import annotations

import os

from daq.errors import SourceError
from daq.runs.blocks import iter_stream_blocks
from daq.runs.export import export_metadata, stream_of
from daq.runs.reader import RunData

__all__ = ["HDF5_FORMAT", "export_run_hdf5"]

#: Value of the root attribute ``format``.
HDF5_FORMAT = "forcelens-export"


def export_run_hdf5(run: RunData, path: str | os.PathLike[str], *, stream: str = "samples") -> int:
    """Write one stream of ``run`` to the HDF5 file ``path``; return the number of records.

    Raises:
        RunFormatError: the run has no such stream.
        SourceError: the file cannot be written.
    """
    import h5py

    data, units = stream_of(run, stream)
    n = int(data.shape[0])
    try:
        with h5py.File(os.fspath(path), "w") as f:
            f.attrs["format"] = HDF5_FORMAT
            for key, value in export_metadata(run, stream).items():
                f.attrs[key] = value
            f.attrs["profile_toml"] = run.description["profile_toml"]
            names = data.dtype.names or ()
            datasets = {}
            for name in names:
                datasets[name] = f.create_dataset(name, shape=(n,), dtype=data.dtype[name])
                datasets[name].attrs["unit"] = units[name]
            start = 0
            for block in iter_stream_blocks(run, stream):
                stop = start + block.size
                for name in names:
                    datasets[name][start:stop] = block[name]
                start = stop
    except OSError as exc:
        raise SourceError(f"{path}: cannot write the HDF5 file ({exc})") from exc
    return n
