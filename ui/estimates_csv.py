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

from daq.csv_dialect import write_csv_table
from ui.pipeline import ESTIMATE_UNITS

__all__ = ["write_estimates_csv"]


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
