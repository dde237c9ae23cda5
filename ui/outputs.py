"""Where a command may write: outputs never destroy inputs.

Every command that writes a file or a folder of files claims its output here first:

* never inside a recorded run's folder (a run is evidence; forcelens adds nothing to it
  after it is closed, and an export or a replay written over ``samples.bin`` or
  ``run.json`` would destroy it);
* never a path that is one of the command's own inputs (the same file under any name);
* only a regular file, or a path that does not exist yet: a device, a FIFO, a folder or
  a symbolic link in place of an output file is refused;
* not ``-``: forcelens writes its outputs to files, and a file named ``-`` would read as
  standard output to anyone who lists the folder;
* an existing file is replaced only with ``--force`` (the one option name for this in
  every command); writers replace atomically (a temporary file in the same folder, then
  a rename), and the command says what it replaced.

This module imports nothing heavy: `add_force_option` runs while the parser is built.
"""

from __future__ import annotations

import argparse
import contextlib
import os
import stat
import tempfile
from collections.abc import Iterable, Iterator
from pathlib import Path

from daq.run_files import file_kind

__all__ = [
    "OutputRefusedError",
    "add_force_option",
    "claim_file",
    "claim_folder",
    "replacing",
    "write_text_atomic",
]

RUN_MARKER = "run.json"  # the description file every run folder has (daq.runs)


class OutputRefusedError(ValueError):
    """An output path that would destroy or corrupt something; the message says why."""


def add_force_option(parser: argparse.ArgumentParser) -> None:
    """The ``--force`` option, worded the same in every command."""
    parser.add_argument(
        "--force",
        action="store_true",
        help="replace output files that already exist (atomically); without it an existing "
        "file is never replaced",
    )


def _run_folder_of(path: Path) -> Path | None:
    """The recorded run folder that contains ``path`` (or is it), if any."""
    for folder in (path, *path.parents):
        if (folder / RUN_MARKER).is_file():
            return folder
    return None


def _refuse_dash(path: str | os.PathLike[str], what: str) -> None:
    if os.fspath(path) == "-":
        raise OutputRefusedError(
            f"-: forcelens writes this output to a {what}, not to standard output; give a "
            f"{what} name instead of '-'"
        )


def _same(a: Path, b: Path) -> bool:
    try:
        return a.resolve() == b.resolve() or (a.exists() and b.exists() and a.samefile(b))
    except OSError:
        return False


def claim_file(
    path: str | os.PathLike[str],
    *,
    inputs: Iterable[str | os.PathLike[str]] = (),
    force: bool = False,
) -> str | None:
    """Check that ``path`` may be written; returns a note when it replaces a file.

    Raises:
        OutputRefusedError: the path is ``-``, is inside a run folder, is one of
            ``inputs``, is not a regular file, or exists and ``force`` is False.
    """
    _refuse_dash(path, "file")
    out = Path(path)
    run = _run_folder_of(out.absolute().parent)
    if run is not None:
        raise OutputRefusedError(
            f"{out}: inside the recorded run {run}; a run folder is never written to "
            "(choose a path outside it)"
        )
    for given in inputs:
        if _same(out, Path(given)):
            raise OutputRefusedError(
                f"{out}: is an input of this command ({given}); an output never replaces "
                "an input (choose another path)"
            )
    try:
        st = os.lstat(out)
    except FileNotFoundError:
        return None
    if stat.S_ISLNK(st.st_mode):
        raise OutputRefusedError(f"{out}: is a symbolic link; give the real path of the output")
    if not stat.S_ISREG(st.st_mode):
        raise OutputRefusedError(f"{out}: is {file_kind(st.st_mode)}; an output must be a file")
    if not force:
        raise OutputRefusedError(f"{out}: exists; give --force to replace it")
    return f"replaced {out} ({st.st_size} bytes)"


def claim_folder(
    folder: str | os.PathLike[str],
    names: Iterable[str],
    *,
    inputs: Iterable[str | os.PathLike[str]] = (),
    force: bool = False,
) -> list[str]:
    """Check that the files ``names`` may be written in ``folder`` (made if missing);
    returns a note per file it will replace.

    Raises:
        OutputRefusedError: as `claim_file`, for the folder (``-``, inside or equal to a
            run folder, not a folder) or for any of the files.
    """
    _refuse_dash(folder, "folder")
    out = Path(folder)
    run = _run_folder_of(out.absolute())
    if run is not None:
        raise OutputRefusedError(
            f"{out}: inside the recorded run {run}; a run folder is never written to "
            "(choose a folder outside it)"
        )
    if out.is_symlink() or (out.exists() and not out.is_dir()):
        raise OutputRefusedError(f"{out}: exists and is not a folder")
    inputs = list(inputs)
    notes = [claim_file(out / name, inputs=inputs, force=force) for name in names]
    return [n for n in notes if n]


@contextlib.contextmanager
def replacing(path: str | os.PathLike[str]) -> Iterator[Path]:
    """A temporary path beside ``path`` (same suffix) to write to; renamed over ``path``
    when the block ends without an error, removed otherwise. A reader sees the old file
    or the new one, never half of one."""
    target = Path(path)
    fd, name = tempfile.mkstemp(dir=target.parent, prefix=f".{target.name}.", suffix=target.suffix)
    os.close(fd)
    tmp = Path(name)
    umask = os.umask(0)
    os.umask(umask)
    os.chmod(tmp, 0o666 & ~umask)  # as an ordinary new file, not mkstemp's 0600
    try:
        yield tmp
        os.replace(tmp, target)
    finally:
        tmp.unlink(missing_ok=True)


def write_text_atomic(path: str | os.PathLike[str], text: str) -> Path:
    """Write ``text`` (UTF-8) to ``path`` through `replacing`."""
    with replacing(path) as tmp:
        tmp.write_text(text, encoding="utf-8")
    return Path(path)
