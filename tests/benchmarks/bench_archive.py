"""Benchmark: archive jobs (impact, audit --all) serially and on local Dask worker processes.

Makes an INVENTED archive with the simulated demo cell (default 200 runs of about 10 s at
2 kHz: a staircase of holds, one zero each), then times, per job, in the same run:

* **serial**: every run in this process, one after the other (the baseline);
* **Dask, warm**: the same tasks on a LocalCluster of one worker process per core that
  was started, and whose workers had loaded forcelens, before the clock started (the
  steady state of a long job, or of a cluster that is already up);
* **Dask, end to end**: what ``forcelens impact`` / ``audit --all`` pays on one machine:
  start the cluster, load forcelens in each worker, map, stop.

As a yardstick of what the machine itself allows at that moment, the same number of
pure-Python busy loops, each as long as a run's serial cost, is timed serially and on the
warm cluster in each repeat: a machine shared with other work, or whose cores are
hyperthreads, cannot give the jobs more than that speed-up.

Repeats are interleaved (serial, warm, end to end, yardstick, serial, ...) because these
machines are shared and noisy; it prints the median and the spread (min–max) of runs/s,
the speed-up over serial and the parallel efficiency (speed-up / workers), and checks
that Dask gave the same results as the serial loop. The archive is read once before
timing, so the figures are for runs in the page cache, and the observer's compiled
kernels are in numba's cache (a first run after the observer's source changed compiles
them in every worker, about 30 s). Not a test; run it by hand:

    python tests/benchmarks/bench_archive.py [--runs 200] [--seconds 10] [--repeats 3]
        [--workers N] [--job impact|audit|both] [--archive DIR]
"""

from __future__ import annotations

import argparse
import dataclasses
import os
import statistics
import sys
import tempfile
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

# One thread per process for the BLAS and OpenMP pools, as Dask gives its workers: with
# the default (a thread per core) a serial replay keeps a second core busy spinning for
# no gain in wall time, and the baseline would not be one core.
for _name in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_name, "1")
sys.path.insert(0, str(Path(__file__).resolve().parents[2]))  # the repository: tests.ui

from estimator.profile import profile_to_toml  # noqa: E402 (after the thread settings)
from tests.ui.invented_archive import PROFILE, record_run  # noqa: E402 (after the thread settings)
from ui.archive.impact import impact_task  # noqa: E402 (after the thread settings)
from ui.archive.parallel import Plan, local_cluster, map_on_client, run_tasks  # noqa: E402 (after the thread settings)
from ui.auditing import audit_run  # noqa: E402 (after the thread settings)


def make_archive(root: Path, runs: int, seconds: float) -> list[str]:
    """``runs`` invented runs of about ``seconds`` s each under ``root`` (kept if present)."""
    existing = sorted(p for p in root.glob("*/run.json")) if root.exists() else []
    if len(existing) >= runs:
        return [str(p.parent) for p in existing[:runs]]
    hold = seconds / 8.0
    loads = [0, 20, 50, 100, 60, 5, 80, 0]
    programme = "; ".join(f"hold {hold:.3f} {f}" for f in loads)
    t0 = time.perf_counter()
    folders = [str(p.parent) for p in existing]
    for i in range(len(existing), runs):
        folders.append(
            str(
                record_run(
                    root,
                    seed=1000 + i,
                    programme=programme,
                    zero_offset_m=1e-6,
                    tare_at_s=0.5 * hold,
                    block=2000,
                    note="invented benchmark run (simulated cell)",
                )
            )
        )
        if (i + 1) % 20 == 0:
            print(f"  made {i + 1}/{runs} runs", file=sys.stderr)
    print(f"archive: {runs} runs in {time.perf_counter() - t0:.1f} s under {root}")
    return folders


def _warm(_: int) -> int:
    """Load forcelens and its compiled kernels in a worker."""
    from estimator.profile import default_demo_profile
    from ui.pipeline import EstimationPipeline

    EstimationPipeline(default_demo_profile())
    return os.getpid()


def _start(workers: int) -> tuple[Any, Any]:
    from dask.distributed import Client

    cluster = local_cluster(workers)  # as the commands start theirs
    client = Client(cluster, set_as_default=False)
    pids = set(client.gather(client.map(_warm, range(4 * workers), pure=False)))
    if len(pids) < workers:  # pragma: no cover - a worker that took no warm-up task
        client.run(_warm, 0)
    return cluster, client


def _spin(n: int) -> int:
    """Busy pure-Python work: ``n`` loop turns (the yardstick task)."""
    s = 0
    for i in range(n):
        s += i * i % 7
    return s


def _turns_per_s() -> float:
    t0 = time.perf_counter()
    _spin(2_000_000)
    return 2_000_000 / (time.perf_counter() - t0)


def _same(a: list[Any], b: list[Any]) -> bool:
    """True when both lists hold the same results; else say where they first differ."""
    for i, (x, y) in enumerate(zip(a, b, strict=True)):
        if repr(x.value) != repr(y.value):
            print(
                f"  results differ from run {i} on: {x.problem or x.fault or 'a value'} / "
                f"{y.problem or y.fault or 'a value'}",
                file=sys.stderr,
            )
            return False
    return True


