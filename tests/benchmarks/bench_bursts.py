"""Benchmark: bursts of outliers (two or three consecutive bad samples) against the clean record.

Run it by hand (it is not a test and pytest does not collect it):

    .venv/bin/python tests/benchmarks/bench_bursts.py [--seed N] [--length 2] [--cells tuned]

Interference often spoils a few samples in a row. The accuracy benchmark's spikes are
isolated; here each clean record of `bench_accuracy.py` (invented cells, invented loads,
truth from ``scipy.integrate.solve_ivp``) gets five bursts of ``--length`` consecutive
samples, each moved by ±50 σ of the transducer noise (one sign per burst) and
re-quantised, at least ten samples apart, after the first 50 ms; the bursts' places come
from a generator of their own (seed 7). The observer runs live on both records (as in
``accuracy/ours.py``). Printed per record: the live RMSE with bursts over the clean
record's, the ±2σ coverage with bursts, and the largest force error within 20 samples of
a burst. Then the median and the largest ratio. It asserts nothing.
"""

from __future__ import annotations

import argparse
import statistics
import sys
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from accuracy import ours
from accuracy.cells import CELLS, OTHER_CELLS
from accuracy.records import build_records
from accuracy.transducer import quantise

N_BURSTS = 5
SIGMAS = 50.0
START_S = 0.05  # not scored, and no burst before it


def _with_bursts(r: object, length: int, rng: np.random.Generator) -> tuple[np.ndarray, list]:
    """The record's readings with five bursts, and where they start."""
    first = int(START_S / r.cell.dt_s)
    n = r.z_m.size
    while True:
        where = np.sort(rng.choice(np.arange(first, n - length), size=N_BURSTS, replace=False))
        if np.all(np.diff(where) > 10 + length):
            break
    z = r.z_m.copy()
    for w, sign in zip(where, rng.choice([-1.0, 1.0], size=N_BURSTS), strict=True):
        z[w : w + length] = quantise(
            z[w : w + length] + sign * SIGMAS * r.cell.noise_m, r.cell.resolution_m
        )
    return z, where.tolist()


def main() -> None:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--seed", type=int, default=2024)
    p.add_argument("--length", type=int, default=2, help="samples in a burst (default 2)")
    p.add_argument("--cells", choices=("tuned", "other", "all"), default="tuned")
    args = p.parse_args()
    cells = {"tuned": CELLS, "other": OTHER_CELLS, "all": CELLS + OTHER_CELLS}[args.cells]
    records, _ = build_records(args.seed, 3.0, variants=("clean",), cells=cells)
    rng = np.random.default_rng(7)
    ratios = []
    print(f"bursts of {args.length} samples at ±{SIGMAS:g} σ, {N_BURSTS} a record (invented data)")
    print(f"{'record':30s} {'RMSE ratio':>10s} {'±2σ':>6s} {'worst row near a burst':>24s}")
    for r in records:
        first = int(START_S / r.cell.dt_s)
        z, where = _with_bursts(r, args.length, rng)
        f_clean, _ = ours.live(r.cell, r.t_s, r.z_m)
        f, sigma = ours.live(r.cell, r.t_s, z)
        truth = r.force_true_n
        rmse_clean = float(np.sqrt(np.mean((f_clean[first:] - truth[first:]) ** 2)))
        err = np.abs(f - truth)
        ratio = float(np.sqrt(np.mean(err[first:] ** 2))) / rmse_clean
        cover = float(np.mean(err[first:] <= 2.0 * sigma[first:]))
        worst = max(float(err[w : w + 20].max()) for w in where)
        ratios.append(ratio)
        print(f"{r.label:30s} {ratio:10.2f} {cover:6.3f} {worst:22.3f} N")
    print(f"median ratio {statistics.median(ratios):.2f}, largest {max(ratios):.2f}")


if __name__ == "__main__":
    main()
