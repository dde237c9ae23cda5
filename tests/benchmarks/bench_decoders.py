"""Benchmark: BinaryDecoder and LineDecoder throughput vs plain per-sample Python loops.

Each decoder reads ~2 M samples twice: fed in 64 KiB chunks (as a serial reader would
hand them over) and as one buffer. The baselines, measured in the same run on a prefix
(they are slow), are the obvious loops: for frames, a sync search with `bytes.find`,
`struct.unpack_from` and `binascii.crc_hqx` per frame; for lines, `split` and `int` per
line. The machines are noisy, so every timing is repeated, interleaved, and the best is
kept. Targets: >= 2 M frames/s and >= 0.5 M lines/s on one core. Not a test; run it by
hand:

    python tests/benchmarks/bench_decoders.py [n_samples] [repeats]
"""

from __future__ import annotations

import binascii
import struct
import sys
import time
from collections.abc import Callable

import numpy as np

from daq.binary import BinaryDecoder, encode_frames
from daq.lines import LineDecoder, encode_lines
from daq.scaling import Scaling

SCALING = Scaling(volts_per_count=20.0 / 2**24, metres_per_volt=5e-5)
RATE_HZ = 10_000.0
CHUNK = 65536


def feed_chunked(dec: BinaryDecoder | LineDecoder, data: bytes) -> int:
    view = memoryview(data)
    n = 0
    for i in range(0, len(data), CHUNK):
        n += dec.feed(view[i : i + CHUNK].tobytes(), 1.0).size
    return n


def feed_whole(dec: BinaryDecoder | LineDecoder, data: bytes) -> int:
    return dec.feed(data, 1.0).size


def loop_frames(data: bytes) -> int:
    """The plain way: find the sync, check the CRC, unpack, one frame at a time."""
    out = []
    pos, n = 0, len(data)
    while True:
        pos = data.find(b"\xa9\x5c", pos)
        if pos < 0 or pos + 13 > n:
            break
        if (
            data[pos + 2] == 24
            and binascii.crc_hqx(data[pos + 2 : pos + 11], 0xFFFF)
            == struct.unpack_from(">H", data, pos + 11)[0]
        ):
            seq, lo, hi, status = struct.unpack_from("<IHbB", data, pos + 3)
            counts = (hi << 16) | lo
            out.append((seq, seq / RATE_HZ, counts, status))
            pos += 13
        else:
            pos += 1
    return len(out)


def loop_lines(data: bytes) -> int:
    """The plain way: split lines and fields, int() each field."""
    out = []
    for line in data.split(b"\n"):
        fields = line.split(b",")
        if len(fields) != 3:
            continue
        try:
            seq, t_us, counts = int(fields[0]), int(fields[1]), int(fields[2])
        except ValueError:
            continue
        out.append((seq, t_us * 1e-6, counts))
    return len(out)


def main(n: int = 2_000_000, repeats: int = 5, n_loop: int = 200_000) -> None:
    rng = np.random.default_rng(0)
    seq = np.arange(n, dtype=np.int64)
    counts = rng.integers(-(2**23), 2**23, n)
    frames = encode_frames(seq, counts, 0, adc_bits=24)
    lines = encode_lines(seq, seq * 100, counts)
    frames_loop = frames[: 13 * n_loop]
    lines_loop = b"".join(lines.splitlines(keepends=True)[:n_loop])
    bdec = BinaryDecoder(SCALING, RATE_HZ)
    ldec = LineDecoder(SCALING)

    def fresh(
        dec: BinaryDecoder | LineDecoder, how: Callable[..., int], data: bytes
    ) -> Callable[[], int]:
        def run() -> int:
            dec.reset()
            return how(dec, data)

        return run

    cases: dict[str, tuple[Callable[[], int], int]] = {
        "binary, 64 KiB chunks": (fresh(bdec, feed_chunked, frames), n),
        "binary, one buffer": (fresh(bdec, feed_whole, frames), n),
        "binary, Python loop": (lambda: loop_frames(frames_loop), n_loop),
        "lines, 64 KiB chunks": (fresh(ldec, feed_chunked, lines), n),
        "lines, one buffer": (fresh(ldec, feed_whole, lines), n),
        "lines, Python loop": (lambda: loop_lines(lines_loop), n_loop),
    }
    times: dict[str, list[float]] = {name: [] for name in cases}
    for _ in range(repeats):  # interleaved, so a slow phase of the machine hits every case
        for name, (run, expected) in cases.items():
            t0 = time.perf_counter()
            got = run()
            times[name].append(time.perf_counter() - t0)
            assert got == expected, (name, got, expected)
    print(f"{n} samples: {len(frames) / 1e6:.1f} MB of frames, {len(lines) / 1e6:.1f} MB of lines")
    print(f"baselines on the first {n_loop} samples; best (median) of {repeats} interleaved runs")
    for kind, unit, target in (("binary", "frames", 2e6), ("lines", "lines", 0.5e6)):
        base = cases[f"{kind}, Python loop"][1] / min(times[f"{kind}, Python loop"])
        for how in ("64 KiB chunks", "one buffer", "Python loop"):
            name = f"{kind}, {how}"
            count = cases[name][1]
            best = count / min(times[name])
            median = count / float(np.median(times[name]))
            verdict = ""
            if how != "Python loop":
                verdict = "  target met" if best >= target else "  BELOW TARGET"
            print(
                f"{kind:6} {how:14}: {best / 1e6:6.2f} ({median / 1e6:6.2f}) M {unit}/s, "
                f"{best / base:6.1f} x the loop{verdict}"
            )


if __name__ == "__main__":
    args = [int(a) for a in sys.argv[1:3]]
    main(*args)
