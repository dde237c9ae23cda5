"""The one sample record shared by every source, decoder and recorder.

A block of samples is a 1-D NumPy structured array of `SAMPLE_DTYPE`, shape (n,):

=================  =====  ==========================================================
field              dtype  meaning
=================  =====  ==========================================================
``seq``            <i8    device sequence number (never wraps)
``device_time_s``  <f8    device clock at conversion, s
``host_time_s``    <f8    host monotonic clock when the bytes arrived, s (NaN: unknown)
``counts``         <i8    raw ADC reading, counts
``displacement_m`` <f8    counts scaled to displacement, m
``flags``          <u4    bit set of ``FLAG_*`` values
=================  =====  ==========================================================
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from daq.errors import FramingError

__all__ = [
    "DEVICE_STATUS_SHIFT",
    "DISPLACEMENT_MAX_M",
    "FLAG_GAP_BEFORE",
    "FLAG_RECONNECT_BEFORE",
    "SAMPLE_DTYPE",
    "SAMPLE_UNITS",
    "TIME_MAX_S",
    "concat_blocks",
    "device_status",
    "empty_block",
]

SAMPLE_DTYPE = np.dtype(
    [
        ("seq", "<i8"),
        ("device_time_s", "<f8"),
        ("host_time_s", "<f8"),
        ("counts", "<i8"),
        ("displacement_m", "<f8"),
        ("flags", "<u4"),
    ]
)

#: Largest magnitude of a record's time, s (about 31 700 years; a Unix time is ~2e9 s).
#: Beyond it a time is damage, not a clock, and the arithmetic of a sample interval
#: overflows (an interval of 1e308 s made the observer's discretisation fail).
TIME_MAX_S = 1e12

#: Largest magnitude of a displacement, m: a cell's transducer reads micrometres to
#: millimetres, so a metre is a unit error or damage (the observer refuses it too), and
#: squares of 1e308 overflow.
DISPLACEMENT_MAX_M = 1.0

#: Units of each field, as recorded in run descriptions and CSV headers.
SAMPLE_UNITS = {
    "seq": "1",
    "device_time_s": "s",
    "host_time_s": "s",
    "counts": "count",
    "displacement_m": "m",
    "flags": "1",
}

#: Sequence numbers are missing just before this sample (samples were lost), or the
#: sequence went backwards (device restart).
FLAG_GAP_BEFORE = 1
#: The port was lost and reopened just before this sample (set by the serial reader).
FLAG_RECONNECT_BEFORE = 2
#: Bits 8..15 of ``flags`` carry the device's own status byte (binary frames), unchanged.
DEVICE_STATUS_SHIFT = 8


def device_status(block: np.ndarray) -> np.ndarray:
    """The device status byte of each sample (bits 8..15 of ``flags``); uint8, shape (n,)."""
    return ((block["flags"] >> DEVICE_STATUS_SHIFT) & 0xFF).astype(np.uint8)


def empty_block(n: int = 0) -> np.ndarray:
    """Return a zero-filled block of `n` samples, shape (n,), dtype `SAMPLE_DTYPE`."""
    if n < 0:
        raise FramingError(f"empty_block: n={n!r} is negative; pass a count >= 0")
    return np.zeros(n, dtype=SAMPLE_DTYPE)


def concat_blocks(blocks: Sequence[np.ndarray]) -> np.ndarray:
    """Join sample blocks end to end; returns shape (sum of lengths,), dtype `SAMPLE_DTYPE`.

    An empty sequence gives an empty block. Every block must have dtype `SAMPLE_DTYPE`.
    """
    for i, block in enumerate(blocks):
        if not isinstance(block, np.ndarray) or block.dtype != SAMPLE_DTYPE:
            dtype = getattr(block, "dtype", type(block).__name__)
            raise FramingError(
                f"concat_blocks: blocks[{i}] has dtype {dtype}; "
                "pass arrays made with daq.samples.SAMPLE_DTYPE"
            )
    if not blocks:
        return empty_block()
    return np.concatenate([np.ravel(b) for b in blocks])
