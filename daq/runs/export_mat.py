"""One stream of a run as a MATLAB/Octave file (`export_run_mat`), with scipy.io.savemat.

The file (MAT version 5, read by MATLAB, Octave and ``scipy.io.loadmat``) holds one
column vector per field of the stream, named as the field (``device_time_s``,
``displacement_m``, ...), in its recorded type (double, int64, uint32, single); a
struct ``units`` with the unit of each field (``units.displacement_m`` is ``'m'``); and
a struct ``run`` with the facts of `daq.runs.export.export_metadata` and the run's cell
profile (``run.profile_toml``). In MATLAB: ``d = load('x.mat'); plot(d.device_time_s,
d.displacement_m)``.
"""

from __future__ import annotations

import os
from collections.abc import Iterator

import numpy as np

from daq.errors import SourceError
from daq.runs.blocks import iter_stream_blocks
from daq.runs.export import export_metadata, stream_of
from daq.runs.reader import RunData

__all__ = ["export_run_mat"]

#: Names of the two structs beside the fields; no field of a run stream takes them.
UNITS_VARIABLE = "units"
RUN_VARIABLE = "run"


def export_run_mat(run: RunData, path: str | os.PathLike[str], *, stream: str = "samples") -> int:
    """Write one stream of ``run`` to the MAT file ``path``; return the number of records.

    Raises:
        RunFormatError: the run has no such stream.
        SourceError: the file cannot be written.
    """
    import scipy.io

    data, units = stream_of(run, stream)
    names = list(data.dtype.names or ())
    meta: dict[str, object] = dict(export_metadata(run, stream))
    meta["profile_toml"] = run.description["profile_toml"]
    tail: dict[str, object] = {UNITS_VARIABLE: {n: units[n] for n in names}, RUN_VARIABLE: meta}
    variables = _OneAtATime(run, stream, tail)
    try:
        scipy.io.savemat(
            os.fspath(path),
            variables,
            appendmat=False,
            format="5",
            long_field_names=True,
            do_compression=False,
            oned_as="column",
        )
    except OSError as exc:
        raise SourceError(f"{path}: cannot write the MAT file ({exc.strerror or exc})") from exc
    return int(data.shape[0])


class _OneAtATime:
    """The variables for ``savemat``, each field's column read from the stream file (a
    block of records at a time, `daq.runs.blocks`) only when it is written: ``savemat``
    takes any object whose ``items()`` gives (name, value) pairs and writes them in turn,
    so one column (80 MB at 10 M records of doubles), not the whole stream, is in memory
    at a time. The file is read once per field, from the page cache after the first.
    """

    def __init__(self, run: RunData, stream: str, tail: dict[str, object]) -> None:
        self._run, self._stream, self._tail = run, stream, tail

    def items(self) -> Iterator[tuple[str, object]]:
        data = self._run.streams[self._stream]
        for name in data.dtype.names or ():
            column = np.empty(data.shape[0], dtype=data.dtype[name])
            start = 0
            for block in iter_stream_blocks(self._run, self._stream):
                column[start : start + block.size] = block[name]
                start += block.size
            yield name, column
        yield from self._tail.items()
