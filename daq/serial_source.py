"""Samples from a serial port (or any pyserial URL such as ``loop://``).

Two readers share one rule: read whatever bytes are waiting, stamp them with the host
clock at receipt and hand them to a decoder (`daq.decoding.Decoder`: the ASCII
`LineDecoder` or the binary `BinaryDecoder`). Neither uses ``readline()``: a line or frame
may arrive in pieces, and the decoder keeps the incomplete tail.

* `SerialSource` is synchronous: the caller asks for a block and waits for it.
* `SerialReader` reads on a background thread, survives a lost port by reopening it with
  exponential backoff, logs what happened as `ReaderEvent` values and keeps the decoded
  blocks until the caller takes them with `SerialReader.drain` (which never waits on I/O).

`PortSettings` holds the line settings (speed, parity, stop and data bits) and maps them
to pyserial's constants.
"""

from __future__ import annotations

import collections
import contextlib
import datetime as _dt
import math
import os
import threading
import time
from collections.abc import Callable
from dataclasses import dataclass
from types import TracebackType
from typing import TYPE_CHECKING, Any

import numpy as np
import serial

from daq.errors import FramingError, SourceError
from daq.rate import RateMeter
from daq.samples import FLAG_RECONNECT_BEFORE, concat_blocks, empty_block

if TYPE_CHECKING:
    from daq.decoding import Decoder, DecoderStats

__all__ = [
    "DATA_BITS",
    "EVENT_KINDS",
    "LIST_PORTS_HINT",
    "PARITIES",
    "READER_STATES",
    "STOP_BITS",
    "PortSettings",
    "ReaderEvent",
    "ReaderStats",
    "SerialReader",
    "SerialSource",
]

LIST_PORTS_HINT = "list the ports with `forcelens ports`"

#: Parity names accepted by `PortSettings` and the pyserial constant of each.
PARITIES = {
    "none": serial.PARITY_NONE,
    "even": serial.PARITY_EVEN,
    "odd": serial.PARITY_ODD,
    "mark": serial.PARITY_MARK,
    "space": serial.PARITY_SPACE,
}
#: Stop bits accepted by `PortSettings` and the pyserial constant of each.
STOP_BITS = {
    1.0: serial.STOPBITS_ONE,
    1.5: serial.STOPBITS_ONE_POINT_FIVE,
    2.0: serial.STOPBITS_TWO,
}
#: Data bits accepted by `PortSettings` and the pyserial constant of each.
DATA_BITS = {
    5: serial.FIVEBITS,
    6: serial.SIXBITS,
    7: serial.SEVENBITS,
    8: serial.EIGHTBITS,
}
#: Kinds of `ReaderEvent`.
EVENT_KINDS = ("connected", "disconnected", "reconnected", "open-failed", "unread-dropped")
#: Values of `SerialReader.state`.
READER_STATES = ("connecting", "connected", "reconnecting", "stopped")

#: Default bound on samples kept for a consumer that does not drain (about 560 MB).
MAX_UNREAD_SAMPLES = 10_000_000
#: Events kept until `drain_events`; older ones are dropped (and counted) beyond this.
MAX_EVENTS = 10_000


def _check_decoder(decoder: object) -> None:
    if not callable(getattr(decoder, "feed", None)):
        raise FramingError(
            f"decoder={decoder!r} has no feed(); pass a LineDecoder or BinaryDecoder "
            "(see daq.decoding.make_decoder)"
        )


