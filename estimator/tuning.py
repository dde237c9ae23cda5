"""Measurement noise from a quiet record, and observer tuning by innovation likelihood.

* `noise_from_quiet`: the transducer's white noise from a stretch with the cell unloaded
  and at rest: the residual standard deviation about a straight line (slow drift
  removed), less the quantisation variance LSB²/12 that the observer adds itself.
* `fit_observer`: the noise, the hold model's intensity and the scale of the rate
  models' intensities that maximise the record's innovation log-likelihood
  ``ℓ = Σ ln p(z_k | z_1..k−1)`` of the multiple-model observer (the prediction-error
  decomposition of the likelihood of a state-space model; e.g. Harvey, "Forecasting,
  structural time series models and the Kalman filter", 1989, from memory), on any
  record: steps, ramps, sines or a free-running load.
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

from estimator.errors import EstimatorError
from estimator.loggrid import ascend
from estimator.observer import ForceObserver, ObserverTuning, process_noise_for_bandwidth
from estimator.plant import Plant
from estimator.settling import time_to_settle

_BLOCK = 65_536  # samples per observer call while fitting (the estimates are not kept)

#: The rate models' scale is searched down to 1 over this factor: about one spacing of the
#: bank's rate intensities (×25), below which the bank's own slower rates cover a load. A
#: record with no smooth stretch says nothing of them, and the likelihood then drives the
#: scale towards 0: on an invented overdamped cell's staircase it fitted 2·10⁻⁷, which made
#: that cell's sines 2.8 times worse with ±2σ covering 0.60. Stopped at this limit, the
#: search says so and `forcelens tune` keeps the profile's value. Upwards it is free: a
#: load rougher than the bank's fastest rate is real information.
RATE_SCALE_LIMIT = 25.0

#: The hold model's intensity is searched down to that of this bandwidth only. A held load
#: that is truly constant drives it towards 0 (the hold model's gain with it: it then
#: averages for ever), and a record's ±2σ coverage then rests on a handful of independent
#: errors: tuned on invented staircases, pulses on three of six cells covered 0.996–0.999.
#: 2 Hz is the lowest bandwidth that left no benchmark record above 0.99
#: (docs/method-observer.md, section 2.1).
HOLD_BANDWIDTH_MIN_HZ = 2.0

__all__ = [
    "HOLD_BANDWIDTH_MIN_HZ",
    "RATE_SCALE_LIMIT",
    "NoiseEstimate",
    "ObserverFit",
    "StepComparison",
    "compare_on_steps",
    "fit_observer",
    "noise_from_quiet",
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


@dataclass(frozen=True)
class ObserverFit:
    """The observer's noise and intensities that maximise a record's likelihood.

    Attributes:
        noise_m: transducer white noise (quantisation not included), m.
        q_hold_n2_per_s: the hold model's random-walk intensity, N²/s.
        rate_scale: factor on the rate models' default intensities.
        log_likelihood: the record's innovation log-likelihood with them (nats).
        start_log_likelihood: the same with the values the search started from.
        at_edge: parameter names whose search stopped at its widest (not pinned down).
        evaluations: runs of the observer over the record.
    """

    noise_m: float
    q_hold_n2_per_s: float
    rate_scale: float
    log_likelihood: float
    start_log_likelihood: float
    at_edge: tuple[str, ...]
    evaluations: int


def fit_observer(
    plant: Plant,
    sample_period_s: float,
    noise_m: float,
    resolution_m: float,
    time_s: ArrayLike,
    displacement_m: ArrayLike,
    *,
    force_range_n: float,
    q_hold_n2_per_s: float,
    rate_scale: float = 1.0,
    gate_sigma: float = 5.0,
    fit_noise: bool = True,
) -> ObserverFit:
    """Fit the noise, the hold intensity and the rate scale by likelihood on a record.

    Any record will do (steps, ramps, sines, a free-running load): the likelihood of
    the multiple-model observer weighs every part by the model that explains it.
    Coordinate ascent on log grids (:func:`estimator.loggrid.ascend`), widened while
    the best value sits on an edge, the rate scale not below ``1/RATE_SCALE_LIMIT`` and
    the hold intensity not below that of ``HOLD_BANDWIDTH_MIN_HZ``;
    ``noise_m`` and the intensities are the start, and with ``fit_noise`` false (noise
    known from a quiet stretch) the noise stays as given.
    """
    t = np.asarray(time_s, dtype=float)
    z = np.asarray(displacement_m, dtype=float)

    def loglik(p: tuple[float, ...]) -> float:
        noise = noise_m * p[2] if len(p) > 2 else noise_m
        # the hold model as a random walk: its intensity is then the roughness of the
        # held load the record shows, which the observer's floor model takes as the
        # intensity its gain is designed for (ForceModels.floors)
        tuning = ObserverTuning(
            process_noise_n2_per_s=p[0],
            rate_scale=p[1],
            gate_sigma=gate_sigma,
            constant_floor=False,
        )
        obs = ForceObserver(plant, sample_period_s, noise, resolution_m, tuning, force_range_n)
        for i in range(0, t.size, _BLOCK):  # only the likelihood is kept: memory per block
            obs.process(t[i : i + _BLOCK], z[i : i + _BLOCK])
        return obs.log_likelihood

    start = (q_hold_n2_per_s, rate_scale, 1.0)
    steps = (10.0, 4.0, 1.1) if fit_noise else (10.0, 4.0)
    q_min = process_noise_for_bandwidth(
        HOLD_BANDWIDTH_MIN_HZ,
        plant.stiffness_n_per_m,
        noise_m**2 + resolution_m**2 / 12.0,
        sample_period_s,
    )
    limits = ((q_min, math.inf), (1.0 / RATE_SCALE_LIMIT, math.inf), None)
    result = ascend(loglik, start[: len(steps)], steps, limits=limits[: len(steps)])
    q_hold, scale = result.point[0], result.point[1]
    noise_scale = result.point[2] if fit_noise else 1.0
    names = ("q_hold_n2_per_s", "rate_scale", "noise_m")
    return ObserverFit(
        noise_m=noise_m * noise_scale,
        q_hold_n2_per_s=q_hold,
        rate_scale=scale,
        log_likelihood=result.value,
        start_log_likelihood=loglik(start[: len(steps)]),
        at_edge=tuple(n for n, e in zip(names, result.at_edge, strict=False) if e),
        evaluations=result.evaluations + 1,
    )


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
