"""Benchmark: steady-state observer path vs a per-sample filterpy predict/update loop.

Prints throughputs and their ratio, both measured in this run on the same data (the
loop on a prefix, since it is slow). The machines are noisy, so each side is timed
several times, interleaved, and the best time of each is kept. Not a test; run it by
hand:

    python tests/benchmarks/bench_observer.py [n_samples] [repeats]
"""

from __future__ import annotations

import math
import sys
import time

import numpy as np
from filterpy.kalman import KalmanFilter

from estimator.observer import ForceObserver, ObserverTuning
from estimator.plant import Plant

PLANT = Plant.from_modal(1000.0, 0.12, 4.0e5)  # invented cell
DT, NOISE = 5e-4, 5e-8


def time_fast(t: np.ndarray, z: np.ndarray) -> tuple[float, ForceObserver]:
    obs = ForceObserver(PLANT, DT, NOISE, 0.0, ObserverTuning(), force_range_n=130.0)
    start = time.perf_counter()
    est = obs.process(t, z)
    elapsed = time.perf_counter() - start
    assert np.all(np.isfinite(est["force_u_n"])) and np.all(np.isfinite(est["nis"]))
    return elapsed, obs


def time_loop(z: np.ndarray, obs: ForceObserver) -> float:
    kf = KalmanFilter(dim_x=3, dim_z=1)
    kf.F, kf.Q = obs._nominal.phi, obs._nominal.Q
    kf.H, kf.R = np.array([[1.0, 0.0, 0.0]]), np.array([[obs.R]])
    kf.x = np.array([[z[0]], [0.0], [PLANT.stiffness_n_per_m * z[0]]])
    out = np.empty((z.size, 3))
    start = time.perf_counter()
    for i in range(z.size):
        kf.predict()
        kf.update(z[i])
        out[i] = (kf.x[2, 0], math.sqrt(kf.P[2, 2]), kf.y[0, 0] ** 2 / kf.S[0, 0])
    return time.perf_counter() - start


def main(n: int = 2_000_000, repeats: int = 5, n_loop: int = 20_000) -> None:
    rng = np.random.default_rng(0)
    t = np.arange(n) * DT
    z = 1e-4 + rng.normal(0.0, NOISE, n)
    fasts, slows = [], []
    obs = None
    for _ in range(repeats):
        elapsed, obs = time_fast(t, z)
        fasts.append(elapsed)
        slows.append(time_loop(z[:n_loop], obs))
    fast, slow = min(fasts), min(slows)
    rate_fast, rate_slow = n / fast, n_loop / slow
    print(f"steady-state path : {n:>9} samples, best {fast:7.3f} s = {rate_fast / 1e6:6.2f} M/s")
    print(
        f"filterpy loop     : {n_loop:>9} samples, best {slow:7.3f} s = {rate_slow / 1e3:6.1f} k/s"
    )
    print(f"ratio             : {rate_fast / rate_slow:8.0f} x  (force, sigma and NIS in both)")
    print(f"steady share      : {obs.counters.steady / n:.4f} of samples on the fast path")
    print(
        f"best of {repeats} interleaved runs each; median ratio "
        f"{(n / float(np.median(fasts))) / (n_loop / float(np.median(slows))):.0f} x; "
        f"first (cold) fast run {n / fasts[0] / 1e6:.2f} M/s"
    )


if __name__ == "__main__":
    args = [int(a) for a in sys.argv[1:3]]
    main(*args)
