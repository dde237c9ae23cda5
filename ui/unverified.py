"""Using a run that cannot be verified only when the user says so (``--unverified``).

A run that was never closed, has a torn record or lost data cannot be checked against its
seal: its numbers may be right, or they may be what is left after damage. `report` and
`replay` refuse such a run with the reason and the option that overrides it; with
``--unverified`` they go on and say so at the top of their output (issue 15).
"""

from __future__ import annotations

import argparse
import os

__all__ = ["add_unverified_option", "check_verifiable", "refuse_unverifiable"]


def add_unverified_option(parser: argparse.ArgumentParser) -> None:
    """Add ``--unverified`` to a command that reads a run."""
    parser.add_argument(
        "--unverified",
        action="store_true",
        help="use a run that cannot be verified (not closed, torn or with data lost) as it "
        "is; the output says so",
    )


def check_verifiable(folder: str | os.PathLike[str], allow: bool) -> list[str]:
    """Why the run cannot be verified (empty when it can); reads the run to find out.

    Raises ValueError naming the first reason unless ``allow``. A closed run whose
    hashes do not match is refused later by the reader whatever ``allow`` says.
    """
    from daq.runs import read_run

    data = read_run(folder, check_hash=False, event_kinds=())  # the warnings only
    return refuse_unverifiable(folder, data.warnings, allow)


def refuse_unverifiable(
    folder: str | os.PathLike[str], reasons: list[str], allow: bool
) -> list[str]:
    """``reasons`` (a run's reader warnings) unless there are some and not ``allow``."""
    if reasons and not allow:
        more = f" (and {len(reasons) - 1} more)" if len(reasons) > 1 else ""
        raise ValueError(
            f"{reasons[0]}{more}; `forcelens verify {folder}` tells more. This run cannot "
            "be verified: give --unverified to use it as it is"
        )
    return reasons