def _rate(n: int, seconds: float) -> float:
    return n / seconds


def bench(name: str, task: Callable[[Any], Any], folders: list[str], args: Any) -> dict:
    """Interleaved repeats of serial, Dask warm and Dask end to end; runs/s of each."""
    n = len(folders)
    rates: dict[str, list[float]] = {"serial": [], "warm": [], "end to end": []}
    yard: dict[str, list[float]] = {"serial": [], "warm": []}
    t0 = time.perf_counter()
    reference = run_tasks(task, folders, Plan("serial", 1))  # also fills the page cache
    per_run_s = (time.perf_counter() - t0) / n
    spin = [round(per_run_s * _turns_per_s())] * n  # yardstick tasks of a run's serial cost
    bad = sum(not o.ok for o in reference)
    same = True
    for r in range(args.repeats):
        t0 = time.perf_counter()
        serial = run_tasks(task, folders, Plan("serial", 1))
        rates["serial"].append(_rate(n, time.perf_counter() - t0))
        cluster, client = _start(args.workers)
        try:
            t0 = time.perf_counter()
            warm = map_on_client(client, task, folders, lambda: None)
            rates["warm"].append(_rate(n, time.perf_counter() - t0))
            t0 = time.perf_counter()
            client.gather(client.map(_spin, spin, pure=False))
            yard["warm"].append(_rate(n, time.perf_counter() - t0))
            t0 = time.perf_counter()
            for s in spin:
                _spin(s)
            yard["serial"].append(_rate(n, time.perf_counter() - t0))
        finally:
            client.close()
            cluster.close()
        t0 = time.perf_counter()
        end = run_tasks(task, folders, Plan("local", args.workers))
        rates["end to end"].append(_rate(n, time.perf_counter() - t0))
        same = same and _same(serial, reference) and _same(warm, serial) and _same(end, serial)
        print(
            f"  {name} repeat {r + 1}: serial {rates['serial'][-1]:.2f}, Dask warm "
            f"{rates['warm'][-1]:.2f}, end to end {rates['end to end'][-1]:.2f} runs/s",
            file=sys.stderr,
        )
    return {"rates": rates, "yardstick": yard, "same": same, "failed": bad}


def report(name: str, result: dict, workers: int, runs: int, samples: int) -> None:
    rates = result["rates"]
    serial = statistics.median(rates["serial"])
    print(f"\n{name}: {runs} runs of {samples} samples, {workers} worker processes")
    print(f"{'':<22}{'runs/s median':>14}{'min–max':>16}{'speed-up':>10}{'efficiency':>12}")
    for key, values in rates.items():
        med = statistics.median(values)
        up = med / serial
        eff = "" if key == "serial" else f"{up / workers:.2f}"
        spread = f"{min(values):.2f}–{max(values):.2f}"
        print(f"{key:<22}{med:>14.2f}{spread:>16}{up:>10.2f}{eff:>12}")
    yard = result["yardstick"]
    ups = [w / s for w, s in zip(yard["warm"], yard["serial"], strict=True)]
    print(
        f"yardstick (busy loops of the same length, serial vs the warm cluster): speed-up "
        f"{statistics.median(ups):.2f} ({min(ups):.2f}–{max(ups):.2f}), efficiency "
        f"{statistics.median(ups) / workers:.2f}"
    )
    print(f"serial cost per run: {1e3 / serial:.1f} ms (median)")
    print(
        "results of Dask identical to the serial loop: "
        + ("yes" if result["same"] else "NO")
        + (f"; {result['failed']} run(s) failed" if result["failed"] else "")
    )


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--runs", type=int, default=200)
    parser.add_argument("--seconds", type=float, default=10.0, help="length of a run, s")
    parser.add_argument("--repeats", type=int, default=3)
    parser.add_argument("--workers", type=int, default=len(os.sched_getaffinity(0)))
    parser.add_argument("--job", choices=("impact", "audit", "both"), default="both")
    parser.add_argument("--archive", help="keep (or reuse) the invented archive here")
    args = parser.parse_args()
    with tempfile.TemporaryDirectory(prefix="forcelens-bench-") as tmp:
        root = Path(args.archive) if args.archive else Path(tmp) / "runs"
        folders = make_archive(root, args.runs, args.seconds)
        samples = round(args.seconds / 8.0 * 8 * PROFILE.acquisition.sample_rate_hz)
        corrected = PROFILE.with_updates(
            plant=dataclasses.replace(
                PROFILE.plant, stiffness_n_per_m=PROFILE.plant.stiffness_n_per_m * 1.005
            )
        )
        jobs: list[tuple[str, Callable[[Any], Any]]] = []
        if args.job in ("impact", "both"):
            jobs.append(("impact", impact_task(profile_to_toml(corrected), None)))
        if args.job in ("audit", "both"):
            jobs.append(("audit --all", audit_run))
        print(f"{len(os.sched_getaffinity(0))} cores; {args.repeats} repeats, interleaved")
        for name, task in jobs:
            report(name, bench(name, task, folders, args), args.workers, len(folders), samples)
    return 0


if __name__ == "__main__":
    sys.exit(main())
