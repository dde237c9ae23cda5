"""What a replay feeds and checks block by block, so a record of any length is replayed
in bounded memory (issue 12, big records).

* `csv_sample_blocks`: a displacement CSV (`daq.csvfile.iter_displacement_csv`) as
  sample blocks (``daq.samples.SAMPLE_DTYPE``: ``seq`` the row number, no host time).
* `LiveComparison`: the replayed estimates against the estimates recorded live, block
  by block (`daq.runs.blocks`), remembering the first row that differs.

The observer gives the same numbers however the stream is cut into blocks, so a replay
in blocks writes the same bytes as one over the whole record.
"""

from __future__ import annotations

import math
import os
from collections.abc import Iterator

import numpy as np

from daq.csv_table import CHUNK_CHARS
from daq.csvfile import iter_displacement_csv
from daq.runs.blocks import iter_stream_blocks
from daq.runs.reader import RunData
from daq.samples import empty_block

__all__ = ["LiveComparison", "csv_sample_blocks"]


def csv_sample_blocks(
    path: str | os.PathLike[str], *, chunk_chars: int = CHUNK_CHARS
) -> Iterator[tuple[np.ndarray, int]]:
    """``(samples, bytes read so far)`` for each chunk of a displacement CSV file.

    Errors as `daq.csvfile.read_displacement_csv`, raised when the chunk is reached.
    """
    for chunk in iter_displacement_csv(path, chunk_chars=chunk_chars):
        n = chunk.time_s.size
        block = empty_block(n)
        block["seq"] = np.arange(chunk.first_row, chunk.first_row + n)
        block["device_time_s"] = chunk.time_s
        block["host_time_s"] = math.nan
        block["displacement_m"] = chunk.displacement_m
        yield block, chunk.bytes_read


class LiveComparison:
    """Replayed estimates against a run's live estimates, fed in order with `add`.

    Attributes:
        live_rows: how many estimates the run holds.
        compared: how many rows have been compared (at most ``live_rows``).
        replayed: how many replayed rows were fed.
        first_difference: index of the first row whose bytes differ, or None.
        differing: how many compared rows differ.
    """

    def __init__(self, run: RunData, stream: str, block_rows: int) -> None:
        self.live_rows = int(run.streams[stream].shape[0])
        self.compared = 0
        self.replayed = 0
        self.first_difference: int | None = None
        self.differing = 0
        self._blocks = iter_stream_blocks(run, stream, block_rows)
        self._pending = np.zeros(0, run.streams[stream].dtype)

    def add(self, estimates: np.ndarray) -> None:
        """Compare the next ``estimates.size`` rows (until the live stream ends)."""
        self.replayed += estimates.size
        want = min(estimates.size, self.live_rows - self.compared)
        if want <= 0:
            return
        live = self._take(want)
        mine = np.ascontiguousarray(estimates[:want])
        if live.dtype != mine.dtype:
            bad = np.ones(want, dtype=bool)
        elif live.tobytes() == mine.tobytes():
            bad = np.zeros(0, dtype=bool)
        else:
            rows_a = live.view(np.uint8).reshape(want, -1)
            rows_b = mine.view(np.uint8).reshape(want, -1)
            bad = (rows_a != rows_b).any(axis=1)
        if bad.any():
            self.differing += int(np.count_nonzero(bad))
            if self.first_difference is None:
                self.first_difference = self.compared + int(np.argmax(bad))
        self.compared += want

    @property
    def identical(self) -> bool:
        """Every compared row is the same, bit for bit."""
        return self.first_difference is None

    def _take(self, n: int) -> np.ndarray:
        parts, have = [self._pending], self._pending.size
        while have < n:
            block = next(self._blocks)
            parts.append(block)
            have += block.size
        joined = parts[0] if len(parts) == 1 else np.concatenate(parts)
        self._pending = joined[n:]
        return joined[:n]
