"""Record variants: clean, rows dropped at random, isolated spikes.

* ``dropped``: 0.5 % of the rows removed at random (never the first row); the
  remaining times jump by two or more periods where rows are missing.
* ``spikes``: five isolated samples, after the start-up, each moved by ±50 σ (σ the
  transducer noise, sign at random) and re-quantised; no two within 10 samples.
"""

from __future__ import annotations

import numpy as np

from accuracy.cells import Cell
from accuracy.transducer import quantise

VARIANTS: tuple[str, ...] = ("clean", "dropped", "spikes")
DROP_FRACTION = 0.005
N_SPIKES = 5
SPIKE_SIGMAS = 50.0


def apply_variant(
    variant: str,
    cell: Cell,
    t_s: np.ndarray,
    z_m: np.ndarray,
    rng: np.random.Generator,
    first_index: int,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Return ``(kept, t_s, z_m)``: indices of the kept rows, their times (s) and readings (m).

    ``first_index`` is the first sample after the start-up; spikes go after it.
    """
    n = t_s.size
    if variant == "clean":
        kept = np.arange(n)
        return kept, t_s, z_m
    if variant == "dropped":
        n_drop = max(1, round(DROP_FRACTION * n))
        dropped = rng.choice(np.arange(1, n), size=n_drop, replace=False)
        kept = np.setdiff1d(np.arange(n), dropped)
        return kept, t_s[kept], z_m[kept]
    if variant == "spikes":
        while True:
            where = np.sort(rng.choice(np.arange(first_index, n), size=N_SPIKES, replace=False))
            if np.all(np.diff(where) > 10):
                break
        signs = rng.choice([-1.0, 1.0], size=N_SPIKES)
        z = z_m.copy()
        z[where] = quantise(z[where] + signs * SPIKE_SIGMAS * cell.noise_m, cell.resolution_m)
        return np.arange(n), t_s, z
    raise ValueError(f"variant = {variant!r}: must be one of {', '.join(VARIANTS)}")
