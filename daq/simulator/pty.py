"""`PtyCell`: a simulated run played on a pseudo-terminal in real time, with faults."""

from __future__ import annotations

import collections
import contextlib
import fcntl
import math
import os
import select
import shutil
import struct
import tempfile
import termios
import threading
import time
import tty
import weakref
from collections.abc import Callable, Sequence
from types import TracebackType

import numpy as np

from daq.errors import FramingError, SourceError
from daq.lines import encode_lines
from daq.simulator.cell import SimulatedRun
from daq.simulator.faults import Fault

#: Framings a `PtyCell` can send (the names used by cell profiles).
PTY_FRAMINGS = ("ascii-lines", "binary-24", "binary-32")
_KEEP_BYTES = 1 << 20  # sample byte positions remembered behind the write point
_DELIVERY_QUIET_S = 0.02  # the pty must stay empty this long before a disconnect
_REATTACH_SETTLE_S = 0.05  # wait after a client opens the new pty before sending


def _first_sample_at(t_s: float, sample_rate_hz: float) -> int:
    """Index of the first sample whose time i / sample_rate_hz is at or after t_s."""
    return max(0, math.ceil(t_s * sample_rate_hz - 1e-9))


def _unread_bytes(fd: int | None) -> int:
    """Bytes waiting in the input queue of the pty slave `fd` (0 without one)."""
    if fd is None:
        return 0
    try:
        raw = fcntl.ioctl(fd, termios.FIONREAD, b"\0\0\0\0")
    except OSError:
        return 0
    return int(struct.unpack("i", raw)[0])


