"""The adapter to the project's force observer: the only module that knows its API.

The observer gets what identification would give it, exactly: the true plant (mass,
damping, stiffness), the transducer noise and resolution, the nominal sampling period,
and the rated range of the cell. It never sees the true force, nor the q fitted for
the yardsticks. Both functions take the sample times (s) and readings (m) of a whole
record and return the force estimate (N) and its standard uncertainty σ (N, k = 1),
one per sample.
"""

from __future__ import annotations

import numpy as np

from accuracy.cells import Cell
from estimator.observer import ForceObserver, ObserverTuning
from estimator.plant import Plant
from estimator.smoother import smooth_record


def _observer(cell: Cell) -> ForceObserver:
    plant = Plant(cell.mass_kg, cell.damping_n_s_per_m, cell.stiffness_n_per_m)
    return ForceObserver(
        plant,
        cell.dt_s,
        cell.noise_m,
        cell.resolution_m,
        ObserverTuning(),
        force_range_n=cell.force_range_n,
    )


def live(cell: Cell, t_s: np.ndarray, z_m: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Live (causal) estimate: ``(force_n, sigma_n)``, each shape (n,)."""
    est = _observer(cell).process(t_s, z_m)
    return est["force_n"].copy(), est["force_u_n"].copy()


def smoothed(cell: Cell, t_s: np.ndarray, z_m: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Offline (smoothed) estimate of the whole record: ``(force_n, sigma_n)``, shape (n,)."""
    sm = smooth_record(_observer(cell), t_s, z_m)
    return sm["force_n"].copy(), sm["force_u_n"].copy()
