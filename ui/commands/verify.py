"""``forcelens verify``: check that recorded runs are complete and untouched."""

from __future__ import annotations

import argparse
from typing import Any

__all__ = ["register"]


def register(subparsers: Any) -> None:
    from ui.input_paths import input_path

    p = subparsers.add_parser(
        "verify",
        help="check a recorded run's completeness and SHA-256",
        description=(
            "Check each run folder: description readable, sample layout known, closing "
            "record present, record counts and SHA-256 hashes matching the files. Exits 1 "
            "when any run has a problem."
        ),
    )
    p.add_argument("runs", nargs="+", metavar="RUN", type=input_path, help="run folder(s)")
    p.set_defaults(run=run)


def run(args: argparse.Namespace) -> int:
    from daq.runs import verify_run

    status = 0
    for folder in args.runs:
        report = verify_run(folder)
        print(report.text())
        if not report.ok:
            status = 1
    return status
