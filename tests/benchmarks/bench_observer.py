"""Benchmark: steady-state observer path vs a per-sample filterpy predict/update loop.

Prints throughputs and their ratio, both measured in this run on the same data (the
loop on a prefix, since it is slow). Not a test; run it by hand:

    python tests/benchmarks/bench_observer.py [n_samples]
"""

from __future__ import annotations

import math
import sys
import time

import numpy as np
from filterpy.kalman import KalmanFilter

from estimator.observer import ForceObserver, ObserverTuning
from estimator.plant import Plant


def main(n: int = 2_000_000, n_loop: int = 40_000) -> None:
    plant = Plant.from_modal(1000.0, 0.12, 4.0e5)  # invented cell
    dt, noise = 5e-4, 5e-8
    rng = np.random.default_rng(0)
    t = np.arange(n) * dt
    z = 1e-4 + rng.normal(0.0, noise, n)

    obs = ForceObserver(plant, dt, noise, 0.0, ObserverTuning(), force_range_n=130.0)
    start = time.perf_counter()
    est = obs.process(t, z)
    fast = time.perf_counter() - start
    assert np.all(np.isfinite(est["force_u_n"])) and np.all(np.isfinite(est["nis"]))

    kf = KalmanFilter(dim_x=3, dim_z=1)
    kf.F, kf.Q = obs._nominal.phi, obs._nominal.Q
    kf.H, kf.R = np.array([[1.0, 0.0, 0.0]]), np.array([[obs.R]])
    kf.x = np.array([[z[0]], [0.0], [plant.stiffness_n_per_m * z[0]]])
    out = np.empty((n_loop, 3))
    start = time.perf_counter()
    for i in range(n_loop):
        kf.predict()
        kf.update(z[i])
        out[i] = (kf.x[2, 0], math.sqrt(kf.P[2, 2]), kf.y[0, 0] ** 2 / kf.S[0, 0])
    slow = time.perf_counter() - start

    rate_fast, rate_slow = n / fast, n_loop / slow
    print(
        f"steady-state path : {n:>9} samples in {fast:7.3f} s = {rate_fast / 1e6:6.2f} M samples/s"
    )
    print(
        f"filterpy loop     : {n_loop:>9} samples in {slow:7.3f} s = "
        f"{rate_slow / 1e3:6.1f} k samples/s"
    )
    print(f"ratio             : {rate_fast / rate_slow:8.0f} x  (force, sigma and NIS in both)")
    print(f"steady share      : {obs.counters.steady / n:.4f} of samples on the fast path")


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 2_000_000)
