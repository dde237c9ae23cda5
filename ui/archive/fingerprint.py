"""Which code computed a task: the forcelens modules it ran and the numeric libraries.

An archive job compares replayed numbers bit for bit, so a worker must run the same
forcelens sources, with the same NumPy, SciPy, numba and filterpy, as the machine that
collects the results; a cluster with another installation on one machine would
otherwise report differences that are only the software's.

A worker returns, with each result, the names of the forcelens modules loaded in it
(``daq``, ``estimator``, ``ui``) and a digest of their source files and of the library
versions (`task_code`). The collecting process recomputes the digest of the same module
names from its own files (`digest_of`) and refuses a result whose digest differs. Only
the modules a task needed count: unrelated modules may differ freely.
"""

from __future__ import annotations

import functools
import hashlib
import importlib.util
import platform
import sys
from importlib import metadata
from pathlib import Path

__all__ = ["digest_of", "task_code"]

_PACKAGES = ("daq", "estimator", "ui")
_LIBRARIES = ("numpy", "scipy", "numba", "filterpy")


def task_code() -> tuple[tuple[str, ...], str]:
    """The forcelens modules loaded in this process and their digest."""
    names = tuple(
        sorted(
            name
            for name, module in list(sys.modules.items())
            if name.partition(".")[0] in _PACKAGES and getattr(module, "__file__", None)
        )
    )
    return names, digest_of(names)


@functools.lru_cache(maxsize=256)
def digest_of(names: tuple[str, ...]) -> str:
    """16 hex digits of SHA-256 over the source of each module named (as this process
    finds it; "absent" when it has none) and the library and Python versions."""
    digest = hashlib.sha256()
    for name in names:
        digest.update(f"{name}\0".encode())
        try:
            spec = importlib.util.find_spec(name)
        except (ImportError, ValueError):
            spec = None
        origin = getattr(spec, "origin", None)
        try:
            digest.update(Path(origin).read_bytes() if origin else b"absent")
        except OSError:
            digest.update(b"unreadable")
    for lib in _LIBRARIES:
        try:
            version = metadata.version(lib)
        except metadata.PackageNotFoundError:
            version = "absent"
        digest.update(f"{lib}={version}\0".encode())
    digest.update(f"python={platform.python_version()}".encode())
    return digest.hexdigest()[:16]
