"""Samples from a serial port (or any pyserial URL such as ``loop://``).

`SerialSource` reads whatever bytes are waiting, stamps them with the host clock at
receipt and hands them to a `LineDecoder`. It never uses ``readline()``: a line may
arrive in pieces, and the decoder keeps the incomplete tail.
"""

from __future__ import annotations

import math
import time
from collections.abc import Callable
from types import TracebackType
from typing import Any

import numpy as np
import serial

from daq.errors import FramingError, SourceError
from daq.lines import LineDecoder

__all__ = ["LIST_PORTS_HINT", "SerialSource"]

LIST_PORTS_HINT = "list ports with `python -m serial.tools.list_ports`"


class SerialSource:
    """Read sample blocks from a serial port.

    Args:
        port: device name (``/dev/ttyUSB0``, ``COM3``, a pty) or pyserial URL (``loop://``).
        baudrate: line speed, baud (> 0).
        decoder: turns the bytes into samples; its counters describe the stream.
        open_fn: opens the port, called as ``open_fn(port, baudrate=..., timeout=...)``.
        clock: host clock, s, stamped on each block as ``host_time_s``.

    Counters: `bytes_read`, `blocks_read`.
    """

    def __init__(
        self,
        port: str,
        baudrate: int,
        decoder: LineDecoder,
        *,
        open_fn: Callable[..., Any] = serial.serial_for_url,
        clock: Callable[[], float] = time.monotonic,
    ) -> None:
        if not isinstance(port, str) or not port:
            raise FramingError(f"port={port!r} is empty; give a device name or 'loop://'")
        if isinstance(baudrate, bool) or not isinstance(baudrate, int) or baudrate <= 0:
            raise FramingError(f"baudrate={baudrate!r} must be a positive integer (e.g. 921600)")
        if not isinstance(decoder, LineDecoder):
            raise FramingError(f"decoder={decoder!r} is not a LineDecoder")
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
            Block of shape (n,), dtype `daq.samples.SAMPLE_DTYPE`; empty if no line was
            completed. ``host_time_s`` is the clock just after the bytes arrived.
        """
        if self._ser is None:
            raise SourceError(f"serial port {self.port!r} is not open; call open() or use 'with'")
        t = float(timeout_s)
        if not (math.isfinite(t) and t >= 0.0):
            raise FramingError(f"read_block: timeout_s={timeout_s!r} must be a finite number >= 0")
        ser = self._ser
        try:
            waiting = ser.in_waiting
            if waiting:
                data = ser.read(waiting)
            else:
                if ser.timeout != t:
                    ser.timeout = t
                data = ser.read(1)
                if data:
                    more = ser.in_waiting
                    if more:
                        data += ser.read(more)
        except (serial.SerialException, OSError) as exc:
            raise self._error("read from it", exc) from exc
        host = self._clock()
        self.bytes_read += len(data)
        self.blocks_read += 1
        return self.decoder.feed(data, host)
