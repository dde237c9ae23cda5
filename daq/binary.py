"""Binary frames, version 1 (see docs/binary-frame.md): encoder, CRC and decoder.

One frame per sample, fixed length, multi-byte fields little-endian except the CRC::

    off 0..1  A9 5C        sync
    off 2     type         ADC width in bits: 0x18 (24) or 0x20 (32)
    off 3..6  seq          uint32, wraps 2^32 -> 0
    off 7..   counts       signed two's complement, 3 bytes (24-bit) or 4 bytes (32-bit)
    next      status       uint8 device status bits
    last 2    crc          CRC-16/CCITT-FALSE over type..status, big-endian

13 bytes (24-bit) or 14 bytes (32-bit). `BinaryDecoder` is a pure object (bytes in,
sample blocks out, no I/O), vectorised with NumPy over whole buffers; its results never
depend on how the byte stream was cut into `feed` calls.
"""

from __future__ import annotations

import math

import numpy as np
from numpy.typing import ArrayLike

from daq.decoding import DecoderStats, feed_bytes, feed_host_time
from daq.errors import FramingError
from daq.samples import DEVICE_STATUS_SHIFT, FLAG_GAP_BEFORE, empty_block
from daq.scaling import Scaling

__all__ = [
    "ADC_WIDTHS",
    "FRAME_SYNC",
    "BinaryDecoder",
    "crc16_ccitt_false",
    "encode_frames",
    "frame_length",
]

FRAME_SYNC = b"\xa9\x5c"
#: ADC widths a frame may carry, bits (the type byte).
ADC_WIDTHS = (24, 32)

_SYNC0, _SYNC1 = FRAME_SYNC
_POLY = 0x1021  # x^16 + x^12 + x^5 + 1
_CRC_INIT = 0xFFFF
_SEQ_MOD = 1 << 32
_HALF_SEQ = 1 << 31


def _byte_table() -> np.ndarray:
    """CRC register after shifting each byte value (in the top byte) 8 times; uint16 (256,)."""
    reg = np.arange(256, dtype=np.uint32) << 8
    for _ in range(8):
        reg = np.where(reg & 0x8000, (reg << 1) ^ _POLY, reg << 1) & 0xFFFF
    return reg.astype(np.uint16)


def _word_table() -> np.ndarray:
    """CRC register after shifting each 16-bit value 16 times; uint16 (65536,)."""
    reg = np.arange(1 << 16, dtype=np.uint32)
    for _ in range(16):
        reg = np.where(reg & 0x8000, (reg << 1) ^ _POLY, reg << 1) & 0xFFFF
    return reg.astype(np.uint16)


_T8 = _byte_table()
_T16 = _word_table()  # two bytes per step: crc' = T16[crc ^ (b0 << 8 | b1)]
_T8_LIST = _T8.tolist()


def _check_adc_bits(adc_bits: object, where: str) -> int:
    if isinstance(adc_bits, bool) or adc_bits not in ADC_WIDTHS:
        raise FramingError(f"{where}: adc_bits={adc_bits!r} is not supported; use 24 or 32")
    return int(adc_bits)  # type: ignore[call-overload]


def frame_length(adc_bits: int) -> int:
    """Bytes in one frame: 13 for a 24-bit ADC, 14 for a 32-bit ADC."""
    bits = _check_adc_bits(adc_bits, "frame_length")
    return 2 + 1 + 4 + bits // 8 + 1 + 2


def crc16_ccitt_false(data: bytes) -> int:
    """CRC-16/CCITT-FALSE of `data` (poly 0x1021, init 0xFFFF, not reflected, xorout 0).

    Args:
        data: bytes, bytearray or memoryview.

    Returns:
        The CRC, 0..65535. Plain table-driven loop; the decoder uses a vectorised form.
    """
    if not isinstance(data, (bytes, bytearray, memoryview)):
        raise FramingError(
            f"crc16_ccitt_false: data is {type(data).__name__}, not bytes; pass raw bytes"
        )
    crc = _CRC_INIT
    table = _T8_LIST
    for byte in bytes(data):
        crc = ((crc << 8) & 0xFFFF) ^ table[(crc >> 8) ^ byte]
    return crc


