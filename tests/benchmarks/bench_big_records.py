"""Big records (issue 12): CSV read rate, end-to-end replay and export time, peak memory.

Invented data: a synthetic displacement signal of the demo cell at its 2 kHz (a staircase
of loads 0, 20, 50, 80, 40, 10 N held 0.5 s each, converted by the cell's stiffness and
quantised by its ADC, plus white noise of the profile's size), 10 million samples by
default, written as a forcelens CSV (``time_s [s],displacement_m [m]``) and recorded as a
run through the same pipeline as ``forcelens live --record``.

Every measurement runs in a fresh process; its peak resident memory is the high-water
mark of that process's own memory (``VmHWM`` of ``/proc/self/status``, read by the child
as it ends; memory-mapped file pages it touched count too). Not ``ru_maxrss`` from
``wait4``/``RUSAGE_CHILDREN``: on Linux a child's ``ru_maxrss`` also counts the parent's
resident memory at the fork (measured: a child that only runs ``pass`` reports 484 MB
when forked from a process holding 480 MB), and this script holds the invented record.
Where ``/proc`` is missing the child's ``ru_maxrss`` stands in. Each is repeated
(``--repeat``, 3 by default); the script prints the median and the spread (max - min) of
the wall times and the largest peak. Baselines measured in the same run, on the same
file, print beside them as ratios:

* the CSV reader (`daq.csvfile.iter_displacement_csv`, in chunks; and
  `read_displacement_csv`, the whole arrays) against ``numpy.loadtxt`` on the whole file
  and against a plain read of its bytes (the I/O floor);
* ``forcelens replay big.csv --out est.csv``, ``forcelens replay RUN --out est.csv`` and
  ``forcelens export RUN`` (CSV, ``--format mat``, ``--format hdf5``), (``--only
  report``) ``forcelens report RUN`` and ``forcelens audit RUN`` (against that report),
  and (``--only smooth``) ``forcelens replay big.csv --smooth --out est.csv``, against the
  observer alone on the same samples in memory
  (``ForceObserver.process``, no file read or written): the pipeline's cost beyond the
  observer, which is being sped up separately.

It asserts nothing: these machines are shared and noisy.

    .venv/bin/python tests/benchmarks/bench_big_records.py [--rows N] [--repeat R]
        [--only reader|pipeline|export|report|smooth] [--source DIR] [--tmp DIR]

``--source`` runs forcelens from another tree (``git archive HEAD | tar -x -C DIR``: a
snapshot, so that edits in the working tree during the run change nothing).
"""

from __future__ import annotations

import argparse
import math
import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
_BLOCK = 16_384  # samples per observer call, as replay
_LEVELS_N = (0.0, 20.0, 50.0, 80.0, 40.0, 10.0)


