"""Write observer estimates as CSV with the units in the column names."""

from __future__ import annotations

import os
from collections.abc import Callable
from pathlib import Path

import numpy as np

__all__ = ["ESTIMATE_COLUMNS", "write_estimates_csv"]

#: Output columns: name in the file, field of ESTIMATE_DTYPE, number format.
ESTIMATE_COLUMNS = (
    ("time_s", "time_s", "%.9f"),
    ("force_N", "force_n", "%.9g"),
    ("force_u_N", "force_u_n", "%.6g"),
    ("displacement_m", "displacement_m", "%.9g"),
    ("velocity_m_s", "velocity_m_s", "%.9g"),
    ("nis", "nis", "%.6g"),
    ("flags", "flags", "%d"),
    # the observer's model probabilities: held load, smooth load (all rate models), jump
    ("p_hold", "p_hold", "%.4g"),
    ("p_rate", "p_rate", "%.4g"),
    ("p_jump", "p_jump", "%.4g"),
)

_ROWS_PER_WRITE = 100_000


def write_estimates_csv(
    estimates: np.ndarray,
    path: str | os.PathLike[str],
    progress: Callable[[int, int], None] | None = None,
) -> None:
    """Write ``estimates`` (ESTIMATE_DTYPE) to ``path``; ``force_u_N`` is k = 1.

    ``progress(done, total)`` is called after each chunk of rows when given.
    """
    p = Path(path)
    tmp = p.with_name(p.name + ".part")
    header = ",".join(name for name, _, _ in ESTIMATE_COLUMNS)
    fmt = ",".join(f for _, _, f in ESTIMATE_COLUMNS)
    with open(tmp, "w", encoding="utf-8", newline="\n") as fh:
        fh.write(header + "\n")
        for start in range(0, estimates.size, _ROWS_PER_WRITE):
            chunk = estimates[start : start + _ROWS_PER_WRITE]
            cols = np.column_stack(
                [chunk[field].astype(float) for _, field, _ in ESTIMATE_COLUMNS]
            )
            np.savetxt(fh, cols, fmt=fmt, delimiter=",")
            if progress:
                progress(min(estimates.size, start + _ROWS_PER_WRITE), estimates.size)
    os.replace(tmp, p)
