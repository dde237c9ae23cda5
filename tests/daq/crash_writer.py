"""Child process for the crash test in test_runs.py (not a test module itself).

Usage: ``python crash_writer.py <run folder>``

Writes one block of 100 samples every 10 ms (consecutive ``seq`` from 0) with
``flush_interval_s = 0.25`` in real time, and after every flush prints one line
``flushed <records on disk> <time.monotonic() in s>``. It prints ``ready <time>`` once the
run is open. The parent kills it with SIGKILL; as a safety net it stops by itself
after 20 s.
"""

from __future__ import annotations

import sys
import time

import numpy as np

from daq.runs import RunWriter
from daq.samples import empty_block

BLOCK = 100
PERIOD_S = 0.010
RATE_HZ = BLOCK / PERIOD_S


def main(folder: str) -> None:
    writer = RunWriter(folder, cell_name="crash-test", flush_interval_s=0.25)
    print(f"ready {time.monotonic():.6f}", flush=True)
    start = time.monotonic()
    seq0 = 0
    shown = 0
    while time.monotonic() - start < 20.0:
        block = empty_block(BLOCK)
        block["seq"] = np.arange(seq0, seq0 + BLOCK)
        block["device_time_s"] = block["seq"] / RATE_HZ
        block["host_time_s"] = time.monotonic()
        block["counts"] = block["seq"] % 1000
        seq0 += BLOCK
        writer.append(block)
        if seq0 % (10 * BLOCK) == 0:
            writer.event("mark", "ten blocks", seq=seq0 - 1)
        if writer.flushed_records != shown:
            shown = writer.flushed_records
            print(f"flushed {shown} {time.monotonic():.6f}", flush=True)
        time.sleep(PERIOD_S)
    writer.close("aborted")


if __name__ == "__main__":
    main(sys.argv[1])
