"""Observer estimates as CSV in forcelens's one dialect (`daq.csv_dialect`).

``replay --out`` and the demo's ``estimates.csv`` write the same columns, names and
units as ``forcelens export --stream estimates``: every field of
``estimator.observer.ESTIMATE_DTYPE`` as ``name [unit]`` (``force_u_n [N]`` is the
standard uncertainty, k = 1), with numbers that read back exactly.
"""

from __future__ import annotations

import os
from collections.abc import Callable, Mapping

import numpy as np

from daq.csv_dialect import CsvTableWriter, write_csv_table
from estimator.observer import ESTIMATE_DTYPE
from ui.pipeline import ESTIMATE_UNITS

__all__ = ["estimates_csv_writer", "write_estimates_csv"]


def write_estimates_csv(
    estimates: np.ndarray,
    path: str | os.PathLike[str],
    progress: Callable[[int, int], None] | None = None,
    *,
    metadata: Mapping[str, object] | None = None,
) -> None:
    """Write ``estimates`` (ESTIMATE_DTYPE, shape (n,)) to ``path``, atomically.

    ``metadata`` adds ``# key: value`` lines (what was estimated, with which profile);
    ``progress(done, total)`` is called after each chunk of rows when given.
    """
    n = int(estimates.size)
    write_csv_table(
        path,
        title="estimates",
        metadata=metadata,
        columns=[(name, ESTIMATE_UNITS[name], estimates[name]) for name in estimates.dtype.names],
        progress=None if progress is None else (lambda done: progress(done, n)),
    )


def estimates_csv_writer(
    path: str | os.PathLike[str], *, metadata: Mapping[str, object] | None = None
) -> CsvTableWriter:
    """A writer of estimates to ``path`` block by block (``replay --out`` on a record of
    any length): ``with estimates_csv_writer(path) as out: out.write([block[name] for
    name in block.dtype.names])``. The file is the one `write_estimates_csv` writes from
    the whole array, byte for byte."""
    return CsvTableWriter(
        path,
        title="estimates",
        metadata=metadata,
        columns=[(name, ESTIMATE_UNITS[name]) for name in ESTIMATE_DTYPE.names],
    )
