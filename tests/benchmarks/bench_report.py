"""Time and peak memory of ``forcelens report`` on a big simulated run (invented data).

The run: the simulated demo cell at 2 kHz under a staircase of load steps, recorded
through the same pipeline as ``forcelens live --record`` (600 000 samples by default).
Each measurement runs the command in a fresh process and reads its peak resident memory
from the OS (``resource.getrusage(RUSAGE_CHILDREN)``, the maximum over children so far, so
the commands are run from the smallest expected to the largest). The baseline, measured
in the same run on the same machine, is ``forcelens replay RUN`` (the replay every report
needs); the script prints medians, spreads and the report's ratio to the baseline. It
asserts nothing: these machines are shared and noisy.

    .venv/bin/python tests/benchmarks/bench_report.py [--samples N] [--repeat R]
        [--source DIR]   # another checkout's tree, e.g. a git worktree of an older commit
"""

from __future__ import annotations

import argparse
import math
import os
import resource
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]


def make_run(root: Path, samples: int) -> Path:
    """Record ``samples`` samples of a staircase (a step every 0.5 s) under ``root``."""
    sys.path.insert(0, str(ROOT))
    from daq.programme import parse_programme
    from daq.samples import empty_block
    from estimator.profile import default_demo_profile
    from ui.pipeline import EstimationPipeline
    from ui.recording import open_recording
    from ui.wiring import scaling_for, simulated_cell_for

    profile = default_demo_profile()
    rate = profile.acquisition.sample_rate_hz
    holds = max(2, math.ceil(samples / rate / 0.5))
    levels = [0, 20, 50, 80, 40, 10]
    spec = "; ".join(f"hold 0.5 {levels[i % len(levels)]}" for i in range(holds))
    run = simulated_cell_for(profile, seed=11).generate(parse_programme(spec))
    n = min(samples, len(run))
    block = empty_block(n)
    block["seq"] = run.seq[:n]
    block["device_time_s"] = run.device_time_us[:n] * 1e-6
    block["host_time_s"] = math.nan
    block["counts"] = run.counts[:n]
    block["displacement_m"] = scaling_for(profile).to_metres(run.counts[:n])
    rec = open_recording(root, profile, note="benchmark run (invented data)")
    pipe = EstimationPipeline(profile, recorder=rec.writer)
    for i in range(0, n, 4096):
        pipe.process(block[i : i + 4096])
    rec.close("complete", {"samples": int(n)})
    return rec.folder


def measure(argv: list[str], source: Path) -> tuple[float, float]:
    """(wall time s, peak RSS MB so far over children) of ``forcelens argv``."""
    env = dict(os.environ, PYTHONPATH=str(source), QT_QPA_PLATFORM="offscreen")
    start = time.perf_counter()
    done = subprocess.run(
        [sys.executable, "-m", "ui.cli", *argv],
        cwd=source,
        env=env,
        stdout=subprocess.DEVNULL,
        stderr=subprocess.PIPE,
        text=True,
        check=False,
    )
    wall = time.perf_counter() - start
    if done.returncode != 0:
        raise SystemExit(f"forcelens {' '.join(argv)} failed: {done.stderr.strip()}")
    peak_kb = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss
    return wall, peak_kb / 1024.0


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--samples", type=int, default=600_000)
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--source", type=Path, default=ROOT, help="tree to run forcelens from")
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        folder = make_run(Path(tmp) / "runs", args.samples)
        print(f"run of {args.samples} samples (invented data); forcelens from {args.source}")
        rows = {}
        for name, argv in (
            ("replay (baseline)", ["replay", str(folder)]),
            ("report", ["report", str(folder), "--out", str(Path(tmp) / "r"), "--force"]),
        ):
            walls, peaks = [], []
            for _ in range(args.repeat):
                wall, peak = measure(argv, args.source.resolve())
                walls.append(wall)
                peaks.append(peak)
            rows[name] = (statistics.median(walls), max(walls) - min(walls), max(peaks))
            med, spread, peak = rows[name]
            print(f"{name:18s} median {med:6.2f} s (spread {spread:5.2f} s), peak {peak:6.0f} MB")
        base, rep = rows["replay (baseline)"], rows["report"]
        print(
            f"report / replay: time × {rep[0] / base[0]:.2f}, peak memory × {rep[2] / base[2]:.2f}"
        )


if __name__ == "__main__":
    main()
