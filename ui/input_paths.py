"""The argparse type of a path a command reads: never empty.

An empty argument (``forcelens replay ''``, a shell variable that was not set) is the
current folder to `pathlib`, and the error then blamed a missing ``run.json`` there.
Standard library only: it is used while the parser is built.
"""

from __future__ import annotations

import argparse

__all__ = ["input_path"]


def input_path(text: str) -> str:
    """``text`` unchanged, or an argparse error when it is empty or blank."""
    if not text.strip():
        raise argparse.ArgumentTypeError(
            "an empty path; give a run folder or a file (an unset shell variable?)"
        )
    return text
