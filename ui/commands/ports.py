"""``forcelens ports``: the serial ports this machine offers."""

from __future__ import annotations

import argparse
from typing import Any

__all__ = ["register"]


def register(subparsers: Any) -> None:
    p = subparsers.add_parser(
        "ports",
        help="list serial ports with their descriptions",
        description="List the serial ports pyserial finds, with description and hardware id.",
    )
    p.set_defaults(run=run)


def run(args: argparse.Namespace) -> int:
    from daq.ports import list_ports

    ports = list_ports()
    if not ports:
        print(
            "no serial port found; plug the signal conditioner in, or run "
            "`forcelens live` without --port to use the built-in simulated cell"
        )
        return 0
    width = max(len(p.device) for p in ports)
    for p in ports:
        print(f"{p.device.ljust(width)}  {p.description}  [{p.hwid}]")
    return 0