# --------------------------------------------------------------------------- settings
@dataclass(frozen=True)
class PortSettings:
    """Serial line settings.

    Attributes:
        port: device name (``/dev/ttyUSB0``, ``COM3``, a pty) or pyserial URL (``loop://``).
        baudrate: line speed, baud (positive integer).
        parity: "none", "even", "odd", "mark" or "space".
        stop_bits: 1, 1.5 or 2.
        data_bits: 5, 6, 7 or 8.
    """

    port: str
    baudrate: int = 921600
    parity: str = "none"
    stop_bits: float = 1
    data_bits: int = 8

    def __post_init__(self) -> None:
        if not isinstance(self.port, str) or not self.port:
            raise FramingError(
                f"PortSettings: port={self.port!r} is empty; give a device name or 'loop://'"
            )
        b = self.baudrate
        if isinstance(b, bool) or not isinstance(b, (int, np.integer)) or b <= 0:
            raise FramingError(
                f"PortSettings: baudrate={b!r} must be a positive integer (e.g. 921600)"
            )
        if self.parity not in PARITIES:
            raise FramingError(
                f"PortSettings: parity={self.parity!r} is unknown; use one of "
                + ", ".join(PARITIES)
            )
        sb = self.stop_bits
        if (
            isinstance(sb, bool)
            or not isinstance(sb, (int, float, np.integer, np.floating))
            or float(sb) not in STOP_BITS
        ):
            raise FramingError(f"PortSettings: stop_bits={sb!r} must be 1, 1.5 or 2")
        db = self.data_bits
        if (
            isinstance(db, bool)
            or not isinstance(db, (int, np.integer))
            or int(db) not in DATA_BITS
        ):
            raise FramingError(f"PortSettings: data_bits={db!r} must be 5, 6, 7 or 8")

    def serial_kwargs(self) -> dict[str, Any]:
        """Keyword arguments for ``serial.serial_for_url`` / ``serial.Serial`` (no timeout)."""
        return {
            "baudrate": int(self.baudrate),
            "parity": PARITIES[self.parity],
            "stopbits": STOP_BITS[float(self.stop_bits)],
            "bytesize": DATA_BITS[int(self.data_bits)],
            # one process per port: a second one would silently split the bytes
            "exclusive": True,
        }


def _read_waiting(ser: Any) -> bytes:
    """The bytes waiting on `ser`, or up to one byte within its timeout, then the rest."""
    waiting = ser.in_waiting
    if waiting:
        return bytes(ser.read(waiting))
    data = bytes(ser.read(1))
    if data:
        more = ser.in_waiting
        if more:
            data += bytes(ser.read(more))
    return data


# ------------------------------------------------------------------- synchronous source
class SerialSource:
    """Read sample blocks from a serial port, on the caller's thread.

    Args:
        port: device name (``/dev/ttyUSB0``, ``COM3``, a pty) or pyserial URL (``loop://``).
        baudrate: line speed, baud (> 0).
        decoder: turns the bytes into samples (any `daq.decoding.Decoder`); its counters
            describe the stream.
        open_fn: opens the port, called as ``open_fn(port, baudrate=..., timeout=...)``.
        clock: host clock, s, stamped on each block as ``host_time_s``.

    Counters: `bytes_read`, `blocks_read`.
    """

    def __init__(
        self,
        port: str,
        baudrate: int,
        decoder: Decoder,
        *,
        open_fn: Callable[..., Any] = serial.serial_for_url,
        clock: Callable[[], float] = time.monotonic,
    ) -> None:
        if not isinstance(port, str) or not port:
            raise FramingError(f"port={port!r} is empty; give a device name or 'loop://'")
        if isinstance(baudrate, bool) or not isinstance(baudrate, int) or baudrate <= 0:
            raise FramingError(f"baudrate={baudrate!r} must be a positive integer (e.g. 921600)")
        _check_decoder(decoder)
        self.port = port
        self.baudrate = baudrate
        self.decoder = decoder
        self._open_fn = open_fn
        self._clock = clock
        self._ser: Any = None
        self.bytes_read = 0
        self.blocks_read = 0

    def _error(self, action: str, exc: BaseException) -> SourceError:
        return SourceError(
            f"serial port {self.port!r}: cannot {action} ({exc}); "
            f"is the device plugged in? {LIST_PORTS_HINT}"
        )

    @property
    def is_open(self) -> bool:
        """True between `open` and `close`."""
        return self._ser is not None

    @property
    def serial(self) -> Any:
        """The underlying pyserial object (None when closed); tests write to ``loop://``."""
        return self._ser

    def open(self) -> SerialSource:
        """Open the port (no-op if already open); returns self."""
        if self._ser is None:
            try:
                self._ser = self._open_fn(self.port, baudrate=self.baudrate, timeout=0.05)
            except (serial.SerialException, OSError, ValueError) as exc:
                raise self._error("open it", exc) from exc
        return self

    def close(self) -> None:
        """Close the port (idempotent)."""
        ser, self._ser = self._ser, None
        if ser is not None:
            try:
                ser.close()
            except (serial.SerialException, OSError) as exc:
                raise self._error("close it", exc) from exc

    def __enter__(self) -> SerialSource:
        return self.open()

    def __exit__(
        self,
        exc_type: type[BaseException] | None,
        exc: BaseException | None,
        tb: TracebackType | None,
    ) -> None:
        self.close()

    def read_block(self, timeout_s: float = 0.05) -> np.ndarray:
        """Read the bytes waiting (or wait up to `timeout_s`, s, for one) and decode them.

        Returns:
            Block of shape (n,), dtype `daq.samples.SAMPLE_DTYPE`; empty if no sample was
            completed. ``host_time_s`` is the clock just after the bytes arrived.
        """
        if self._ser is None:
            raise SourceError(f"serial port {self.port!r} is not open; call open() or use 'with'")
        t = float(timeout_s)
        if not (math.isfinite(t) and t >= 0.0):
            raise FramingError(f"read_block: timeout_s={timeout_s!r} must be a finite number >= 0")
        ser = self._ser
        try:
            if not ser.in_waiting and ser.timeout != t:
                ser.timeout = t
            data = _read_waiting(ser)
        except (serial.SerialException, OSError) as exc:
            raise self._error("read from it", exc) from exc
        host = self._clock()
        self.bytes_read += len(data)
        self.blocks_read += 1
        return self.decoder.feed(data, host)