def _signal(profile: object, start: int, n: int) -> tuple[object, object, object]:
    """(time s, counts, displacement m) of samples ``start`` to ``start + n`` (invented)."""
    import numpy as np

    from ui.wiring import scaling_for

    rate = profile.acquisition.sample_rate_hz
    i = np.arange(start, start + n)
    t = i / rate
    level = np.asarray(_LEVELS_N)[(t // 0.5).astype(np.int64) % len(_LEVELS_N)]
    noise = np.random.default_rng(start).normal(0.0, profile.transducer.noise_m, n)
    scaling = scaling_for(profile)
    counts = scaling.to_counts(level / profile.plant.stiffness_n_per_m + noise)
    return t, counts, scaling.to_metres(counts)


def make_csv(path: Path, rows: int) -> None:
    """The invented record as a forcelens CSV, written a block at a time."""
    from daq.csv_dialect import CsvTableWriter
    from estimator.profile import default_demo_profile

    profile = default_demo_profile()
    with CsvTableWriter(
        path,
        title="invented record (synthetic signal of the demo cell, benchmark)",
        columns=[("time_s", "s"), ("displacement_m", "m")],
    ) as out:
        for start in range(0, rows, _BLOCK):
            t, _, x = _signal(profile, start, min(_BLOCK, rows - start))
            out.write([t, x])


def make_run(root: Path, rows: int) -> Path:
    """The invented record recorded as a run (samples and live estimates)."""
    import numpy as np

    from daq.samples import empty_block
    from estimator.profile import default_demo_profile
    from ui.pipeline import EstimationPipeline
    from ui.recording import open_recording

    profile = default_demo_profile()
    rec = open_recording(root, profile, note="benchmark run (invented data)")
    pipe = EstimationPipeline(profile, recorder=rec.writer)
    for start in range(0, rows, _BLOCK):
        n = min(_BLOCK, rows - start)
        t, counts, x = _signal(profile, start, n)
        block = empty_block(n)
        block["seq"] = np.arange(start, start + n)
        block["device_time_s"] = t
        block["host_time_s"] = math.nan
        block["counts"] = counts
        block["displacement_m"] = x
        pipe.process(block)
    rec.close("complete", {"samples": rows})
    return rec.folder


# Code run in a fresh process for each measurement (argv[1] = the file or run).
_READ_CHUNKS = """
import sys
from daq.csvfile import iter_displacement_csv
n = sum(c.time_s.size for c in iter_displacement_csv(sys.argv[1]))
"""
_READ_WHOLE = """
import sys
from daq.csvfile import read_displacement_csv
t, x = read_displacement_csv(sys.argv[1])
"""
_LOADTXT = """
import sys, numpy as np
a = np.loadtxt(sys.argv[1], delimiter=",", comments="#", skiprows=2, encoding="utf-8")
"""
_PLAIN_READ = """
import sys
with open(sys.argv[1], "rb") as f:
    while f.read(1 << 20):
        pass
"""
_OBSERVER = """
import sys, numpy as np
from daq.runs import read_run
from estimator.observer import ForceObserver
from estimator.profile import default_demo_profile
from daq.runs.blocks import iter_stream_blocks
run = read_run(sys.argv[1], event_kinds=())  # time and displacement into memory (16 B a sample)
t = np.empty(run.samples.shape[0]); x = np.empty_like(t); i = 0
for b in iter_stream_blocks(run, "samples"):
    t[i : i + b.size] = b["device_time_s"]; x[i : i + b.size] = b["displacement_m"]; i += b.size
obs = ForceObserver.from_profile(default_demo_profile()); obs.warm_up()
for i in range(0, t.size, 16_384):
    obs.process(t[i : i + 16_384], x[i : i + 16_384])
"""


_WARM_UP = """
import numpy as np
from estimator.observer import ForceObserver
from estimator.profile import default_demo_profile
from estimator.smoother import smooth_record
observer = ForceObserver.from_profile(default_demo_profile())
observer.warm_up()
smooth_record(observer, np.arange(64) * observer.dt_s, np.zeros(64))  # the smoother's kernels
"""


# Runs the payload (``-m module`` or ``-c code``) in this process, then reports its peak.
_WRAP = """
import resource, runpy, sys
kind, target = sys.argv[1], sys.argv[2]
sys.argv = sys.argv[2:]
try:
    if kind == "-m":
        runpy.run_module(target, run_name="__main__", alter_sys=True)
    else:
        exec(compile(target, "<benchmark>", "exec"), {"__name__": "__main__"})
finally:
    try:
        with open("/proc/self/status") as f:
            kb = int(f.read().split("VmHWM:")[1].split()[0])
    except OSError:
        kb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    print(f"benchmark-peak-kb {kb}", file=sys.stderr)
"""


def measure(argv: list[str], source: Path) -> tuple[float, float]:
    """(wall time s, peak resident memory MB) of ``python argv`` (``-m mod ...`` or
    ``-c code ...``) in a fresh process."""
    env = dict(os.environ, PYTHONPATH=str(source), QT_QPA_PLATFORM="offscreen")
    start = time.perf_counter()
    done = subprocess.run(
        [sys.executable, "-c", _WRAP, *argv],
        cwd=source,
        env=env,
        stdout=subprocess.DEVNULL,
        stderr=subprocess.PIPE,
        text=True,
        check=False,
    )
    wall = time.perf_counter() - start
    lines = done.stderr.strip().splitlines()
    if done.returncode != 0 or not lines or not lines[-1].startswith("benchmark-peak-kb"):
        raise SystemExit(f"{' '.join(argv[:2])} failed: {done.stderr.strip()[-2000:]}")
    return wall, int(lines[-1].split()[1]) / 1024.0


def repeated(argv: list[str], source: Path, repeat: int) -> tuple[float, float, float]:
    """(median s, spread s, largest peak MB) over ``repeat`` runs."""
    walls, peaks = [], []
    for _ in range(repeat):
        wall, peak = measure(argv, source)
        walls.append(wall)
        peaks.append(peak)
    return statistics.median(walls), max(walls) - min(walls), max(peaks)


def show(name: str, row: tuple[float, float, float], rows: int) -> None:
    med, spread, peak = row
    print(
        f"  {name:34s} median {med:7.2f} s (spread {spread:5.2f} s)  "
        f"{rows / med / 1e6:5.2f} M rows/s  peak {peak:6.0f} MB"
    )


def ratio(name: str, a: tuple[float, float, float], b: tuple[float, float, float]) -> None:
    print(f"  {name:34s} time × {a[0] / b[0]:.2f}, peak memory × {a[2] / b[2]:.2f}")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--rows", type=int, default=10_000_000)
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--only", choices=("reader", "pipeline", "export", "report", "smooth"))
    parser.add_argument("--source", type=Path, default=ROOT, help="tree to run forcelens from")
    parser.add_argument("--tmp", type=Path, help="folder for the invented files (default: temp)")
    args = parser.parse_args()
    source, n, r = args.source.resolve(), args.rows, args.repeat
    sys.path.insert(0, str(source))
    with tempfile.TemporaryDirectory(dir=args.tmp) as tmp_name:
        tmp = Path(tmp_name)
        big = tmp / "big.csv"
        if args.only != "report":  # the report needs the run only
            t0 = time.perf_counter()
            make_csv(big, n)
            mb = big.stat().st_size / 2**20
            print(f"invented CSV: {n} rows, {mb:.0f} MB, made in {time.perf_counter() - t0:.0f} s")
        print(f"forcelens from {source}; {r} repeats; python {sys.version.split()[0]}")
        # Numba compiles the observer's and the smoother's kernels once and caches them
        # beside the source; a process that compiles holds ~200 MB more (the smoothed
        # replay of 10 M rows: 347 MB compiling its backward pass, 263 MB from the cache).
        # Warm the cache first (not measured).
        measure(["-c", _WARM_UP], source)
        if args.only not in ("pipeline", "export", "report", "smooth"):
            print("CSV reader:")
            got = {}
            for name, code in (
                ("plain read of the bytes (floor)", _PLAIN_READ),
                ("numpy.loadtxt, whole file", _LOADTXT),
                ("read_displacement_csv (whole)", _READ_WHOLE),
                ("iter_displacement_csv (chunks)", _READ_CHUNKS),
            ):
                got[name] = repeated(["-c", code, str(big)], source, r)
                show(name, got[name], n)
            base = got["numpy.loadtxt, whole file"]
            ratio("chunks / numpy.loadtxt", got["iter_displacement_csv (chunks)"], base)
            ratio("whole / numpy.loadtxt", got["read_displacement_csv (whole)"], base)
            ratio("chunks / plain read", got["iter_displacement_csv (chunks)"],
                  got["plain read of the bytes (floor)"])  # fmt: skip
        if args.only == "reader":
            return
        t0 = time.perf_counter()
        folder = make_run(tmp / "runs", n)
        print(f"invented run: {n} samples, recorded in {time.perf_counter() - t0:.0f} s")
        profile = tmp / "demo.toml"
        from estimator.profile import default_demo_profile, save_profile

        save_profile(default_demo_profile(), profile)
        out = tmp / "est.csv"
        cli = ["-m", "ui.cli"]
        print("pipeline:")
        got = {}
        for name, argv in (
            ("observer alone, in memory (base)", ["-c", _OBSERVER, str(folder)]),
            ("replay big.csv --out est.csv",
             [*cli, "replay", str(big), "--profile", str(profile), "--out", str(out),
              "--force"]),
            ("replay RUN --out est.csv",
             [*cli, "replay", str(folder), "--out", str(out), "--force"]),
            ("smooth: replay big.csv --smooth --out est.csv",
             [*cli, "replay", str(big), "--profile", str(profile), "--smooth", "--out",
              str(out), "--force"]),
            ("export RUN (samples, CSV)",
             [*cli, "export", str(folder), "--out", str(out), "--force"]),
            ("export RUN --format mat",
             [*cli, "export", str(folder), "--out", str(tmp / "run.mat"), "--force"]),
            ("export RUN --format hdf5",
             [*cli, "export", str(folder), "--out", str(tmp / "run.h5"), "--force"]),
            ("report RUN",
             [*cli, "report", str(folder), "--out", str(tmp / "report"), "--force"]),
            ("audit RUN (against the report)",
             [*cli, "audit", str(folder), "--report", str(tmp / "report")]),
        ):  # fmt: skip
            wanted = {
                None: ("observer", "replay", "export"),
                "pipeline": ("observer", "replay", "export"),
                "export": ("observer", "export"),
                "report": ("observer", "report", "audit"),
                "smooth": ("observer", "smooth"),
            }[args.only]
            if not name.startswith(wanted):
                continue
            got[name] = repeated(argv, source, r)
            show(name, got[name], n)
        base = got["observer alone, in memory (base)"]
        for name in list(got)[1:]:
            ratio(f"{name} / observer", got[name], base)


if __name__ == "__main__":
    main()