def _crc_rows(rows: np.ndarray, init: int = _CRC_INIT) -> np.ndarray:
    """CRC register after feeding each row of `rows` from `init`; rows (m, k) uint8 -> (m,).

    The last axis of `rows` must be contiguous. A row that ends with its own CRC
    (big-endian) gives 0: that is how the decoder checks a whole frame in one pass.
    """
    m, k = rows.shape
    crc = np.full(m, init, dtype=np.uint16)
    if k % 2:
        crc = (crc << 8) ^ _T8[(crc >> 8) ^ rows[:, 0]]
        rows = rows[:, 1:]
    if rows.shape[1]:
        words = rows.view(">u2")  # (m, k // 2), big-endian pairs of bytes
        for j in range(words.shape[1]):
            crc = _T16[crc ^ words[:, j]]
    return crc


def _int_array(name: str, value: ArrayLike) -> np.ndarray:
    arr = np.asarray(value)
    if arr.size and not np.issubdtype(arr.dtype, np.integer):
        raise FramingError(f"encode_frames: {name} has dtype {arr.dtype}; pass integers")
    return arr.astype(np.int64, copy=False) if arr.dtype != np.uint64 else arr


def encode_frames(
    seq: ArrayLike, counts: ArrayLike, status: ArrayLike = 0, *, adc_bits: int = 24
) -> bytes:
    """Build binary frames, one per sample, back to back.

    Args:
        seq: sample counters, integers, shape (n,); taken mod 2^32.
        counts: ADC readings, integers, shape (n,), within the signed range of `adc_bits`.
        status: device status byte(s), 0..255, scalar or shape (n,).
        adc_bits: 24 or 32.

    Returns:
        n · frame_length(adc_bits) bytes (empty for n = 0).
    """
    bits = _check_adc_bits(adc_bits, "encode_frames")
    length = frame_length(bits)
    s = _int_array("seq", seq).reshape(-1)
    c = _int_array("counts", counts).reshape(-1)
    st = _int_array("status", status)
    if s.shape != c.shape:
        raise FramingError(
            f"encode_frames: seq has shape {s.shape} and counts {c.shape}; "
            "pass two arrays of equal length"
        )
    if st.ndim > 1 or (st.ndim == 1 and st.shape != s.shape):
        raise FramingError(
            f"encode_frames: status has shape {st.shape}; pass a scalar or shape {s.shape}"
        )
    lo, hi = -(1 << (bits - 1)), (1 << (bits - 1)) - 1
    if c.size and (int(c.min()) < lo or int(c.max()) > hi):
        raise FramingError(
            f"encode_frames: counts span {int(c.min())}..{int(c.max())}, outside the "
            f"{bits}-bit range {lo}..{hi}; clip them or use adc_bits=32"
        )
    if st.size and (int(st.min()) < 0 or int(st.max()) > 255):
        raise FramingError(
            f"encode_frames: status spans {int(st.min())}..{int(st.max())}; "
            "give status bytes 0..255"
        )
    n = s.size
    if n == 0:
        return b""
    out = np.empty((n, length), dtype=np.uint8)
    out[:, 0] = _SYNC0
    out[:, 1] = _SYNC1
    out[:, 2] = bits
    out[:, 3:7] = (s & 0xFFFFFFFF).astype("<u4").view(np.uint8).reshape(n, 4)
    nb = bits // 8
    out[:, 7 : 7 + nb] = c.astype("<i4").view(np.uint8).reshape(n, 4)[:, :nb]
    out[:, 7 + nb] = st
    crc = _crc_rows(out[:, 2 : length - 2])
    out[:, length - 2] = crc >> 8
    out[:, length - 1] = crc & 0xFF
    return out.tobytes()