# ---------------------------------------------------------------- background reader
def _utc_now() -> str:
    """Current UTC time, ISO 8601 with milliseconds and a trailing Z."""
    now = _dt.datetime.now(_dt.UTC)
    return now.isoformat(timespec="milliseconds").replace("+00:00", "Z")


@dataclass(frozen=True)
class ReaderEvent:
    """Something that happened to the port.

    Attributes:
        kind: one of `EVENT_KINDS`: "connected" (first open), "disconnected" (a read or
            the port failed), "reconnected" (open again after a loss), "open-failed"
            (first failure of a series of open attempts), "unread-dropped" (the consumer
            did not drain in time and the oldest samples were discarded).
        host_time_s: the reader's clock when it happened, s.
        utc: wall-clock time, ISO 8601 UTC ending in "Z".
        message: what happened, in words (includes the error text).
        last_seq: sequence number of the last sample decoded before it, or None.
    """

    kind: str
    host_time_s: float
    utc: str
    message: str
    last_seq: int | None


@dataclass(frozen=True)
class ReaderStats:
    """A snapshot of the reader's counters.

    Attributes:
        bytes_read: bytes received since `start`.
        reconnects: how many times the port was reopened after a loss.
        decoder: the decoder's counters (`daq.decoding.DecoderStats`).
        seconds_since_data: host seconds since bytes last arrived (since `start` if none
            has yet), s; None before `start`.
        rate_hz: measured sample rate (`daq.rate.RateMeter`), Hz, or None (too little data).
        drift_ppm: measured rate against the nominal one, ppm, or None.
        samples_dropped_unread: decoded samples discarded because nobody drained them.
        samples_unread: decoded samples waiting for `drain`.
    """

    bytes_read: int
    reconnects: int
    decoder: DecoderStats
    seconds_since_data: float | None
    rate_hz: float | None
    drift_ppm: float | None
    samples_dropped_unread: int = 0
    samples_unread: int = 0


class _StoppedError(Exception):
    """Raised inside the reader thread when `stop` interrupts a wait."""


