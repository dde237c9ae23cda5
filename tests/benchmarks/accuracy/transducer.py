"""The displacement transducer: white noise, then quantisation to the ADC step."""

from __future__ import annotations

import numpy as np

from accuracy.cells import Cell


def quantise(x_m: np.ndarray, step_m: float) -> np.ndarray:
    """Round displacements (m) to the nearest multiple of the ADC step ``step_m`` (m)."""
    return step_m * np.round(np.asarray(x_m, dtype=float) / step_m)


def measure(cell: Cell, x_true_m: np.ndarray, rng: np.random.Generator) -> np.ndarray:
    """Readings (m): true displacement plus Gaussian noise of ``cell.noise_m``, quantised."""
    noisy = x_true_m + rng.normal(0.0, cell.noise_m, np.shape(x_true_m))
    return quantise(noisy, cell.resolution_m)