class BinaryDecoder:
    """Turn chunks of the binary frame stream into sample blocks.

    The decoder scans the stream as if byte by byte: where a whole valid frame (sync,
    type, CRC) starts, it takes the frame and jumps past it; otherwise it throws one
    byte away and looks again at the next byte. So a frame that starts inside garbage is
    still found, and the output is the same however the stream is cut into reads.

    Args:
        scaling: converts counts to displacement_m.
        sample_rate_hz: nominal sample rate, Hz (> 0); device_time_s = seq / sample_rate_hz.
        adc_bits: 24 or 32 (the type byte every frame must carry).

    Sequence numbers are unwrapped into int64: a step forward of 1..2^31 − 1 (mod 2^32)
    continues the count (steps above 1 are gaps: counted in `samples_lost` and flagged
    `FLAG_GAP_BEFORE`); any other step (back, repeat) is a device restart: the sample
    takes the raw value, is counted in `seq_restarts` and flagged `FLAG_GAP_BEFORE`.
    The status byte goes to bits 8..15 of ``flags``.
    """

    def __init__(self, scaling: Scaling, sample_rate_hz: float, *, adc_bits: int = 24) -> None:
        if not isinstance(scaling, Scaling):
            raise FramingError(
                f"scaling={scaling!r} is not a daq.scaling.Scaling; build one with Scaling(...)"
            )
        if (
            isinstance(sample_rate_hz, bool)
            or not isinstance(sample_rate_hz, (int, float, np.integer, np.floating))
            or not math.isfinite(float(sample_rate_hz))
            or float(sample_rate_hz) <= 0.0
        ):
            raise FramingError(
                f"sample_rate_hz={sample_rate_hz!r} is not a positive finite rate; "
                "give the device's sample rate in Hz"
            )
        self.adc_bits = _check_adc_bits(adc_bits, "BinaryDecoder")
        self.scaling = scaling
        self.sample_rate_hz = float(sample_rate_hz)
        self.frame_length = frame_length(self.adc_bits)
        # The type byte is the same in every accepted frame, so the CRC register after it
        # is a constant; start from there when the rest has an even length (24-bit).
        self._crc_from = 2 if (self.frame_length - 2) % 2 == 0 else 3
        self._crc_init = (
            _CRC_INIT if self._crc_from == 2 else crc16_ccitt_false(bytes([self.adc_bits]))
        )
        self.reset()

    def reset(self) -> None:
        """Forget buffered bytes, the last sequence number and every counter."""
        self._pending = b""
        self._last_raw = 0
        self._last_seq: int | None = None
        self._in_discard = False  # the last byte examined was thrown away
        self._ok = 0
        self._rejected = 0
        self._discarded = 0
        self._lost = 0
        self._restarts = 0

    def stats(self) -> DecoderStats:
        """Counters since construction or `reset` (see `DecoderStats`)."""
        return DecoderStats(
            samples_ok=self._ok,
            rejected=self._rejected,
            bytes_discarded=self._discarded,
            samples_lost=self._lost,
            seq_restarts=self._restarts,
        )

    @property
    def bytes_buffered(self) -> int:
        """Bytes kept for the next `feed` (always fewer than one frame)."""
        return len(self._pending)

    @property
    def last_seq(self) -> int | None:
        """Unwrapped sequence number of the last decoded frame (None before the first)."""
        return self._last_seq

    def discard_partial(self) -> int:
        """Drop the buffered incomplete frame (after a reconnect); return its bytes.

        The dropped bytes count in ``bytes_discarded``; the last sequence number and the
        other counters are kept, so a gap before the next frame is still counted.
        """
        n = len(self._pending)
        self._pending = b""
        self._discarded += n
        self._in_discard = False
        return n

    def feed(self, data: bytes, host_time_s: float = math.nan) -> np.ndarray:
        """Decode `data`; return the samples of every frame completed by it.

        Args:
            data: the next bytes of the stream (bytes, bytearray or memoryview).
            host_time_s: host clock at receipt, s, stamped on every returned sample.

        Returns:
            Block of shape (n,), dtype `SAMPLE_DTYPE`, in stream order. Bad bytes never
            raise; they are counted and skipped.
        """
        data = feed_bytes(data)
        host = feed_host_time(host_time_s)
        buf = self._pending + data if self._pending else data
        L = self.frame_length
        n = len(buf)
        if n < L:
            self._pending = buf
            return empty_block()
        b = np.frombuffer(buf, dtype=np.uint8)
        n_start = n - L + 1  # frames can start at 0 .. n - L; later starts wait for bytes
        cand = np.flatnonzero(b[:n_start] == _SYNC0)
        cand = cand[(b[cand + 1] == _SYNC1) & (b[cand + 2] == self.adc_bits)]
        m = cand.size
        if m and cand[-1] - cand[0] == L * (m - 1) and (m == 1 or np.all(np.diff(cand) == L)):
            # Common case: back-to-back frames; look at them in place.
            frames = b[cand[0] : cand[0] + L * m].reshape(m, L)
        else:
            windows = np.lib.stride_tricks.as_strided(
                b, shape=(n_start, L), strides=(1, 1), writeable=False
            )
            frames = windows[cand]
        valid = _crc_rows(frames[:, self._crc_from :], self._crc_init) == 0
        if not valid.all():
            cand, frames = cand[valid], frames[valid]
        if cand.size > 1:
            close = np.flatnonzero(np.diff(cand) < L) + 1
            if close.size:  # valid frames that overlap: rare, only after garbage
                keep = _first_fit(cand, close, L)
                cand, frames = cand[keep], frames[keep]
        a = cand.size
        end = int(cand[-1]) + L if a else 0
        stop = max(end, n_start)  # every start before `stop` has been examined
        self._pending = buf[stop:]
        self._count_discards(cand, stop, L)
        if a == 0:
            return empty_block()
        return self._samples(frames, host)

    def _count_discards(self, starts: np.ndarray, stop: int, L: int) -> None:
        """Update bytes_discarded and rejected from the accepted frame starts."""
        a = starts.size
        self._discarded += stop - a * L
        if a == 0:
            if stop > 0:
                self._rejected += not self._in_discard
                self._in_discard = True
            return
        first_gap = int(starts[0])
        last_gap = stop - (int(starts[-1]) + L)
        inner = int(np.count_nonzero(np.diff(starts) > L)) if a > 1 else 0
        runs = inner + (first_gap > 0 and not self._in_discard) + (last_gap > 0)
        self._rejected += runs
        self._in_discard = last_gap > 0

    def _samples(self, frames: np.ndarray, host: float) -> np.ndarray:
        """Samples of the accepted frames (a, L) uint8; updates the sequence counters."""
        a = frames.shape[0]
        L = self.frame_length
        raw = np.ascontiguousarray(frames[:, 3:7]).view("<u4").reshape(a).astype(np.int64)
        if self.adc_bits == 32:
            counts = np.ascontiguousarray(frames[:, 7:11]).view("<i4").reshape(a)
        else:
            four = np.empty((a, 4), dtype=np.uint8)
            four[:, :3] = frames[:, 7:10]
            four[:, 3] = (frames[:, 9] >> 7) * np.uint8(0xFF)  # sign extension
            counts = four.view("<i4").reshape(a)
        status = frames[:, L - 3]

        first_ever = self._last_seq is None
        prev = np.empty(a, dtype=np.int64)
        prev[1:] = raw[:-1]
        prev[0] = raw[0] - 1 if first_ever else self._last_raw
        delta = (raw - prev) & (_SEQ_MOD - 1)
        forward = (delta > 0) & (delta < _HALF_SEQ)
        if first_ever:
            forward[0] = False  # the first frame starts the count at its raw value
        inc = np.where(forward, delta, 0)
        total = np.cumsum(inc)
        restart = ~forward
        n_restart = int(np.count_nonzero(restart))
        if n_restart == 0:
            seq = total + self._last_seq
        elif n_restart == 1 and restart[0]:
            seq = total + raw[0]  # total[0] is 0: the count starts at the first raw value
        else:  # each restart re-bases the count on its raw value
            idx = np.where(restart, np.arange(a), -1)
            np.maximum.accumulate(idx, out=idx)
            base = np.where(idx >= 0, (raw - total)[idx], self._last_seq or 0)
            seq = base + total
        gap = forward & (delta > 1)
        flagged = gap | restart
        if first_ever:
            flagged[0] = False
        n_restarts = n_restart - first_ever
        if gap.any():
            self._lost += int((delta[gap] - 1).sum())
        self._restarts += n_restarts
        self._ok += a
        self._last_raw = int(raw[-1])
        self._last_seq = int(seq[-1])

        out = np.empty(a, dtype=empty_block().dtype)
        out["seq"] = seq
        out["device_time_s"] = seq / self.sample_rate_hz
        out["host_time_s"] = host
        out["counts"] = counts
        out["displacement_m"] = self.scaling.to_metres(counts)
        flags = status.astype(np.uint32) << DEVICE_STATUS_SHIFT
        flags |= flagged.astype(np.uint32) * np.uint32(FLAG_GAP_BEFORE)
        out["flags"] = flags
        return out


def _first_fit(starts: np.ndarray, close: np.ndarray, L: int) -> np.ndarray:
    """Keep-mask over sorted valid frame starts: earliest frame wins, overlaps dropped.

    `close` lists the indices j whose start is within L bytes of start j − 1; every
    other start is kept without looking (nothing accepted before it can reach it).
    """
    keep = np.ones(starts.size, dtype=bool)
    last_end = -1
    prev_j = -2
    for j in close.tolist():
        if j - 1 != prev_j:  # start j − 1 was kept without looking
            last_end = int(starts[j - 1]) + L
        s = int(starts[j])
        if s >= last_end:
            last_end = s + L
        else:
            keep[j] = False
        prev_j = j
    return keep