class SerialReader:
    """Read a serial port on a background thread and keep it open through losses.

    The thread opens the port with `settings`, then loops: read the bytes waiting (or
    wait up to `read_timeout_s` for one), stamp them with `clock`, decode them and keep
    the samples for `drain`. When opening or reading fails (``SerialException`` or
    ``OSError``) it logs a "disconnected" event, closes the port, drops the decoder's
    incomplete bytes (``decoder.discard_partial()``) and tries to open the port again,
    waiting `backoff_initial_s` before the first retry and doubling the wait after each
    failure up to `backoff_max_s`; the wait goes back to `backoff_initial_s` only once
    bytes arrive again (so a port that opens but fails at once is not hammered). Only
    the first failure of a series is logged ("open-failed"); success logs
    "reconnected", and the first sample decoded after it carries
    `daq.samples.FLAG_RECONNECT_BEFORE`. The very first open is tried at once.

    Any other exception ends the thread; `drain` re-raises it as `SourceError` (after
    handing over the samples decoded before it), so it never passes silently.

    Args:
        settings: port and line settings.
        decoder: a `daq.decoding.Decoder`; used only by the thread while it runs.
        open_fn: called as ``open_fn(port, baudrate=, parity=, stopbits=, bytesize=,
            timeout=)``; returns a pyserial-like object (``in_waiting``, ``read``,
            ``close``).
        clock: host clock, s (monotonic), stamped on the samples as ``host_time_s``.
        backoff_initial_s: first wait before reopening, s (> 0).
        backoff_max_s: longest wait between open attempts, s (≥ backoff_initial_s).
        nominal_rate_hz: the device's sample rate, Hz, for `ReaderStats.drift_ppm`.
        sleep: waits a number of seconds between open attempts; by default a wait that
            `stop` interrupts. Tests pass a recorder.
        read_timeout_s: longest wait for one byte when none is waiting, s (> 0).
        rate_window_s: window of the rate meter, s.
        max_unread_samples: samples kept for `drain` at most; the oldest beyond it are
            dropped, counted and logged ("unread-dropped").
        first_open_attempts: a port that has never opened is tried this many times
            (about 1.5 s with the default waits), then the thread ends and `drain`
            raises `SourceError` naming the port: a mistyped name must not retry
            forever. Once the port has been open, reopening goes on until `stop`.
    """

    def __init__(
        self,
        settings: PortSettings,
        decoder: Decoder,
        *,
        open_fn: Callable[..., Any] = serial.serial_for_url,
        clock: Callable[[], float] = time.monotonic,
        backoff_initial_s: float = 0.05,
        backoff_max_s: float = 2.0,
        nominal_rate_hz: float | None = None,
        sleep: Callable[[float], object] | None = None,
        read_timeout_s: float = 0.05,
        rate_window_s: float = 10.0,
        max_unread_samples: int = MAX_UNREAD_SAMPLES,
        first_open_attempts: int = 6,
    ) -> None:
        if not isinstance(settings, PortSettings):
            raise FramingError(
                f"SerialReader: settings={settings!r} is not a PortSettings; "
                "build one with PortSettings(port, baudrate=...)"
            )
        _check_decoder(decoder)
        for name, value in (
            ("backoff_initial_s", backoff_initial_s),
            ("backoff_max_s", backoff_max_s),
            ("read_timeout_s", read_timeout_s),
        ):
            if isinstance(value, bool) or not isinstance(value, (int, float)):
                raise FramingError(f"SerialReader: {name}={value!r} is not a number of seconds")
            if not (math.isfinite(value) and value > 0.0):
                raise FramingError(f"SerialReader: {name}={value!r} must be a finite number > 0")
        if backoff_max_s < backoff_initial_s:
            raise FramingError(
                f"SerialReader: backoff_max_s={backoff_max_s!r} is below backoff_initial_s="
                f"{backoff_initial_s!r}; give a maximum at least as long as the first wait"
            )
        if (
            isinstance(max_unread_samples, bool)
            or not isinstance(max_unread_samples, int)
            or max_unread_samples < 1
        ):
            raise FramingError(
                f"SerialReader: max_unread_samples={max_unread_samples!r} must be an integer >= 1"
            )
        self.settings = settings
        self.decoder = decoder
        self._open_fn = open_fn
        self._clock = clock
        self.backoff_initial_s = float(backoff_initial_s)
        self.backoff_max_s = float(backoff_max_s)
        self.read_timeout_s = float(read_timeout_s)
        self.max_unread_samples = max_unread_samples
        if (
            isinstance(first_open_attempts, bool)
            or not isinstance(first_open_attempts, int)
            or (first_open_attempts < 1)
        ):
            raise FramingError(
                f"SerialReader: first_open_attempts={first_open_attempts!r} must be an "
                "integer >= 1"
            )
        self.first_open_attempts = first_open_attempts
        self._rate = RateMeter(nominal_rate_hz, rate_window_s)
        self._stop_evt = threading.Event()
        self._sleep = sleep if sleep is not None else self._interruptible_sleep
        self._lock = threading.Lock()  # blocks, events, counters, rate meter
        self._dec_lock = threading.Lock()  # the decoder (fed by the thread, read by stats)
        self._blocks: collections.deque[np.ndarray] = collections.deque()
        self._events: collections.deque[ReaderEvent] = collections.deque()
        self._unread = 0
        self._thread: threading.Thread | None = None
        self._error: BaseException | None = None
        self._state = "stopped"
        self._ser: Any = None
        self._bytes_read = 0
        self._reconnects = 0
        self._dropped_unread = 0
        self._dropping = False  # an "unread-dropped" event is out, not yet drained
        self.events_dropped = 0
        self._last_seq: int | None = None
        self._last_data_t: float | None = None
        self._flag_next = False
        self._backoff_s = self.backoff_initial_s  # next wait before an open attempt

    # ---------------------------------------------------------------- control
    def start(self) -> SerialReader:
        """Start the reading thread (once); returns self."""
        if self._stop_evt.is_set():
            raise SourceError(
                f"SerialReader on {self.settings.port!r}: already stopped; make a new one"
            )
        if self._thread is not None:
            return self
        self._state = "connecting"
        self._last_data_t = self._clock()
        self._thread = threading.Thread(
            target=self._run, name=f"SerialReader {self.settings.port}", daemon=True
        )
        self._thread.start()
        return self

    def stop(self, timeout_s: float = 2.0) -> None:
        """Stop the thread, wait up to `timeout_s`, s, for it and close the port.

        Raises `SourceError` if the thread is still running after the wait (it is then
        left to end on its own; it is a daemon thread).
        """
        self._stop_evt.set()
        thread = self._thread
        if thread is not None and thread.is_alive():
            thread.join(timeout_s)
            if thread.is_alive():
                ser = self._ser
                cancel = getattr(ser, "cancel_read", None)
                if callable(cancel):
                    cancel()
                thread.join(0.2)
            if thread.is_alive():
                raise SourceError(
                    f"SerialReader on {self.settings.port!r}: thread did not stop within "
                    f"{timeout_s} s (blocked in open or read); give a longer timeout_s"
                )
        self._close_port()
        self._state = "stopped"

    def __enter__(self) -> SerialReader:
        return self.start()

    def __exit__(
        self,
        exc_type: type[BaseException] | None,
        exc: BaseException | None,
        tb: TracebackType | None,
    ) -> None:
        self.stop()

    @property
    def state(self) -> str:
        """ "connecting", "connected", "reconnecting" or "stopped" (also before `start`)."""
        return self._state

    @property
    def error(self) -> BaseException | None:
        """The exception that ended the thread unexpectedly, if any."""
        return self._error

    # ------------------------------------------------------------- consumer side
    def drain(self) -> np.ndarray:
        """Every sample decoded since the last drain; shape (n,), `SAMPLE_DTYPE`.

        Never waits on I/O (only on a short lock). If the thread ended with an
        unexpected error, the samples decoded before it are returned first and the next
        call raises `SourceError` naming it.
        """
        with self._lock:
            blocks = list(self._blocks)
            self._blocks.clear()
            self._unread = 0
            self._dropping = False
        if blocks:
            return concat_blocks(blocks)
        err = self._error
        if isinstance(err, SourceError):  # already names the port and what to do
            raise SourceError(str(err)) from err
        if err is not None:
            raise SourceError(
                f"SerialReader on {self.settings.port!r} stopped on an unexpected error: "
                f"{type(err).__name__}: {err}"
            ) from err
        return empty_block()

    def drain_events(self) -> list[ReaderEvent]:
        """Every event logged since the last call, oldest first."""
        with self._lock:
            events = list(self._events)
            self._events.clear()
        return events

    def stats(self) -> ReaderStats:
        """A snapshot of the counters (safe to call from any thread at any time)."""
        with self._dec_lock:
            dec = self.decoder.stats()
        with self._lock:
            since = None if self._last_data_t is None else self._clock() - self._last_data_t
            return ReaderStats(
                bytes_read=self._bytes_read,
                reconnects=self._reconnects,
                decoder=dec,
                seconds_since_data=since,
                rate_hz=self._rate.rate_hz,
                drift_ppm=self._rate.drift_ppm,
                samples_dropped_unread=self._dropped_unread,
                samples_unread=self._unread,
            )

    # ---------------------------------------------------------------- thread side
    def _interruptible_sleep(self, seconds: float) -> None:
        self._stop_evt.wait(seconds)

    def _log(self, kind: str, message: str) -> None:
        event = ReaderEvent(
            kind=kind,
            host_time_s=self._clock(),
            utc=_utc_now(),
            message=message,
            last_seq=self._last_seq,
        )
        with self._lock:
            self._events.append(event)
            while len(self._events) > MAX_EVENTS:
                self._events.popleft()
                self.events_dropped += 1

    def _close_port(self) -> None:
        ser, self._ser = self._ser, None
        if ser is not None:
            # A lost port may fail to close; it is gone either way.
            with contextlib.suppress(serial.SerialException, OSError):
                ser.close()

    def _run(self) -> None:
        try:
            self._loop()
        except _StoppedError:
            pass
        except BaseException as exc:  # kept for drain(); the thread must not die silently
            self._error = exc
        finally:
            self._close_port()
            self._state = "stopped"

    def _open_until_success(self, reconnect: bool) -> None:
        """Open the port, retrying with backoff; log the outcome. Raises _StoppedError."""
        s = self.settings
        kwargs = s.serial_kwargs()
        kwargs["timeout"] = self.read_timeout_s
        failures = 0
        if reconnect:
            self._backoff_wait()
        while True:
            if self._stop_evt.is_set():
                raise _StoppedError
            try:
                self._ser = self._open_fn(s.port, **kwargs)
                break
            except (serial.SerialException, OSError) as exc:
                failures += 1
                if not reconnect and failures >= self.first_open_attempts:
                    raise SourceError(
                        f"cannot open {s.port!r} ({_open_reason(exc)}), {failures} attempts; "
                        "is it the "
                        f"right name, is the device plugged in? {LIST_PORTS_HINT}"
                    ) from None
                if failures == 1:
                    self._log(
                        "open-failed",
                        f"cannot open {s.port!r} ({_open_reason(exc)}); retrying, waits "
                        "doubling up to "
                        f"{self.backoff_max_s:g} s; {LIST_PORTS_HINT}",
                    )
            self._backoff_wait()
        if self._stop_evt.is_set():
            self._close_port()
            raise _StoppedError
        after = f" after {failures} failed attempt(s)" if failures else ""
        if reconnect:
            with self._lock:
                self._reconnects += 1
            self._flag_next = True
            self._log("reconnected", f"{s.port!r} open again{after}")
        else:
            self._log("connected", f"{s.port!r} open at {s.baudrate} baud{after}")
        self._state = "connected"

    def _backoff_wait(self) -> None:
        """Wait the current backoff, then double it (up to the maximum)."""
        delay = self._backoff_s
        self._backoff_s = min(2.0 * delay, self.backoff_max_s)
        self._wait(delay)

    def _wait(self, seconds: float) -> None:
        self._sleep(seconds)
        if self._stop_evt.is_set():
            raise _StoppedError

    def _loop(self) -> None:
        self._open_until_success(reconnect=False)
        while not self._stop_evt.is_set():
            try:
                data = _read_waiting(self._ser)
            except (serial.SerialException, OSError) as exc:
                self._state = "reconnecting"
                self._log("disconnected", f"{self.settings.port!r} lost: {exc}")
                self._close_port()
                with self._dec_lock:
                    self.decoder.discard_partial()
                self._open_until_success(reconnect=True)
                continue
            if data:
                self._take(data)

    def _take(self, data: bytes) -> None:
        host = self._clock()
        self._backoff_s = self.backoff_initial_s  # the port works again
        with self._dec_lock:
            block = self.decoder.feed(data, host)
        if block.size and self._flag_next:
            block["flags"][0] |= FLAG_RECONNECT_BEFORE
            self._flag_next = False
        dropped_now = 0
        with self._lock:
            self._bytes_read += len(data)
            self._last_data_t = host
            if block.size:
                self._last_seq = int(block["seq"][-1])
                self._rate.update(block)
                self._blocks.append(block)
                self._unread += block.size
                while self._unread > self.max_unread_samples:
                    excess = self._unread - self.max_unread_samples
                    oldest = self._blocks[0]
                    if oldest.size <= excess:
                        self._blocks.popleft()
                        n = oldest.size
                    else:
                        self._blocks[0] = oldest[excess:]
                        n = excess
                    self._unread -= n
                    self._dropped_unread += n
                    dropped_now += n
            first_drop = dropped_now > 0 and not self._dropping
            if dropped_now:
                self._dropping = True
        if first_drop:
            self._log(
                "unread-dropped",
                f"nobody drained {self.max_unread_samples} samples; dropping the oldest "
                "(counted in samples_dropped_unread) until the next drain()",
            )


def _open_reason(exc: BaseException) -> str:
    """Why a port did not open, said once: the operating system's words for the error
    number where there is one (pyserial's text repeats it: "[Errno 2] could not open port
    X: [Errno 2] No such file or directory: 'X'"), else the exception's own text (an
    exclusive lock held by another process, say)."""
    code = getattr(exc, "errno", None)
    if isinstance(exc, serial.SerialException) and isinstance(code, int) and code > 0:
        return os.strerror(code)
    if isinstance(exc, OSError) and exc.strerror:
        return exc.strerror
    return str(exc)
