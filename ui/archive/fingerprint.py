"""Which code a process runs: forcelens's sources and the numeric libraries, as one digest.

An archive job compares replayed numbers bit for bit, so every worker must run the same
forcelens sources with the same NumPy, SciPy, numba and filterpy as the process that
collects the results; a cluster with another installation on one machine would
otherwise report differences that are only the software's. The digest covers every
``.py`` file of the packages ``daq``, ``estimator`` and ``ui`` (path and bytes, in path
order), those libraries' versions and Python's. It is computed once per process.
"""

from __future__ import annotations

import functools
import hashlib
import importlib
import platform
from importlib import metadata
from pathlib import Path

__all__ = ["code_fingerprint"]

_PACKAGES = ("daq", "estimator", "ui")
_LIBRARIES = ("numpy", "scipy", "numba", "filterpy")


@functools.lru_cache(maxsize=1)
def code_fingerprint() -> str:
    """16 hex digits of SHA-256 over the sources and library versions (see the module)."""
    digest = hashlib.sha256()
    for name in _PACKAGES:
        package = importlib.import_module(name)
        base = Path(package.__file__ or "").parent
        for path in sorted(base.rglob("*.py")):
            digest.update(f"{name}/{path.relative_to(base).as_posix()}\0".encode())
            digest.update(path.read_bytes())
    for lib in _LIBRARIES:
        try:
            version = metadata.version(lib)
        except metadata.PackageNotFoundError:
            version = "absent"
        digest.update(f"{lib}={version}\0".encode())
    digest.update(f"python={platform.python_version()}".encode())
    return digest.hexdigest()[:16]
