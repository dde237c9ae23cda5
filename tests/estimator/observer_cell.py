"""The invented cell the observer's tests share, and a step record on it with its truth.

The cell is invented: 0.4 kg moving mass, 4e5 N/m, ζ = 0.12 (fn ≈ 159 Hz), read at 2 kHz
with 50 nm of transducer noise, rated span 130 N. The step record's truth comes from
``scipy.signal.lsim`` (SciPy), 16x oversampled.
"""

from __future__ import annotations

import math

import numpy as np
import scipy.signal

from estimator.observer import ForceObserver, ObserverTuning
from estimator.plant import Plant

MASS, STIFF, ZETA = 0.4, 4.0e5, 0.12
DT = 5e-4
NOISE = 5e-8
SPAN = 130.0
CELL = Plant.from_modal(math.sqrt(STIFF / MASS), ZETA, STIFF)


def make_observer(plant: Plant = CELL, **tuning: object) -> ForceObserver:
    return ForceObserver(plant, DT, NOISE, 0.0, ObserverTuning(**tuning), force_range_n=SPAN)


def step_run(levels: list[float], hold_s: float, seed: int) -> tuple[np.ndarray, ...]:
    """Continuous-time truth by scipy.signal.lsim, 16x oversampled, steps mid-period.

    Each level is held ``hold_s``; a change falls 0.3 periods after a sample. Returns
    times, measured displacement (m) and the applied force at the sample times.
    """
    over = 16
    t = np.arange(round(hold_s * len(levels) / DT)) * DT
    tf = np.arange(t.size * over) * (DT / over)
    idx = np.minimum(np.floor((tf - 0.3 * DT) / hold_s).astype(int), len(levels) - 1)
    idx = np.maximum(idx, 0)
    force = np.asarray(levels, float)[idx]
    _, x, _ = scipy.signal.lsim(CELL.state_space(), force, tf, X0=[levels[0] / STIFF, 0.0])
    rng = np.random.default_rng(seed)
    z = x[::over] + rng.normal(0.0, NOISE, t.size)
    return t, z, force[::over]
