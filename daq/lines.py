"""Decode and encode the forcelens ASCII line format (see docs/ascii-line-format.md).

One sample per line::

    <seq>,<device_time_us>,<counts>\\n

* ``seq``: sample sequence number, 1 to 18 decimal digits, no sign (0 ≤ seq < 10^18).
  It never wraps; a jump forward means lost samples.
* ``device_time_us``: device clock at conversion, µs, 1 to 18 digits, no sign.
* ``counts``: raw ADC reading, an optional ``-`` then 1 to 18 digits.
* An optional CR just before the LF is tolerated; empty lines (or a lone CR) are ignored.
* Anything else on a line (spaces, ``+``, a fourth field, letters...) makes it malformed.
* A line longer than ``max_line_bytes`` (counted up to, not including, the LF) is malformed.

`LineDecoder` is a pure object: bytes in, sample blocks out, no I/O. Decoding is
vectorised with NumPy over whole buffers; results never depend on how the byte stream
was cut into `feed` calls.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np
from numpy.typing import ArrayLike

from daq.errors import FramingError
from daq.samples import FLAG_GAP_BEFORE, empty_block
from daq.scaling import Scaling

__all__ = ["MAX_DIGITS", "LineDecoder", "encode_lines"]

#: Largest number of digits in one field (10^18 − 1 fits in int64 without overflow).
MAX_DIGITS = 18

_LF = 10
_CR = 13
_MINUS = 45
# Byte classes used by the vectorised decoder.
_C_DIGIT, _C_DELIM, _C_MINUS, _C_CR, _C_LF, _C_OTHER = range(6)
_SHOWN_BYTES = 60  # how much of a malformed line `last_malformed` shows


def _check_delimiter(delimiter: object) -> int:
    if not isinstance(delimiter, (bytes, bytearray)) or len(delimiter) != 1:
        raise FramingError(
            f"delimiter={delimiter!r} is not a single byte; pass one byte such as b','"
        )
    d = delimiter[0]
    if d in (_LF, _CR, _MINUS) or 48 <= d <= 57:
        raise FramingError(
            f"delimiter={delimiter!r} clashes with digits, '-', CR or LF; pick another byte"
        )
    return d


class LineDecoder:
    """Turn chunks of the ASCII line stream into sample blocks.

    Args:
        scaling: converts counts to displacement_m.
        delimiter: the one byte between fields (default ``b","``).
        max_line_bytes: longest accepted line, bytes before the LF (16..1_048_576).

    Counters (cumulative since construction or `reset`):
        lines_ok: valid lines decoded into samples.
        lines_malformed: non-blank lines rejected (including over-long ones).
        samples_lost: sum of forward gaps in ``seq`` between consecutive valid lines.
        seq_restarts: valid lines whose ``seq`` did not increase (device restart or replay).
        last_malformed: ``repr`` of the last rejected line (first bytes only), or ``None``.
    """

    def __init__(
        self, scaling: Scaling, delimiter: bytes = b",", *, max_line_bytes: int = 256
    ) -> None:
        if not isinstance(scaling, Scaling):
            raise FramingError(
                f"scaling={scaling!r} is not a daq.scaling.Scaling; build one with Scaling(...)"
            )
        self._delim = _check_delimiter(delimiter)
        if (
            isinstance(max_line_bytes, bool)
            or not isinstance(max_line_bytes, (int, np.integer))
            or not 16 <= max_line_bytes <= 1 << 20
        ):
            raise FramingError(
                f"max_line_bytes={max_line_bytes!r} is out of range; give an integer 16..1048576"
            )
        classes = np.full(256, _C_OTHER, dtype=np.uint8)
        classes[48:58] = _C_DIGIT
        classes[_MINUS] = _C_MINUS
        classes[_CR] = _C_CR
        classes[_LF] = _C_LF
        classes[self._delim] = _C_DELIM
        self._classes = classes
        self.scaling = scaling
        self.delimiter = bytes(delimiter)
        self.max_line_bytes = int(max_line_bytes)
        self.reset()

    def reset(self) -> None:
        """Forget buffered bytes, the last sequence number and every counter."""
        self._pending = b""
        self._skipping = False  # inside an over-long line already counted
        self._last_seq: int | None = None
        self.lines_ok = 0
        self.lines_malformed = 0
        self.samples_lost = 0
        self.seq_restarts = 0
        self.last_malformed: str | None = None

    @property
    def bytes_buffered(self) -> int:
        """Bytes of an incomplete line kept for the next `feed` (≤ max_line_bytes)."""
        return len(self._pending)

    # ------------------------------------------------------------------ feeding
    def feed(self, data: bytes, host_time_s: float = math.nan) -> np.ndarray:
        """Decode `data`; return the samples of every line completed by it.

        Args:
            data: the next bytes of the stream (bytes, bytearray or memoryview).
            host_time_s: host clock at receipt, s, stamped on every returned sample.

        Returns:
            Block of shape (n,), dtype `SAMPLE_DTYPE`, in stream order. Malformed lines
            never raise; they are counted and skipped.
        """
        if isinstance(data, memoryview):
            data = data.tobytes()
        if not isinstance(data, (bytes, bytearray)):
            raise FramingError(
                f"feed: data is {type(data).__name__}, not bytes; pass the raw bytes read"
            )
        try:
            host = float(host_time_s)
        except (TypeError, ValueError):
            raise FramingError(
                f"feed: host_time_s={host_time_s!r} is not a number; pass seconds as float"
            ) from None
        data = bytes(data)
        if self._skipping:
            lf = data.find(b"\n")
            if lf < 0:
                return empty_block()
            self._skipping = False
            data = data[lf + 1 :]
        last_lf = data.rfind(b"\n")
        if last_lf < 0:
            self._pending += data
            self._check_pending()
            return empty_block()
        complete = self._pending + data[: last_lf + 1]
        self._pending = data[last_lf + 1 :]
        block = self._decode_complete(complete, host)
        self._check_pending()
        return block

    def _check_pending(self) -> None:
        if len(self._pending) > self.max_line_bytes:
            self._note_malformed(self._pending)
            self._pending = b""
            self._skipping = True

    def _note_malformed(self, raw: bytes) -> None:
        self.lines_malformed += 1
        self.last_malformed = self._show(raw)

    def _show(self, raw: bytes) -> str:
        keep = min(_SHOWN_BYTES, self.max_line_bytes)
        return repr(raw[:keep]) + ("..." if len(raw) > keep else "")

    # ----------------------------------------------------------------- decoding
    def _decode_complete(self, buf: bytes, host: float) -> np.ndarray:
        """Decode `buf`, which ends with LF; update counters; return the samples."""
        b = np.frombuffer(buf, dtype=np.uint8)
        n = b.size
        cls = self._classes[b]  # one pass over the bytes; the rest works on positions
        nl = np.flatnonzero(cls == _C_LF)
        n_lines = nl.size
        starts = np.empty(n_lines, dtype=np.int64)
        starts[0] = 0
        starts[1:] = nl[:-1] + 1
        raw_len = nl - starts
        too_long = raw_len > self.max_line_bytes

        # Line of each special byte: the first LF at or after it.
        cr = np.flatnonzero(cls == _C_CR)
        cr_line = np.searchsorted(nl, cr)
        cr_last = cr == nl[cr_line] - 1  # a CR just before the LF is tolerated
        has_cr = np.zeros(n_lines, dtype=bool)
        has_cr[cr_line[cr_last]] = True
        bad_line = np.concatenate(
            [cr_line[~cr_last], np.searchsorted(nl, np.flatnonzero(cls == _C_OTHER))]
        )
        n_other = np.bincount(bad_line, minlength=n_lines)
        delims = np.flatnonzero(cls == _C_DELIM)
        delim_line = np.searchsorted(nl, delims)
        n_delim = np.bincount(delim_line, minlength=n_lines)
        n_minus = np.bincount(
            np.searchsorted(nl, np.flatnonzero(cls == _C_MINUS)), minlength=n_lines
        )
        ends = nl - has_cr  # content is [starts, ends)
        blank = ends == starts
        ok = ~blank & ~too_long & (n_other == 0) & (n_delim == 2)

        # Field boundaries of the candidate lines: two delimiters each, in order.
        dpos = delims[ok[delim_line]].reshape(-1, 2)
        idx = np.flatnonzero(ok)
        d1, d2 = dpos[:, 0], dpos[:, 1]
        s0, e = starts[idx], ends[idx]
        neg = b[np.minimum(d2 + 1, n - 1)] == _MINUS  # d2 + 1 <= nl, always in range
        len0 = d1 - s0
        len1 = d2 - d1 - 1
        len2 = e - d2 - 1 - neg
        good = (
            (n_minus[idx] == neg)
            & (len0 >= 1)
            & (len0 <= MAX_DIGITS)
            & (len1 >= 1)
            & (len1 <= MAX_DIGITS)
            & (len2 >= 1)
            & (len2 <= MAX_DIGITS)
        )
        ok[idx[~good]] = False
        keep = good.nonzero()[0]
        idx = idx[keep]

        malformed = ~blank & ~ok
        n_bad = int(np.count_nonzero(malformed))
        if n_bad:
            last = int(np.flatnonzero(malformed)[-1])
            self._note_malformed(buf[starts[last] : nl[last]])
            self.lines_malformed += n_bad - 1

        m = idx.size
        if m == 0:
            return empty_block()
        seq = _digits_to_int(b, s0[keep], d1[keep])
        t_us = _digits_to_int(b, d1[keep] + 1, d2[keep])
        counts = _digits_to_int(b, d2[keep] + 1 + neg[keep], e[keep])
        counts = np.where(neg[keep], -counts, counts)

        out = empty_block(m)
        out["seq"] = seq
        out["device_time_s"] = t_us * 1e-6
        out["host_time_s"] = host
        out["counts"] = counts
        out["displacement_m"] = self.scaling.to_metres(counts)
        prev = np.empty(m, dtype=np.int64)
        prev[1:] = seq[:-1]
        if self._last_seq is None:
            prev[0] = seq[0] - 1  # the very first sample has no predecessor
        else:
            prev[0] = self._last_seq
        step = seq - prev
        gap = step > 1
        back = step < 1
        out["flags"] = np.where(gap | back, FLAG_GAP_BEFORE, 0).astype(np.uint32)
        self.samples_lost += int((step[gap] - 1).sum())
        self.seq_restarts += int(np.count_nonzero(back))
        self.lines_ok += m
        self._last_seq = int(seq[-1])
        return out


def _digits_to_int(b: np.ndarray, start: np.ndarray, end: np.ndarray) -> np.ndarray:
    """Values of the digit runs b[start:end] (each 1..MAX_DIGITS long); int64, shape (m,)."""
    width = end - start
    w = int(width.max())
    offs = np.arange(-w, 0, dtype=np.int64)  # positions counted back from each end
    mask = offs[None, :] >= -width[:, None]
    pos = np.where(mask, end[:, None] + offs[None, :], 0)
    digits = np.where(mask, b[pos].astype(np.int64) - 48, 0)
    pow10 = 10 ** np.arange(w - 1, -1, -1, dtype=np.int64)
    return digits @ pow10


def encode_lines(
    seq: ArrayLike,
    device_time_us: ArrayLike,
    counts: ArrayLike,
    delimiter: bytes = b",",
) -> bytes:
    """Format samples as ASCII lines, one ``seq,device_time_us,counts\\n`` per sample.

    Args:
        seq, device_time_us, counts: integer arrays of the same shape (n,).
        delimiter: one byte between fields.

    Returns:
        The lines as bytes (empty for n = 0).
    """
    _check_delimiter(delimiter)
    cols: Sequence[np.ndarray] = [np.asarray(a).reshape(-1) for a in (seq, device_time_us, counts)]
    if not (cols[0].shape == cols[1].shape == cols[2].shape):
        raise FramingError(
            "encode_lines: seq, device_time_us and counts have shapes "
            f"{[c.shape for c in cols]}; pass three arrays of equal length"
        )
    for name, c in zip(("seq", "device_time_us", "counts"), cols, strict=True):
        if c.size and not np.issubdtype(c.dtype, np.integer):
            raise FramingError(f"encode_lines: {name} has dtype {c.dtype}; pass integers")
    for name, c in zip(("seq", "device_time_us"), cols[:2], strict=True):
        if c.size and int(c.min()) < 0:
            raise FramingError(f"encode_lines: {name} has negative values; they must be >= 0")
    if cols[0].size == 0:
        return b""
    d = delimiter.decode("latin-1")
    fmt = f"{{}}{d}{{}}{d}{{}}\n"
    text = "".join(
        fmt.format(s, t, c)
        for s, t, c in zip(cols[0].tolist(), cols[1].tolist(), cols[2].tolist(), strict=True)
    )
    return text.encode("ascii")
