"""What every frame decoder offers, and how to build one from a framing name.

A decoder is a pure object: bytes in, `SAMPLE_DTYPE` blocks out, no I/O. Two exist:

* ``"ascii-lines"``: `daq.lines.LineDecoder` (docs/ascii-line-format.md);
* ``"binary-24"`` and ``"binary-32"``: `daq.binary.BinaryDecoder` (docs/binary-frame.md).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Protocol, runtime_checkable

import numpy as np

from daq.errors import FramingError
from daq.scaling import Scaling

__all__ = ["FRAMINGS", "Decoder", "DecoderStats", "feed_bytes", "feed_host_time", "make_decoder"]

#: Every framing name a cell profile may give.
FRAMINGS = ("ascii-lines", "binary-24", "binary-32")


@dataclass(frozen=True)
class DecoderStats:
    """Counters of one decoder, cumulative since it was built or last `reset`.

    Attributes:
        samples_ok: valid lines or frames decoded into samples.
        rejected: malformed lines; for binary frames, stretches of bytes thrown away
            between valid frames (bad sync, type or CRC; one per resynchronisation).
        bytes_discarded: bytes thrown away while resynchronising, in malformed lines, or
            dropped by `Decoder.discard_partial`.
        samples_lost: sum of forward sequence gaps (missing sequence numbers).
        seq_restarts: times the sequence number went backwards or repeated.
    """

    samples_ok: int = 0
    rejected: int = 0
    bytes_discarded: int = 0
    samples_lost: int = 0
    seq_restarts: int = 0


@runtime_checkable
class Decoder(Protocol):
    """Bytes of one framing in, sample blocks out; results never depend on the cuts."""

    def feed(self, data: bytes, host_time_s: float = math.nan) -> np.ndarray:
        """Decode the next bytes; return a block of shape (n,), dtype `SAMPLE_DTYPE`."""
        ...

    def discard_partial(self) -> int:
        """Drop buffered incomplete bytes (after a reconnect); return how many.

        The last sequence number and the counters are kept, so a gap before the next
        sample is still counted.
        """
        ...

    def stats(self) -> DecoderStats:
        """The counters so far."""
        ...

    def reset(self) -> None:
        """Forget buffered bytes, the last sequence number and every counter."""
        ...


def make_decoder(
    framing: str,
    scaling: Scaling,
    sample_rate_hz: float,
    *,
    delimiter: bytes = b",",
    columns: Sequence[str] = ("seq", "time_us", "counts"),
) -> Decoder:
    """Build the decoder of a framing named in a cell profile.

    Args:
        framing: one of `FRAMINGS`.
        scaling: converts counts to displacement_m.
        sample_rate_hz: nominal sample rate, Hz (> 0); binary frames and ASCII lines
            without a time column derive device_time_s = seq / sample_rate_hz from it.
        delimiter, columns: ``"ascii-lines"`` only (see `daq.lines.LineDecoder`).

    Raises:
        FramingError: unknown framing, or a setting the chosen decoder refuses.
    """
    # Imported here: both modules import DecoderStats from this one.
    from daq.binary import BinaryDecoder
    from daq.lines import LineDecoder

    if framing == "ascii-lines":
        return LineDecoder(scaling, delimiter, columns=columns, sample_rate_hz=sample_rate_hz)
    if framing == "binary-24":
        return BinaryDecoder(scaling, sample_rate_hz, adc_bits=24)
    if framing == "binary-32":
        return BinaryDecoder(scaling, sample_rate_hz, adc_bits=32)
    raise FramingError(
        f"framing={framing!r} is unknown; use one of {', '.join(repr(f) for f in FRAMINGS)}"
    )


def feed_bytes(data: object) -> bytes:
    """The bytes given to a decoder's ``feed`` (bytes, bytearray or memoryview)."""
    if isinstance(data, bytes):
        return data
    if isinstance(data, (bytearray, memoryview)):
        return bytes(data)
    raise FramingError(f"feed: data is {type(data).__name__}, not bytes; pass the raw bytes read")


def feed_host_time(host_time_s: object) -> float:
    """The host time given to a decoder's ``feed``, s, as a float."""
    try:
        return float(host_time_s)  # type: ignore[arg-type]
    except (TypeError, ValueError):
        raise FramingError(
            f"feed: host_time_s={host_time_s!r} is not a number; pass seconds as float"
        ) from None
