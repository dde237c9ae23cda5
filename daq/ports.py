"""The serial ports this computer offers, as plain values.

A thin wrapper of ``serial.tools.list_ports.comports()`` (pyserial) that returns frozen
`PortInfo` records sorted by device name, numbers compared as numbers
(``/dev/ttyUSB2`` before ``/dev/ttyUSB10``, ``COM3`` before ``COM12``).
"""

from __future__ import annotations

import re
from dataclasses import dataclass

import serial.tools.list_ports as _list_ports

from daq.errors import SourceError

__all__ = ["PortInfo", "list_ports"]

_DIGITS = re.compile(r"(\d+)")


@dataclass(frozen=True)
class PortInfo:
    """One serial port.

    Attributes:
        device: the name to open (``/dev/ttyUSB0``, ``COM3``).
        description: what the operating system says the device is ("n/a" if unknown).
        hwid: hardware id (USB vendor:product, serial number, location), or "n/a".
    """

    device: str
    description: str
    hwid: str


def _natural_key(name: str) -> tuple[tuple[int, int | str], ...]:
    """Sort key that compares digit runs by value: 'ttyUSB2' < 'ttyUSB10'."""
    return tuple(
        (0, int(part)) if part.isdigit() else (1, part) for part in _DIGITS.split(name) if part
    )


def list_ports() -> list[PortInfo]:
    """Every serial port found, sorted by `device` (natural order); may be empty."""
    try:
        found = _list_ports.comports()
    except OSError as exc:
        raise SourceError(
            f"cannot list serial ports ({exc}); check permissions on the device folder"
        ) from exc
    infos = [
        PortInfo(
            device=str(p.device),
            description=str(p.description or "n/a"),
            hwid=str(p.hwid or "n/a"),
        )
        for p in found
    ]
    return sorted(infos, key=lambda p: (_natural_key(p.device), p.device))