class PtyCell:
    """Play simulated samples on a pseudo-terminal at real-time pace, with faults.

    The port to open is `port_name`: a symbolic link, in a private temporary folder,
    to the current pseudo-terminal (`device_name`, ``/dev/pts/N``). It stays the same
    when a "disconnect" fault replaces the pseudo-terminal, so a client reopens the
    same name, as with a device that is unplugged and plugged in again. The folder is
    removed by `stop`.

    The slave side is put in raw mode and kept open by this object, so the port exists
    for the whole run. A background thread wakes every `tick_s` and writes every sample
    that is due (sample i is due at i / sample_rate_hz / speed after `start`). Writes to
    the master are non-blocking; unsent bytes are retried and dropped (counted in
    `bytes_dropped`) only when nothing could be written for `stall_timeout_s` (the
    reader is gone). A sample cut in two by such a drop keeps its remaining bytes, so
    the stream stays aligned on samples.

    Framings: "ascii-lines" (docs/ascii-line-format.md), "binary-24" and "binary-32"
    (binary frames of `daq.binary`; seq = global sample index, counts clipped to the
    frame width, status bit 0 (ADC over-range) set where `SimulatedRun.over_range` says
    the simulated ADC saturated, or where a count sits at the edge of the frame width).

    Ground truth (see docs/simulated-cell.md): `sent_intact` lists the sequence numbers
    whose bytes were written whole and uncorrupted and, around a disconnect, read by
    the client before the port closed; `fault_log` lists (kind, at_seq, detail) of every
    fault as it was played.

    Args:
        run: the samples to play (seq 0..n−1).
        speed: time-scale factor (2.0 plays twice as fast), > 0.
        loop: repeat forever; repetition r (r ≥ 1) plays ``regenerate(r)`` if given, else
            `run` again; seq and device time keep counting up across repetitions.
        regenerate: makes the run of repetition r (same length and rate as `run`).
        tick_s: wake-up period of the writer thread, s.
        stall_timeout_s: how long a stalled reader is waited for before dropping, s; also
            the longest wait for the client to read what was sent before a disconnect.
        framing: "ascii-lines", "binary-24" or "binary-32".
        faults: `Fault` values, in any order.
        fault_seed: seed of the generator that draws garbage bytes and flipped bits.
        reattach_timeout_s: after a disconnect, how long (real time, s) the cell waits
            for a client to open the new port before sending on regardless; samples due
            while it waits are lost.

    Counters: `lines_written` (samples handed to the pty — lines or frames — dropped
    and corrupted ones included), `bytes_written`, `bytes_dropped`. `finished` is true
    once every sample of a non-loop run has been written.
    """

    def __init__(
        self,
        run: SimulatedRun,
        *,
        speed: float = 1.0,
        loop: bool = False,
        regenerate: Callable[[int], SimulatedRun] | None = None,
        tick_s: float = 0.005,
        stall_timeout_s: float = 1.0,
        framing: str = "ascii-lines",
        faults: Sequence[Fault] = (),
        fault_seed: int = 0,
        reattach_timeout_s: float = 5.0,
    ) -> None:
        if not isinstance(run, SimulatedRun) or len(run) == 0:
            raise FramingError(f"PtyCell: run={run!r} is not a non-empty SimulatedRun")
        for name, value in (
            ("speed", speed),
            ("tick_s", tick_s),
            ("stall_timeout_s", stall_timeout_s),
            ("reattach_timeout_s", reattach_timeout_s),
        ):
            v = float(value)
            if not (math.isfinite(v) and v > 0.0):
                raise FramingError(f"PtyCell: {name}={value!r} must be a finite number > 0")
        if framing not in PTY_FRAMINGS:
            raise FramingError(
                f"PtyCell: framing={framing!r} is unknown; use one of " + ", ".join(PTY_FRAMINGS)
            )
        if isinstance(fault_seed, bool) or not isinstance(fault_seed, (int, np.integer)):
            raise FramingError(f"PtyCell: fault_seed={fault_seed!r} must be an integer >= 0")
        if fault_seed < 0:
            raise FramingError(f"PtyCell: fault_seed={fault_seed!r} must be an integer >= 0")
        self.run = run
        self.speed = float(speed)
        self.loop = bool(loop)
        self._regenerate = regenerate
        self.tick_s = float(tick_s)
        self.stall_timeout_s = float(stall_timeout_s)
        self.reattach_timeout_s = float(reattach_timeout_s)
        self.framing = framing
        self._adc_bits = 0 if framing == "ascii-lines" else int(framing.split("-")[1])
        self.faults = self._check_faults(faults)
        fs = run.sample_rate_hz
        timed = [f for f in self.faults if f.kind != "corrupt"]
        self._events = sorted(
            ((_first_sample_at(f.at_s, fs), i, f) for i, f in enumerate(timed)),
            key=lambda e: (e[0], e[1]),
        )
        self._corrupt = [
            (_first_sample_at(f.at_s, fs), _first_sample_at(f.at_s, fs) + f.count)
            for f in self.faults
            if f.kind == "corrupt"
        ]
        self._rng = np.random.default_rng(int(fault_seed))
        self.lines_written = 0
        self.bytes_written = 0
        self.bytes_dropped = 0
        self.fault_log: list[tuple[str, int, str]] = []
        self._truth_lock = threading.Lock()
        self._intact_ranges: list[list[int]] = []  # [start, stop) of intact seq, merged
        self._broken: list[np.ndarray] = []  # intact when queued, lost afterwards
        self._stop = threading.Event()
        self._done = threading.Event()
        self._thread: threading.Thread | None = None
        self._error: BaseException | None = None
        self._master: int | None = None
        self._slave: int | None = None
        self._folder = tempfile.mkdtemp(prefix="forcelens-cell-")
        self._cleanup = weakref.finalize(self, shutil.rmtree, self._folder, True)
        self.port_name = os.path.join(self._folder, "port")
        try:
            self._open_pty(keep_slave=True)
        except BaseException:
            self._cleanup()
            raise
        self._closed = False

    def _check_faults(self, faults: Sequence[Fault]) -> tuple[Fault, ...]:
        if isinstance(faults, (str, bytes)) or not isinstance(faults, (list, tuple)):
            raise FramingError(
                f"PtyCell: faults={faults!r} is not a list of Fault; pass e.g. "
                "[Fault('drop', 1.0, count=5)]"
            )
        duration_s = len(self.run) / self.run.sample_rate_hz
        for i, f in enumerate(faults):
            if not isinstance(f, Fault):
                raise FramingError(f"PtyCell: faults[{i}]={f!r} is not a daq.simulator.Fault")
            if not self.loop and _first_sample_at(f.at_s, self.run.sample_rate_hz) >= len(
                self.run
            ):
                raise FramingError(
                    f"PtyCell: faults[{i}].at_s={f.at_s!r} is at or after the end of the run "
                    f"({duration_s:g} s); move it earlier or use loop=True"
                )
        return tuple(faults)

    # ------------------------------------------------------------------ the pty
    @property
    def device_name(self) -> str:
        """The current pseudo-terminal (``/dev/pts/N``); changes at each disconnect."""
        return self._device

    def _open_pty(self, *, keep_slave: bool) -> None:
        """Open a new pseudo-terminal in raw mode and point `port_name` at it."""
        try:
            master, slave = os.openpty()
        except OSError as exc:
            raise SourceError(
                f"cannot open a pseudo-terminal ({exc}); is /dev/pts mounted?"
            ) from exc
        tty.setraw(slave)
        os.set_blocking(master, False)
        self._device = os.ttyname(slave)
        self._master = master
        if keep_slave:
            self._slave = slave
        else:
            os.close(slave)  # so that a client opening it can be seen (no POLLHUP)
        tmp = self.port_name + ".new"
        with contextlib.suppress(FileNotFoundError):
            os.unlink(tmp)
        os.symlink(self._device, tmp)
        os.replace(tmp, self.port_name)  # atomic: a client sees the old or the new pty

    def _close_pty(self) -> None:
        for name in ("_master", "_slave"):
            fd = getattr(self, name)
            setattr(self, name, None)
            if fd is not None:
                with contextlib.suppress(OSError):
                    os.close(fd)

    # ---------------------------------------------------------------- control
    def start(self) -> PtyCell:
        """Start the writer thread (once); returns self."""
        if self._closed:
            raise SourceError(f"PtyCell on {self.port_name}: already stopped; make a new one")
        if self._thread is None:
            self._thread = threading.Thread(
                target=self._writer, name=f"PtyCell {self.port_name}", daemon=True
            )
            self._thread.start()
        return self

    def stop(self) -> None:
        """Stop writing, close the pseudo-terminal and remove the port folder (idempotent)."""
        self._stop.set()
        if self._thread is not None:
            self._thread.join()
        if not self._closed:
            self._closed = True
            self._close_pty()
            self._cleanup()

    def wait(self, timeout_s: float | None = None) -> bool:
        """Block until every sample is written (never for a loop); True if finished."""
        return self._done.wait(timeout_s)

    @property
    def finished(self) -> bool:
        """True once every sample of a non-loop run has been written."""
        return self._done.is_set()

    @property
    def error(self) -> BaseException | None:
        """The exception that ended the writer thread early, if any."""
        return self._error

    def __enter__(self) -> PtyCell:
        """The port lives for the ``with`` block; sending begins only at :meth:`start`.

        A client must open the port before the first sample is sent, because opening a
        serial port discards what arrived before (pyserial flushes its input).
        """
        return self

    def __exit__(
        self,
        exc_type: type[BaseException] | None,
        exc: BaseException | None,
        tb: TracebackType | None,
    ) -> None:
        self.stop()

    # ------------------------------------------------------------ ground truth
    @property
    def sent_intact(self) -> np.ndarray:
        """Sequence numbers sent whole and uncorrupted, in order; int64, shape (m,).

        Final once the writer has finished (`wait`) or stopped (`stop`).
        """
        with self._truth_lock:
            ranges = [tuple(r) for r in self._intact_ranges]
            broken = list(self._broken)
        if not ranges:
            return np.zeros(0, dtype=np.int64)
        seq = np.concatenate([np.arange(a, b, dtype=np.int64) for a, b in ranges])
        if broken:
            seq = seq[~np.isin(seq, np.concatenate(broken))]
        return seq

    def _log_fault(self, kind: str, at_seq: int, detail: str) -> None:
        self.fault_log.append((kind, int(at_seq), detail))

    # ------------------------------------------------------------- encoding
    def _run_for(self, rep: int) -> SimulatedRun:
        if rep == 0 or self._regenerate is None:
            return self.run
        if getattr(self, "_cached_rep", None) != rep:
            run = self._regenerate(rep)
            if len(run) != len(self.run):
                raise FramingError(
                    f"PtyCell: regenerate({rep}) gave {len(run)} samples, expected {len(self.run)}"
                )
            self._cached_rep, self._cached_run = rep, run
        return self._cached_run

    def _counts_between(self, g0: int, g1: int) -> np.ndarray:
        """Counts of global sample indices g0..g1−1 (across repetitions); int64 (g1−g0,)."""
        n = len(self.run)
        parts = []
        while g0 < g1:
            rep, i0 = divmod(g0, n)
            i1 = min(n, i0 + (g1 - g0))
            parts.append(self._run_for(rep).counts[i0:i1])
            g0 += i1 - i0
        return np.concatenate(parts) if parts else np.zeros(0, dtype=np.int64)

    def _over_range_between(self, g0: int, g1: int) -> np.ndarray | None:
        """`SimulatedRun.over_range` of samples g0..g1−1, or None where a run lacks it."""
        n = len(self.run)
        parts = []
        while g0 < g1:
            rep, i0 = divmod(g0, n)
            i1 = min(n, i0 + (g1 - g0))
            flags = self._run_for(rep).over_range
            if flags is None:
                return None
            parts.append(flags[i0:i1])
            g0 += i1 - i0
        return np.concatenate(parts) if parts else None

    def _encode(self, g0: int, g1: int) -> tuple[bytes, np.ndarray]:
        """Bytes of samples g0..g1−1 and the end offset of each sample in them, (g1−g0,)."""
        g = np.arange(g0, g1, dtype=np.int64)
        counts = self._counts_between(g0, g1)
        if self._adc_bits == 0:
            t_us = np.rint(g * 1e6 / self.run.sample_rate_hz).astype(np.int64)
            data = encode_lines(g, t_us, counts)
            ends = np.flatnonzero(np.frombuffer(data, dtype=np.uint8) == 10) + 1
            return data, ends
        from daq.binary import encode_frames, frame_length

        half = 1 << (self._adc_bits - 1)
        lo, hi = -half, half - 1
        clipped = np.clip(counts, lo, hi)
        over = (clipped <= lo) | (clipped >= hi)
        known = self._over_range_between(g0, g1)
        if known is not None:
            over |= known
        status = over.astype(np.int64)  # bit 0: ADC over-range
        data = encode_frames(g, clipped, status, adc_bits=self._adc_bits)
        length = frame_length(self._adc_bits)
        return data, length * np.arange(1, g.size + 1, dtype=np.int64)

    def _corrupt_mask(self, g0: int, g1: int) -> np.ndarray:
        mask = np.zeros(g1 - g0, dtype=bool)
        for a, b in self._corrupt:
            lo, hi = max(a, g0), min(b, g1)
            if lo < hi:
                mask[lo - g0 : hi - g0] = True
        return mask

    def _flip_bit(self, data: bytearray, start: int, end: int, seq: int) -> None:
        """Corrupt the sample data[start:end] so that a decoder must reject it."""
        if self._adc_bits == 0:
            # Bit 6 turns a digit (0x30..0x39) into a letter (0x70..0x79): malformed line.
            line = np.frombuffer(bytes(data[start:end]), dtype=np.uint8)
            digits = np.flatnonzero((line >= 48) & (line <= 57))
            pos = int(digits[self._rng.integers(digits.size)])
            bit = 6
        else:
            # Any single bit from the type byte to the CRC: the CRC (or type) check fails.
            pos = int(self._rng.integers(2, end - start))
            bit = int(self._rng.integers(8))
        data[start + pos] ^= 1 << bit
        self._log_fault("corrupt", seq, f"bit {bit} of byte {pos} flipped")

    # --------------------------------------------------------------- queueing
    def _queue(self, g0: int, g1: int) -> None:
        """Encode samples g0..g1−1 onto the pending bytes and record them."""
        if g1 <= g0:
            return
        raw, ends = self._encode(g0, g1)
        starts = np.empty_like(ends)
        starts[0] = 0
        starts[1:] = ends[:-1]
        bad = self._corrupt_mask(g0, g1)
        data = bytearray(raw)
        for i in np.flatnonzero(bad).tolist():
            self._flip_bit(data, int(starts[i]), int(ends[i]), g0 + i)
        if self._poison_next:
            bad[0] = True  # glued to the partial bytes of a dropped sample
            self._poison_next = False
        seq = np.arange(g0, g1, dtype=np.int64)
        self._remember(seq, self._q_queued + starts, self._q_queued + ends, ~bad)
        good = np.flatnonzero(~bad)
        if good.size:
            # Runs of consecutive intact samples become [start, stop) ranges.
            cut = np.flatnonzero(np.diff(good) > 1) + 1
            with self._truth_lock:
                for run in np.split(good, cut):
                    a, b = g0 + int(run[0]), g0 + int(run[-1]) + 1
                    if self._intact_ranges and self._intact_ranges[-1][1] == a:
                        self._intact_ranges[-1][1] = b
                    else:
                        self._intact_ranges.append([a, b])
        self._pending += data
        self._q_queued += len(data)
        self.lines_written += g1 - g0

    def _queue_garbage(self, at_g: int, count: int) -> None:
        if self._adc_bits == 0:
            # No delimiter, so no piece can be a valid line, and a final LF so that the
            # next line starts clean: the noise is one or more malformed lines.
            pool = np.setdiff1d(np.arange(256), [ord(",")])
        else:
            # No first sync byte, so no frame can start inside the noise.
            pool = np.setdiff1d(np.arange(256), [0xA9])
        noise = pool[self._rng.integers(pool.size, size=count)].astype(np.uint8).tobytes()
        if self._adc_bits == 0:
            noise += b"\n"
        q0 = self._q_queued
        self._remember(
            np.array([-1], dtype=np.int64),
            np.array([q0], dtype=np.int64),
            np.array([q0 + len(noise)], dtype=np.int64),
            np.array([False]),
        )
        self._pending += noise
        self._q_queued += len(noise)
        self._log_fault("garbage", at_g, f"{count} random bytes before seq {at_g}")

    def _remember(
        self, seq: np.ndarray, q_start: np.ndarray, q_end: np.ndarray, intact: np.ndarray
    ) -> None:
        """Keep the byte span of each queued unit (sample, or garbage with seq −1)."""
        self._recent.append((seq, q_start, q_end, intact))
        while len(self._recent) > 1 and int(self._recent[0][2][-1]) < (
            self._q_written - _KEEP_BYTES
        ):
            self._recent.popleft()

    def _lose(self, q_from: int, q_to: int) -> bool:
        """Intact samples with bytes in [q_from, q_to) are lost; True if one was cut."""
        cut_partial = False
        lost = []
        for seq, qs, qe, ok in self._recent:
            hit = (qs < q_to) & (qe > q_from)
            if hit.any():
                lost.append(seq[hit & ok & (seq >= 0)])
                cut_partial |= bool(np.any(hit & (qs < q_from)))
        lost_seq = np.concatenate(lost) if lost else np.zeros(0, dtype=np.int64)
        if lost_seq.size:
            with self._truth_lock:
                self._broken.append(lost_seq)
        return cut_partial

    def _forget_after(self, q: int) -> None:
        """Forget units starting at or after q (their bytes were never written)."""
        kept: collections.deque = collections.deque()
        for seq, qs, qe, ok in self._recent:
            keep = qs < q
            if keep.all():
                kept.append((seq, qs, qe, ok))
            elif keep.any():
                kept.append((seq[keep], qs[keep], qe[keep], ok[keep]))
        self._recent = kept

    def _unit_around(self, q: int) -> int | None:
        """End offset of the unit with start < q < end, if any."""
        for _seq, qs, qe, _ok in reversed(self._recent):
            if qs.size and qs[0] < q:
                i = int(np.searchsorted(qe, q, side="right"))
                if i < qs.size and qs[i] < q < qe[i]:
                    return int(qe[i])
                return None
        return None

    def _drop_pending(self, keep_partial: bool) -> int:
        """Drop unsent bytes (the reader is gone); returns how many were dropped."""
        cut = self._q_written
        end = self._unit_around(cut)
        if keep_partial and end is not None:
            cut = end
        n = self._q_queued - cut
        if n <= 0:
            return 0
        if self._lose(cut, self._q_queued):
            self._poison_next = True  # part of a sample went out: the next one is spoilt
        self._forget_after(cut)
        del self._pending[cut - self._q_written :]
        self._q_queued = cut
        self.bytes_dropped += n
        return n

    # ----------------------------------------------------------------- writing
    def _pump(self, now: float) -> None:
        """Write as much of the pending bytes as the pty takes now."""
        while self._pending and self._master is not None:
            try:
                k = os.write(self._master, self._pending)
            except (BlockingIOError, InterruptedError):
                break
            if k <= 0:
                break
            del self._pending[:k]
            self._q_written += k
            self.bytes_written += k
            self._last_progress = now
            self._last_write = now

    def _due(self, now: float) -> int:
        due = math.floor((now - self._t0) * self.speed * self.run.sample_rate_hz) + 1
        return due if self.loop else min(due, len(self.run))

    def _writer(self) -> None:
        try:
            self._write_loop()
        except BaseException as exc:  # reported through .error; the thread must not die silently
            self._error = exc

    def _write_loop(self) -> None:
        total = None if self.loop else len(self.run)
        self._pending = bytearray()
        self._q_written = 0  # bytes of the stream written to a master so far
        self._q_queued = 0  # bytes of the stream queued so far (written + pending)
        self._recent: collections.deque = collections.deque()
        self._poison_next = False
        self._t0 = self._last_progress = self._last_write = time.monotonic()
        events = self._events
        ei = 0
        next_g = 0  # global index of the next sample to queue
        while not self._stop.is_set():
            now = time.monotonic()
            due = self._due(now)
            while ei < len(events) and events[ei][0] < due and not self._stop.is_set():
                at_g, _, fault = events[ei]
                ei += 1
                if at_g > next_g:
                    self._queue(next_g, at_g)
                    next_g = at_g
                next_g = self._apply(fault, at_g, next_g)
                now = time.monotonic()
                due = self._due(now)
            if due > next_g:
                if not self._pending:
                    self._last_progress = now
                self._queue(next_g, due)
                next_g = due
            self._pump(now)
            if self._pending and now - self._last_progress > self.stall_timeout_s:
                if not self._drop_pending(keep_partial=True):
                    self._drop_pending(keep_partial=False)
                self._last_progress = now
            if total is not None and next_g >= total and not self._pending and ei >= len(events):
                self._done.set()
                return
            self._stop.wait(self.tick_s)

    def _apply(self, fault: Fault, at_g: int, next_g: int) -> int:
        """Play one timed fault at sample at_g; returns the next sample to queue."""
        fs = self.run.sample_rate_hz
        last = None if self.loop else len(self.run)
        if fault.kind == "garbage":
            self._queue_garbage(at_g, fault.count)
            return next_g
        if fault.kind == "drop":
            stop = at_g + fault.count if last is None else min(at_g + fault.count, last)
            self._log_fault("drop", at_g, f"seq {at_g}..{stop - 1} never sent")
            return max(next_g, stop)
        if fault.kind == "stall":
            stop = _first_sample_at(fault.at_s + fault.duration_s, fs)
            stop = stop if last is None else min(stop, last)
            self._log_fault(
                "stall",
                at_g,
                f"nothing sent for {fault.duration_s:g} s (simulated); "
                f"seq {at_g}..{stop - 1} never sent",
            )
            return max(next_g, stop)
        return self._disconnect(fault, at_g, next_g)

    def _disconnect(self, fault: Fault, at_g: int, next_g: int) -> int:
        """Close the pty, wait, open a new one behind the same port name."""
        # 1. Let the client take what was already sent, as a device's last bytes would.
        deadline = time.monotonic() + self.stall_timeout_s
        while not self._stop.is_set():
            now = time.monotonic()
            self._pump(now)
            quiet = now - self._last_write >= _DELIVERY_QUIET_S
            if not self._pending and quiet and _unread_bytes(self._slave) == 0:
                break
            if now > deadline:
                break
            self._stop.wait(min(self.tick_s, _DELIVERY_QUIET_S / 2))
        # 2. Whatever the client has not read is lost with the port.
        unread = _unread_bytes(self._slave)
        unsent = len(self._pending)
        if unread or unsent:
            self._lose(self._q_written - unread, self._q_queued)
            self._forget_after(self._q_written)
            self._pending.clear()
            self._q_queued = self._q_written
            self.bytes_dropped += unsent
        self._close_pty()
        t_closed = time.monotonic()
        self._stop.wait(fault.duration_s)
        if self._stop.is_set():
            return next_g
        # 3. A new pty behind the same name; send once a client has opened it.
        self._open_pty(keep_slave=False)
        poller = select.poll()
        poller.register(self._master, select.POLLHUP)
        deadline = time.monotonic() + self.reattach_timeout_s
        attached = False
        while not self._stop.is_set():
            if not poller.poll(0):  # no POLLHUP: somebody has the slave open
                attached = True
                break
            if time.monotonic() > deadline:
                break
            self._stop.wait(self.tick_s)
        if attached:
            # pyserial flushes its input just after opening; let it finish first.
            self._stop.wait(_REATTACH_SETTLE_S)
        self._slave = os.open(self._device, os.O_RDWR | os.O_NOCTTY | os.O_NONBLOCK)
        resume = max(next_g, self._due(time.monotonic()))
        back = time.monotonic() - t_closed
        self._log_fault(
            "disconnect",
            at_g,
            f"port closed for {back:.3f} s (real; {fault.duration_s:g} s planned), "
            f"{'a client reopened it' if attached else 'no client reopened it'}; "
            f"{unread + unsent} bytes lost at the close; seq {at_g}..{resume - 1} never sent",
        )
        return resume
