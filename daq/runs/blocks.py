"""A run's stream in blocks of records (`iter_stream_blocks`), in bounded memory.

`daq.runs.read_run` maps a stream into memory; every page of the map that is touched
stays in the process (a 10-million-sample run is 440 MB of samples and 760 MB of
estimates). The blocks here are read from the stream file with ``numpy.fromfile`` into
fresh arrays that are dropped once used, so a whole run can be replayed, compared or
exported holding one block at a time. Only the records `read_run` counted are read (a
torn last record stays out).
"""

from __future__ import annotations

from collections.abc import Iterator

import numpy as np

from daq.errors import RunFormatError
from daq.runs.reader import RunData

__all__ = ["BLOCK_ROWS", "iter_stream_blocks"]

#: Records per block by default (about 9 MB of samples).
BLOCK_ROWS = 200_000


def iter_stream_blocks(
    run: RunData, stream: str = "samples", block_rows: int = BLOCK_ROWS
) -> Iterator[np.ndarray]:
    """The records of ``stream`` in order, ``block_rows`` at a time (the last block may be
    shorter), each a writable array of the stream's dtype.

    Raises:
        RunFormatError: the run has no such stream, or its file is shorter than when the
            run was read.
        ValueError: ``block_rows`` is not a whole number > 0.
    """
    if block_rows < 1:
        raise ValueError(f"block_rows = {block_rows!r}: must be a whole number > 0")
    if stream not in run.streams:
        raise RunFormatError(
            f"stream {stream!r} is not in run {run.run_id}; streams: {', '.join(run.streams)}"
        )
    data = run.streams[stream]
    n = int(data.shape[0])
    if not isinstance(data, np.memmap):  # read into memory already: slices of it
        for start in range(0, n, block_rows):
            yield np.array(data[start : start + block_rows])
        return
    path = run.folder / run.description["streams"][stream]["file"]
    try:
        with open(path, "rb") as handle:
            for start in range(0, n, block_rows):
                count = min(block_rows, n - start)
                block = np.fromfile(handle, dtype=data.dtype, count=count)
                if block.size != count:
                    raise RunFormatError(
                        f"{path}: ends after {start + block.size} records; it held {n} when "
                        "the run was read (changed while being read)"
                    )
                yield block
    except OSError as exc:
        raise RunFormatError(f"{path}: cannot read ({exc.strerror or exc})") from exc
