"""The stated uncertainty of a linear smoother whose prior is only approximately right.

The Rauch–Tung–Striebel covariance of a smoother is the error covariance *if the force
follows the prior*. One random-walk or integrated-random-walk intensity fitted to a whole
record rarely does: a sine is smoother than the integrated random walk that explains it
best, a staircase is flat between steps that a random walk must be rough enough to
follow. There the smoothed covariance counts motion the load never makes; on the accuracy
benchmark it was 1.4–2 times the actual error on smooth loads and up to 20 times on the
holds of staircases (33 of 45 records covered above 0.99).

Here the smoother's error ``ê = G·z − F`` (``G`` the smoother, linear in the data for fixed
gains) is split as it really is:

* **noise part** ``G·n``: the smoother's response to the measurement noise alone. Its
  variance ``V`` is estimated by running the same smoother (same gains) on ``replicas``
  simulated noise records of the transducer's own variance, then averaged over a sliding
  window of ``window`` samples (``V`` changes only slowly: after start-up, around gaps);
* **bias part** ``G·h − F``, with ``h`` the noise-free displacement: unknown, estimated
  by plug-in — the smoothed displacement stands in for ``h`` and the smoothed force for
  ``F``, ``b̂ = G·x̂ − F̂`` (the usual plug-in estimate of a linear smoother's bias; e.g.
  Wasserman, "All of Nonparametric Statistics", 2006, ch. 5, from memory).

The stated variance is ``V + b̂²``. The noise records come from a generator with a fixed
seed, so the result is reproducible to the bit.
"""

from __future__ import annotations

from collections.abc import Callable, Iterable, Iterator

import numpy as np
from scipy.ndimage import uniform_filter1d

from estimator.spill import SpillFolder, chunks

__all__ = ["smoother_variance", "smoother_variance_in_slices"]

REPLICAS = 8  # simulated noise records
WINDOW = 101  # samples averaged for the noise variance
SEED = 20261204  # fixed: the same record gives the same σ on every machine

#: ``smooth(record, emit)``: the smoother with its gains fixed, given a record's slices in
#: order (displacement, m, NaN where left out), calls ``emit(first row, smoothed force N)``
#: once per slice, in any order.
SliceSmoother = Callable[[Iterable[np.ndarray], Callable[[int, np.ndarray], None]], None]
Rows = Callable[[int, int], np.ndarray]  # rows a..b of a record-long quantity


def smoother_variance(
    smooth: Callable[[np.ndarray], np.ndarray],
    displacement_m: np.ndarray,
    smoothed_displacement_m: np.ndarray,
    smoothed_force_n: np.ndarray,
    noise_sd_m: float,
    *,
    replicas: int = REPLICAS,
    window: int = WINDOW,
) -> np.ndarray:
    """Variance (N²) of the smoothed force, noise part plus plug-in bias², shape (n,).

    Args:
        smooth: the smoother with its gains fixed: displacement record (m, NaN where
            missing) to smoothed force (N).
        displacement_m: the record it smoothed (NaN marks samples left out).
        smoothed_displacement_m: its smoothed displacement.
        smoothed_force_n: its smoothed force.
        noise_sd_m: standard deviation of one measurement (noise and quantisation).
    """
    n = displacement_m.size
    out = np.empty(n)
    if n == 0:
        return out

    def whole(record: Iterable[np.ndarray], emit: Callable[[int, np.ndarray], None]) -> None:
        emit(0, smooth(next(iter(record))))

    def keep(a: int, values: np.ndarray) -> None:
        out[a : a + values.size] = values

    with SpillFolder(in_files=False) as scratch:
        smoother_variance_in_slices(
            whole,
            lambda a, b: np.isnan(displacement_m[a:b]),
            lambda a, b: smoothed_displacement_m[a:b],
            lambda a, b: smoothed_force_n[a:b],
            noise_sd_m,
            n,
            scratch,
            keep,
            replicas=replicas,
            window=window,
            chunk=max(n, 1),
        )
    return out


def smoother_variance_in_slices(
    smooth: SliceSmoother,
    missing: Rows,
    smoothed_displacement_m: Rows,
    smoothed_force_n: Rows,
    noise_sd_m: float,
    n: int,
    scratch: SpillFolder,
    emit: Callable[[int, np.ndarray], None],
    *,
    replicas: int = REPLICAS,
    window: int = WINDOW,
    chunk: int,
) -> None:
    """`smoother_variance` of a record of ``n`` rows walked through in slices of ``chunk``
    rows (the noise power is kept in ``scratch``): ``emit(first row, variance N²)`` once per
    slice. On a record of one slice the numbers are those of `smoother_variance`."""
    rng = np.random.default_rng(SEED)
    power = scratch.reused("noise_power", n, np.float64)

    def noise() -> Iterator[np.ndarray]:
        for a, b in chunks(0, n, chunk):
            yield np.where(missing(a, b), np.nan, rng.normal(0.0, noise_sd_m, b - a))

    for replica in range(replicas):

        def add(a: int, force: np.ndarray, first: bool = replica == 0) -> None:
            power.write(a, force**2 if first else power.read(a, a + force.size) + force**2)

        smooth(noise(), add)
    size = min(window, n)

    def noise_var(a: int, b: int) -> np.ndarray:
        # the moving average of rows a..b from the rows it reaches
        lo, hi = max(a - window, 0), min(b + window, n)
        return uniform_filter1d(power.read(lo, hi) / replicas, size=size, mode="nearest")[
            a - lo : b - lo
        ]

    def with_bias(a: int, force: np.ndarray) -> None:
        b = a + force.size
        bias = force - smoothed_force_n(a, b)
        emit(a, noise_var(a, b) + bias * bias)

    smooth(
        (
            np.where(missing(a, b), np.nan, smoothed_displacement_m(a, b))
            for a, b in chunks(0, n, chunk)
        ),
        with_bias,
    )
