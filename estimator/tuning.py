"""Measurement noise from a quiet record, and observer tuning by innovation likelihood.

* `noise_from_quiet`: the transducer's white noise from a stretch with the cell unloaded
  and at rest: the residual standard deviation about a straight line (slow drift
  removed), less the quantisation variance LSB²/12 that the observer adds itself.
* `tune_bandwidth`: for each candidate bandwidth of the observer's hold model (the
  random-walk prior of held loads), run the observer over a record
  and sum the Gaussian log-likelihood of its innovations,
  ``ℓ = −½ Σ [ln(2π·S_i) + y_i²/S_i]`` (the prediction-error decomposition of the
  likelihood of a state-space model; e.g. Harvey, "Forecasting, structural time series
  models and the Kalman filter", 1989, from memory); the bandwidth with the largest ℓ
  describes the record best.
* `compare_on_steps`: the noise of the held levels and the settling time after each
  step, for several observers (the multiple-model observer's jump model keeps even a
  quiet hold model quick at a step).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike

from estimator.errors import EstimatorError, ParameterError
from estimator.observer import (
    FLAG_GAP,
    FLAG_JUMP,
    FLAG_MISSING,
    FLAG_REJECTED,
    ForceObserver,
    ObserverTuning,
)
from estimator.plant import Plant
from estimator.settling import time_to_settle

__all__ = [
    "NoiseEstimate",
    "StepComparison",
    "TuneResult",
    "compare_on_steps",
    "innovation_log_likelihood",
    "noise_from_quiet",
    "tune_bandwidth",
]


@dataclass(frozen=True)
class NoiseEstimate:
    """White transducer noise from a quiet stretch.

    Attributes:
        noise_m: noise standard deviation without the quantisation part, m.
        residual_std_m: standard deviation about the fitted line, m.
        samples: samples used.
    """

    noise_m: float
    residual_std_m: float
    samples: int


def noise_from_quiet(
    time_s: ArrayLike, displacement_m: ArrayLike, resolution_m: float = 0.0
) -> NoiseEstimate:
    """Noise of a quiet stretch (cell unloaded, at rest); arrays of shape (n,), n ≥ 20."""
    t = np.asarray(time_s, dtype=float)
    x = np.asarray(displacement_m, dtype=float)
    keep = np.isfinite(t) & np.isfinite(x)
    t, x = t[keep], x[keep]
    if t.size < 20:
        raise EstimatorError(
            f"quiet stretch: {t.size} valid samples; give at least 20 (a longer stretch)"
        )
    coef = np.polyfit(t - t.mean(), x, 1)
    resid = x - np.polyval(coef, t - t.mean())
    std = float(np.sqrt(np.sum(resid**2) / (t.size - 2)))
    white = max(std**2 - resolution_m**2 / 12.0, 0.0)
    return NoiseEstimate(math.sqrt(white), std, int(t.size))


def innovation_log_likelihood(estimates: np.ndarray) -> tuple[float, int]:
    """ℓ of the innovations of an estimate block, and how many samples entered it.

    Samples that were rejected, missing, after a gap or re-acquired are left out (their
    innovation does not follow the model's law).
    """
    y = estimates["innovation_m"]
    nis = estimates["nis"]
    bad = FLAG_REJECTED | FLAG_MISSING | FLAG_GAP | FLAG_JUMP
    use = ((estimates["flags"] & bad) == 0) & np.isfinite(y) & np.isfinite(nis) & (nis > 0)
    use[0] = False  # the start-up sample has no prediction
    s = y[use] ** 2 / nis[use]
    return float(-0.5 * np.sum(np.log(2 * np.pi * s) + nis[use])), int(use.sum())


@dataclass(frozen=True)
class TuneResult:
    """Log-likelihood of each candidate bandwidth, and the best one."""

    bandwidths_hz: np.ndarray
    log_likelihood: np.ndarray
    best_hz: float

    @property
    def at_edge(self) -> bool:
        """True when the best bandwidth is the lowest or highest candidate (widen the grid)."""
        return self.best_hz in (float(self.bandwidths_hz[0]), float(self.bandwidths_hz[-1]))


def tune_bandwidth(
    plant: Plant,
    sample_period_s: float,
    noise_m: float,
    resolution_m: float,
    time_s: ArrayLike,
    displacement_m: ArrayLike,
    *,
    bandwidths_hz: Sequence[float] | None = None,
    force_range_n: float | None = None,
) -> TuneResult:
    """The force bandwidth whose observer gives the record the largest likelihood."""
    t = np.asarray(time_s, dtype=float)
    z = np.asarray(displacement_m, dtype=float)
    nyquist = 0.5 / sample_period_s
    grid = np.asarray(
        bandwidths_hz
        if bandwidths_hz is not None
        else np.geomspace(1.0, min(0.2 * nyquist, 0.5 * plant.natural_freq_hz), 13)
    )
    if grid.size < 2 or np.any(~np.isfinite(grid)) or np.any(grid <= 0):
        raise ParameterError("bandwidths_hz: give at least two positive candidate bandwidths")

    def observer(b: float) -> ForceObserver:
        tuning = ObserverTuning(force_bandwidth_hz=float(b))
        return ForceObserver(plant, sample_period_s, noise_m, resolution_m, tuning, force_range_n)

    ll = np.array([innovation_log_likelihood(observer(b).process(t, z))[0] for b in grid])
    best = float(grid[int(np.argmax(ll))])
    return TuneResult(grid, ll, best)


@dataclass(frozen=True)
class StepComparison:
    """One observer on a staircase: noise on the holds and settling after the steps."""

    label: str
    hold_noise_n: float
    settling_s: tuple[float, ...]

    @property
    def median_settling_s(self) -> float:
        """Median settling time over the steps, s."""
        return float(np.median(self.settling_s)) if self.settling_s else math.nan


def compare_on_steps(
    observers: Sequence[tuple[str, ForceObserver]],
    time_s: ArrayLike,
    displacement_m: ArrayLike,
    true_force_n: ArrayLike,
    steps: Sequence[tuple[float, float]],
    *,
    band: float = 0.02,
) -> list[StepComparison]:
    """Run each (label, observer) over a staircase record and measure it.

    Args:
        steps: (time of the step s, level after it N), in time order.
        band: settling band, fraction of the step (2 %, common practice).
    """
    t = np.asarray(time_s, dtype=float)
    z = np.asarray(displacement_m, dtype=float)
    truth = np.asarray(true_force_n, dtype=float)
    ends = [s[0] for s in steps[1:]] + [float(t[-1])]
    levels_before = [float(truth[np.searchsorted(t, s[0]) - 1]) for s in steps]
    out = []
    for label, obs in observers:
        f = obs.process(t, z)["force_n"]
        settle, noise = [], []
        for (t0, level), t1, before in zip(steps, ends, levels_before, strict=True):
            tol = band * abs(level - before)
            settle.append(time_to_settle(t, f, t0, t1, level, tol))
            hold = (t >= t0 + 0.5 * (t1 - t0)) & (t < t1)
            noise.append(float(np.std(f[hold] - truth[hold])))
        out.append(StepComparison(label, float(np.sqrt(np.mean(np.square(noise)))),
                                  tuple(settle)))  # fmt: skip
    return out
