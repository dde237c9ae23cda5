"""Opening the files of a run folder that may have been damaged or planted.

A run folder comes from anywhere (a colleague, an archive, a hostile mail). Before any of
its files is opened, `checked_file` makes sure it is a regular file inside the folder and
not larger than such a file can legitimately be: a FIFO in place of ``run.json`` would
block a reader forever, a link to ``/dev/zero`` in place of ``events.jsonl`` would be
read until memory runs out, and a link out of the folder would make forcelens read (or,
for a writer trusting the name, write) elsewhere.
"""

from __future__ import annotations

import os
import stat
from pathlib import Path

from daq.errors import RunFormatError

__all__ = ["MAX_EVENTS_BYTES", "MAX_JSON_BYTES", "checked_file", "file_kind"]

MAX_JSON_BYTES = 16 * 2**20  #: run.json, closing.json: a profile copy and a few hashes
MAX_EVENTS_BYTES = 256 * 2**20  #: events.jsonl: about a million events


def checked_file(path: Path, folder: Path, what: str, max_bytes: int | None = None) -> int:
    """The size of ``path`` (bytes) once it is known to be safe to open.

    Raises:
        RunFormatError: missing; a symbolic link to somewhere outside ``folder``; not a
            regular file (a FIFO, device, socket or folder); larger than ``max_bytes``.
    """
    try:
        st = os.lstat(path)
    except FileNotFoundError:
        raise RunFormatError(f"{path}: missing ({what})") from None
    except OSError as exc:
        raise RunFormatError(f"{path}: cannot read ({exc.strerror or exc})") from None
    if stat.S_ISLNK(st.st_mode):
        target = path.resolve()
        inside = folder.resolve()
        if inside not in target.parents:
            raise RunFormatError(
                f"{path}: a symbolic link to {target}, outside the run folder ({what}); "
                "a run's files must be inside its folder"
            )
        try:
            st = os.stat(path)
        except OSError as exc:
            raise RunFormatError(f"{path}: broken link ({exc.strerror or exc})") from None
    if not stat.S_ISREG(st.st_mode):
        raise RunFormatError(
            f"{path}: not a regular file ({file_kind(st.st_mode)}) in place of the {what}"
        )
    if max_bytes is not None and st.st_size > max_bytes:
        raise RunFormatError(
            f"{path}: {st.st_size} bytes; a {what} is at most {max_bytes} bytes "
            "(damaged or not a forcelens file)"
        )
    return st.st_size


def file_kind(mode: int) -> str:
    """What a file that is not a regular one is, in words (from its ``st_mode``)."""
    if stat.S_ISDIR(mode):
        return "a folder"
    if stat.S_ISFIFO(mode):
        return "a FIFO"
    if stat.S_ISCHR(mode) or stat.S_ISBLK(mode):
        return "a device"
    if stat.S_ISSOCK(mode):
        return "a socket"
    if stat.S_ISLNK(mode):
        return "a symbolic link"
    return "a special file"
