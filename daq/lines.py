"""Decode and encode the forcelens ASCII line format (see docs/ascii-line-format.md).

One sample per line; by default::

    <seq>,<device_time_us>,<counts>\\n

The meaning of each column is configurable (`COLUMN_KINDS`):

* ``seq``: sample sequence number, 1 to 18 decimal digits, no sign (0 ≤ seq < 10^18).
  It never wraps; a jump forward means lost samples.
* ``time_us`` / ``time_ms``: device clock at conversion, µs / ms, 1 to 18 digits, no sign.
* ``counts``: raw ADC reading, an optional ``-`` then 1 to 18 digits (required).
* ``ignore``: a field that is checked like ``counts`` (optional ``-``, 1 to 18 digits)
  and then dropped.
* Without a time column device_time_s = seq / sample_rate_hz; without a ``seq`` column
  seq is the count of valid lines so far, and gaps cannot be seen.
* An optional CR just before the LF is tolerated; empty lines (or a lone CR) are ignored.
* Anything else on a line (spaces, ``+``, an extra field, letters...) makes it malformed.
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

from daq.decoding import DecoderStats, feed_bytes, feed_host_time
from daq.errors import FramingError
from daq.samples import FLAG_GAP_BEFORE, empty_block
from daq.scaling import Scaling

__all__ = ["COLUMN_KINDS", "DEFAULT_COLUMNS", "MAX_DIGITS", "LineDecoder", "encode_lines"]

#: Largest number of digits in one field (10^18 − 1 fits in int64 without overflow).
MAX_DIGITS = 18
#: What a column may mean.
COLUMN_KINDS = ("seq", "time_us", "time_ms", "counts", "ignore")
#: The column order of the format document.
DEFAULT_COLUMNS = ("seq", "time_us", "counts")
_SIGNED_KINDS = ("counts", "ignore")  # fields that may start with '-'
_TIME_SCALE_S = {"time_us": 1e-6, "time_ms": 1e-3}
_MAX_COLUMNS = 16

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


def _check_columns(columns: object, where: str) -> tuple[str, ...]:
    if isinstance(columns, (str, bytes)) or not isinstance(columns, Sequence):
        raise FramingError(
            f"{where}: columns={columns!r} is not a sequence of column names; "
            f"pass e.g. {DEFAULT_COLUMNS!r}"
        )
    cols = tuple(columns)
    bad = [c for c in cols if c not in COLUMN_KINDS]
    if bad:
        raise FramingError(
            f"{where}: columns={cols!r} has unknown kind(s) {bad!r}; use {COLUMN_KINDS!r}"
        )
    if not 1 <= len(cols) <= _MAX_COLUMNS:
        raise FramingError(f"{where}: columns={cols!r} has {len(cols)} entries; give 1..16")
    if "counts" not in cols:
        raise FramingError(f"{where}: columns={cols!r} has no 'counts' column; add one")
    for kind in ("seq", "counts"):
        if cols.count(kind) > 1:
            raise FramingError(f"{where}: columns={cols!r} repeats {kind!r}; keep one")
    if sum(c in _TIME_SCALE_S for c in cols) > 1:
        raise FramingError(
            f"{where}: columns={cols!r} has more than one time column; keep one of "
            "'time_us' or 'time_ms'"
        )
    return cols


class LineDecoder:
    """Turn chunks of the ASCII line stream into sample blocks.

    Args:
        scaling: converts counts to displacement_m.
        delimiter: the one byte between fields (default ``b","``).
        max_line_bytes: longest accepted line, bytes before the LF (16..1_048_576).
        columns: meaning of each field, in order, from `COLUMN_KINDS`; ``counts`` once,
            ``seq`` at most once, at most one of ``time_us`` / ``time_ms``.
        sample_rate_hz: nominal sample rate, Hz (> 0); required when `columns` has no
            time column (device_time_s = seq / sample_rate_hz), otherwise only checked.

    Counters (cumulative since construction or `reset`; `stats` gathers them):
        lines_ok: valid lines decoded into samples.
        lines_malformed: non-blank lines rejected (including over-long ones).
        bytes_discarded: bytes of rejected lines (with their LF) and of dropped partials.
        samples_lost: sum of forward gaps in ``seq`` between consecutive valid lines.
        seq_restarts: valid lines whose ``seq`` did not increase (device restart or replay).
        last_malformed: ``repr`` of the last rejected line (first bytes only), or ``None``.
    Without a ``seq`` column, seq counts valid lines from 0 and the gap counters stay 0.
    """

    def __init__(
        self,
        scaling: Scaling,
        delimiter: bytes = b",",
        *,
        max_line_bytes: int = 256,
        columns: Sequence[str] = DEFAULT_COLUMNS,
        sample_rate_hz: float | None = None,
    ) -> None:
        if not isinstance(scaling, Scaling):
            raise FramingError(
                f"scaling={scaling!r} is not a daq.scaling.Scaling; build one with Scaling(...)"
            )
        self._delim = _check_delimiter(delimiter)
        self.columns = _check_columns(columns, "LineDecoder")
        time_cols = [c for c in self.columns if c in _TIME_SCALE_S]
        if sample_rate_hz is not None and (
            isinstance(sample_rate_hz, bool)
            or not isinstance(sample_rate_hz, (int, float, np.integer, np.floating))
            or not math.isfinite(float(sample_rate_hz))
            or float(sample_rate_hz) <= 0.0
        ):
            raise FramingError(
                f"sample_rate_hz={sample_rate_hz!r} is not a positive finite rate; "
                "give the device's sample rate in Hz"
            )
        if not time_cols and sample_rate_hz is None:
            raise FramingError(
                f"columns={self.columns!r} has no time column, so sample_rate_hz is needed "
                "(device_time_s = seq / sample_rate_hz); pass it"
            )
        self.sample_rate_hz = None if sample_rate_hz is None else float(sample_rate_hz)
        self._time_col = time_cols[0] if time_cols else None
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
        self._suspect_first = False  # the next line may be the cut tail of a line
        self._last_seq: int | None = None
        self.lines_ok = 0
        self.lines_malformed = 0
        self.bytes_discarded = 0
        self.samples_lost = 0
        self.seq_restarts = 0
        self.last_malformed: str | None = None

    @property
    def bytes_buffered(self) -> int:
        """Bytes of an incomplete line kept for the next `feed` (≤ max_line_bytes)."""
        return len(self._pending)

    def stats(self) -> DecoderStats:
        """Counters since construction or `reset` (see `daq.decoding.DecoderStats`)."""
        return DecoderStats(
            samples_ok=self.lines_ok,
            rejected=self.lines_malformed,
            bytes_discarded=self.bytes_discarded,
            samples_lost=self.samples_lost,
            seq_restarts=self.seq_restarts,
        )

    def discard_partial(self) -> int:
        """Drop the buffered incomplete line (after a reconnect); return its bytes.

        The dropped bytes count in `bytes_discarded`; the last sequence number and the
        other counters are kept, so a gap before the next line is still counted. An
        over-long line being skipped is forgotten too: the next byte starts a new line.
        """
        n = len(self._pending)
        self._pending = b""
        self._skipping = False
        self._suspect_first = True
        self.bytes_discarded += n
        return n

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
        data = feed_bytes(data)
        host = feed_host_time(host_time_s)
        if self._skipping:
            lf = data.find(b"\n")
            if lf < 0:
                self.bytes_discarded += len(data)
                return empty_block()
            self._skipping = False
            self.bytes_discarded += lf + 1
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
            self.bytes_discarded += len(self._pending)
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
        k = len(self.columns)
        ok = ~blank & ~too_long & (n_other == 0) & (n_delim == k - 1)

        # Field boundaries of the candidate lines: k − 1 delimiters each, in order.
        idx = np.flatnonzero(ok)
        s0, e = starts[idx], ends[idx]
        if k > 1:
            dpos = delims[ok[delim_line]].reshape(-1, k - 1)
            f_start = [s0, *(dpos[:, j] + 1 for j in range(k - 1))]
            f_end = [*(dpos[:, j] for j in range(k - 1)), e]
        else:
            f_start, f_end = [s0], [e]
        good = np.ones(idx.size, dtype=bool)
        n_neg = np.zeros(idx.size, dtype=np.int64)
        negs: list[np.ndarray | None] = []
        for kind, fs, fe in zip(self.columns, f_start, f_end, strict=True):
            neg = None
            width = fe - fs
            if kind in _SIGNED_KINDS:
                neg = b[np.minimum(fs, n - 1)] == _MINUS  # fs <= its LF, always in range
                width = width - neg
                n_neg += neg
            good &= (width >= 1) & (width <= MAX_DIGITS)
            negs.append(neg)
        good &= n_minus[idx] == n_neg  # a '-' anywhere else is malformed
        ok[idx[~good]] = False
        keep = good.nonzero()[0]
        idx = idx[keep]

        malformed = ~blank & ~ok
        n_bad = int(np.count_nonzero(malformed))
        if n_bad:
            last = int(np.flatnonzero(malformed)[-1])
            self._note_malformed(buf[starts[last] : nl[last]])
            self.lines_malformed += n_bad - 1
            self.bytes_discarded += int((raw_len[malformed] + 1).sum())

        m = idx.size
        if m == 0:
            return empty_block()
        values: dict[str, np.ndarray] = {}
        for kind, fs, fe, neg in zip(self.columns, f_start, f_end, negs, strict=True):
            if kind == "ignore":
                continue
            if neg is None:
                values[kind] = _digits_to_int(b, fs[keep], fe[keep])
            else:
                v = _digits_to_int(b, fs[keep] + neg[keep], fe[keep])
                values[kind] = np.where(neg[keep], -v, v)
        if self._suspect_first:
            self._suspect_first = False
            if self._first_line_is_cut(values):
                first = int(idx[0])
                self._note_malformed(buf[starts[first] : nl[first]])
                self.bytes_discarded += int(raw_len[first]) + 1
                values = {k: v[1:] for k, v in values.items()}
                m -= 1
                if m == 0:
                    return empty_block()
        counts = values["counts"]
        has_seq = "seq" in values
        if has_seq:
            seq = values["seq"]
        else:
            seq = np.arange(self.lines_ok, self.lines_ok + m, dtype=np.int64)

        out = empty_block(m)
        out["seq"] = seq
        if self._time_col is not None:
            out["device_time_s"] = values[self._time_col] * _TIME_SCALE_S[self._time_col]
        else:
            out["device_time_s"] = seq / self.sample_rate_hz
        out["host_time_s"] = host
        out["counts"] = counts
        out["displacement_m"] = self.scaling.to_metres(counts)
        self.lines_ok += m
        if not has_seq:
            return out  # no sequence numbers from the device: gaps cannot be seen
        prev = np.empty(m, dtype=np.int64)
        prev[1:] = seq[:-1]
        if self._last_seq is None:
            prev[0] = seq[0] - 1  # the very first sample has no predecessor
        else:
            prev[0] = self._last_seq
        self._last_seq = int(seq[-1])
        step = seq - prev
        gap = step > 1
        back = step < 1
        out["flags"] = np.where(gap | back, FLAG_GAP_BEFORE, 0).astype(np.uint32)
        self.samples_lost += int((step[gap] - 1).sum())
        self.seq_restarts += int(np.count_nonzero(back))
        return out

    def _first_line_is_cut(self, values: dict[str, np.ndarray]) -> bool:
        """Whether the first line after `discard_partial` may be the tail of a cut line.

        A line cut inside its first field still parses when that field is numeric. When
        the first column is ``seq``, such a tail has fewer digits, so its ``seq`` is not
        above the last one seen: that line is refused and a genuine device restart that
        happened during the reconnect costs one line. With any other first column a cut
        cannot be told from an intact line, so the first line is always refused.
        """
        if self.columns[0] == "seq" and self._last_seq is not None:
            return int(values["seq"][0]) <= self._last_seq
        return self.columns[0] != "seq"


def _digits_to_int(b: np.ndarray, start: np.ndarray, end: np.ndarray) -> np.ndarray:
    """Values of the digit runs b[start:end] (each 1..MAX_DIGITS long); int64, shape (m,).

    One pass per digit position over 1-D arrays (no (m, width) temporaries, which are
    slow for large m); positions past a run's end leave its value unchanged.
    """
    width = end - start
    val = np.zeros(start.size, dtype=np.int64)
    if start.size == 0:
        return val
    w_min, w_max = int(width.min()), int(width.max())
    last = b.size - 1
    for k in range(w_max):
        pos = start + k
        if k >= w_min:
            np.minimum(pos, last, out=pos)
        digit = b[pos].astype(np.int64)
        digit -= 48
        if k < w_min:
            val *= 10
            val += digit
        else:
            live = k < width
            val = np.where(live, val * 10 + digit, val)
    return val


def encode_lines(
    seq: ArrayLike,
    device_time_us: ArrayLike,
    counts: ArrayLike,
    delimiter: bytes = b",",
    *,
    columns: Sequence[str] = DEFAULT_COLUMNS,
) -> bytes:
    """Format samples as ASCII lines, by default one ``seq,device_time_us,counts\\n`` each.

    Args:
        seq, device_time_us, counts: integer arrays of the same shape (n,).
        delimiter: one byte between fields.
        columns: field order, from `COLUMN_KINDS` (same rules as `LineDecoder`):
            ``time_ms`` writes device_time_us // 1000 (floor), ``ignore`` writes 0.

    Returns:
        The lines as bytes (empty for n = 0).
    """
    _check_delimiter(delimiter)
    order = _check_columns(columns, "encode_lines")
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
    by_kind = {
        "seq": cols[0],
        "time_us": cols[1],
        "time_ms": cols[1] // 1000,
        "counts": cols[2],
        "ignore": np.zeros(cols[0].size, dtype=np.int64),
    }
    d = delimiter.decode("latin-1")
    fmt = d.join(["{}"] * len(order)) + "\n"
    fields = [by_kind[kind].tolist() for kind in order]
    text = "".join(fmt.format(*row) for row in zip(*fields, strict=True))
    return text.encode("ascii")
