"""The catalogue a command that selects runs indexes them into, even on a read-only archive.

An auditor is often given read access only to a laboratory's archive. Indexing writes
the catalogue file in the archive's root (``ui.recording.CATALOGUE_NAME``); when that
is not possible, the runs are indexed into a private copy in a temporary folder, which
is deleted when the process ends. Nothing under the root is written, and the user is
told so. The copy starts from the archive's own catalogue when it can be read, so runs
that were catalogued and have since gone missing are still reported.
"""

from __future__ import annotations

import atexit
import shutil
import tempfile
from pathlib import Path
from typing import Any

__all__ = ["catalogue_to_scan"]


def catalogue_to_scan(root: Path) -> tuple[Any, str | None]:
    """The catalogue to index the runs under ``root`` into, and a note when it is a copy.

    Returns ``(catalogue, None)`` for the archive's own catalogue, or
    ``(private copy, note)`` when the archive cannot be written.
    """
    from daq.catalogue import Catalogue
    from daq.errors import RunFormatError, SourceError
    from ui.recording import CATALOGUE_NAME

    own = Path(root) / CATALOGUE_NAME
    try:
        catalogue = Catalogue(own)
        catalogue.check_writable()
        return catalogue, None
    except SourceError as exc:
        problem = str(exc)
    spare = Path(tempfile.mkdtemp(prefix="forcelens-catalogue-"))
    atexit.register(shutil.rmtree, spare, ignore_errors=True)
    copy = spare / CATALOGUE_NAME
    started_from = "an empty index"
    if own.is_file():
        try:
            shutil.copyfile(own, copy)
            Catalogue(copy)  # a copy this software can read, or start afresh
            started_from = f"a copy of {own.name}"
        except (OSError, RunFormatError, SourceError):
            copy.unlink(missing_ok=True)
    note = (
        f"the archive cannot be written ({problem}); its runs are indexed into a temporary "
        f"catalogue ({started_from}) and nothing under {root} is changed"
    )
    return Catalogue(copy), note
