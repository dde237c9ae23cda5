"""Benchmark: accuracy of the force observer against fitted reference filters and k·x.

Run it by hand (it is not a test and pytest does not collect it):

    .venv/bin/python tests/benchmarks/bench_accuracy.py           # full run, a few minutes
    .venv/bin/python tests/benchmarks/bench_accuracy.py --quick   # fewer, shorter records, < 1 min
    .venv/bin/python tests/benchmarks/bench_accuracy.py --only staircase/ringing --only pulse
    .venv/bin/python tests/benchmarks/bench_accuracy.py --seed 7 --csv out/accuracy.csv

What it does. Three invented cells (stiff and well damped, lightly damped,
overdamped; ``accuracy/cells.py``) each carry five load shapes (staircase, trapezoid
with a slow ramp, sine on an offset, half-sine pulses, band-limited random load;
``accuracy/loads.py``) in three variants (clean; 0.5 % of rows dropped; five ±50 σ
spikes): 45 records of invented data, each with its own seed. The true displacement
comes from ``scipy.integrate.solve_ivp`` (DOP853, rtol 1e-10) restarted at every load
breakpoint; readings add white noise and are quantised to the ADC step.

Every record is estimated by:

* **ours**: the project's observer, live and smoothed, through ``accuracy/ours.py``
  (given the true plant, noise, resolution and rated range, nothing else);
* **RW fit**: a Kalman filter on ``[x, v, F]`` with the force a random walk, and its
  Rauch–Tung–Striebel smoother, with the intensity q fitted per record by maximum
  innovation likelihood on the readings alone (``accuracy/yardsticks.py``);
* **IRW fit**: the same on ``[x, v, F, Ḟ]`` with Ḟ a random walk (force an integrated
  random walk);
* **k·x**: stiffness × reading.

Scores per record, from the first row (``SCORED_FROM_S``): RMSE of force (N), ±2σ
coverage (share of samples with ``|F̂ − F| ≤ 2σ``), and for staircase and pulse
records the 2 % settling time after each step or pulse end; for staircases, how many of
the rows at each step are covered (live: the first, the second, the third to tenth row at
or after the step; smoothed: from three rows before it to seven after). The summary checks
the observer against targets (PASS/FAIL), pools the step rows' coverage (information), and
gives its live throughput against the RW filter's, measured in the same run.

Sources: R. E. Kalman (1960), "A new approach to linear filtering and prediction
problems", J. Basic Eng. 82(1); H. E. Rauch, F. Tung, C. T. Striebel (1965),
"Maximum likelihood estimates of linear dynamic systems", AIAA J. 3(8); C. F. Van Loan
(1978), "Computing integrals involving the matrix exponential", IEEE Trans. Automatic
Control 23(3); A. C. Harvey (1989), "Forecasting, Structural Time Series Models and the
Kalman Filter" (likelihood by prediction-error decomposition; cited from memory);
E. Hairer, S. P. Nørsett, G. Wanner, "Solving Ordinary Differential Equations I"
(the DOP853 method SciPy implements).
"""

from __future__ import annotations

import os

# One BLAS thread, set before NumPy loads: all the linear algebra here is on matrices of
# at most 8 × 8, where OpenBLAS's thread pool only adds noise to the timings (measured:
# a few times slower, erratically, on a 2-core machine). Set the variable to override.
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

import argparse
import csv
import importlib.util
import math
import statistics
import sys
import time
from collections.abc import Sequence
from pathlib import Path

from accuracy import ours
from accuracy.cells import CELLS, OTHER_CELLS, Cell, random_cells
from accuracy.loads import SHAPES, SMOOTH_SHAPES
from accuracy.models import integrated_random_walk_model, random_walk_model
from accuracy.records import SCORED_FROM_S, Record, build_records, wanted
from accuracy.scoring import coverage, coverage_near_steps, median_z, rmse, settling_times
from accuracy.variants import VARIANTS
from accuracy.yardsticks import (
    GRID_STEP_DECADES,
    describe_fit,
    filter_at,
    run_fitted,
    static_conversion,
)

FULL_DURATION_S = 3.0
QUICK_DURATION_S = 1.0
QUICK_VARIANTS = ("clean", "spikes")
SETTLING_BAND = 0.02

# Targets of the summary.
LIVE_SHARE, LIVE_WORST = 0.80, 1.25
LIVE_VS_IRW = 1.15
SMOOTH_FACTOR, SMOOTH_SHARE = 1.10, 0.80
COVER_LOW, COVER_HIGH = 0.90, 0.99
SPIKE_FACTOR, DROP_FACTOR = 1.20, 1.05

#: Rows around each step of a staircase whose ±2σ coverage is counted (information, not a
#: target): the live rows from the first sample at or after the step, the smoothed ones
#: from three before it (the smoother sees the step coming).
NEAR_STEP_ROWS = (
    ("live_row1", "live row 1", "live", range(0, 1)),
    ("live_row2", "row 2", "live", range(1, 2)),
    ("live_rows3_10", "rows 3–10", "live", range(2, 10)),
    ("smoothed_rows_m3_p7", "smoothed rows −3…+7", "smoothed", range(-3, 8)),
)

Row = dict[str, object]


def fmt_settle(values: Sequence[float]) -> str:
    """Settling times (s) as ms, ``never`` for inf, ``-`` for nan, space separated."""
    parts = []
    for v in values:
        if math.isinf(v):
            parts.append("never")
        elif math.isnan(v):
            parts.append("-")
        else:
            parts.append(f"{v * 1e3:.1f}")
    return " ".join(parts)


def score_record(record: Record, step_decades: float, label: str) -> tuple[Row, dict[str, float]]:
    """Run every estimator on ``record``; return its table row (named ``label``) and the
    seconds spent."""
    cell, t, z, f = record.cell, record.t_s, record.z_m, record.force_true_n
    mask = record.scored
    spent: dict[str, float] = {}

    start = time.perf_counter()
    rw = run_fitted(random_walk_model(cell), cell, t, z, step_decades)
    irw = run_fitted(integrated_random_walk_model(cell), cell, t, z, step_decades)
    spent["yardsticks"] = time.perf_counter() - start

    start = time.perf_counter()
    ours_live, ours_live_u = ours.live(cell, t, z)
    spent["ours_live"] = time.perf_counter() - start
    start = time.perf_counter()
    ours_sm, ours_sm_u = ours.smoothed(cell, t, z)
    spent["ours_smoothed"] = time.perf_counter() - start
    kx = static_conversion(cell, z)

    row: Row = {
        "record": label,
        "cell": cell.name,
        "shape": record.load.shape,
        "variant": record.variant,
        "seed": record.seed,
        "n": t.size,
        "n_scored": int(mask.sum()),
        "q_rw_n2_per_s": rw.fit.q,
        "q_rw_at_edge": rw.fit.at_edge,
        "q_irw_n2_per_s3": irw.fit.q,
        "q_irw_at_edge": irw.fit.at_edge,
        "rmse_ours_live_n": rmse(ours_live, f, mask),
        "rmse_ours_smoothed_n": rmse(ours_sm, f, mask),
        "rmse_rw_live_n": rmse(rw.live.force_n, f, mask),
        "rmse_rw_smoothed_n": rmse(rw.smoothed.force_n, f, mask),
        "rmse_irw_live_n": rmse(irw.live.force_n, f, mask),
        "rmse_irw_smoothed_n": rmse(irw.smoothed.force_n, f, mask),
        "rmse_kx_n": rmse(kx, f, mask),
        "cover_ours_live": coverage(ours_live, ours_live_u, f, mask),
        "cover_ours_smoothed": coverage(ours_sm, ours_sm_u, f, mask),
        "medz_ours_live": median_z(ours_live, ours_live_u, f, mask),
        "medz_ours_smoothed": median_z(ours_sm, ours_sm_u, f, mask),
        "cover_rw_live": coverage(rw.live.force_n, rw.live.sigma_n, f, mask),
        "cover_rw_smoothed": coverage(rw.smoothed.force_n, rw.smoothed.sigma_n, f, mask),
        "cover_irw_live": coverage(irw.live.force_n, irw.live.sigma_n, f, mask),
        "cover_irw_smoothed": coverage(irw.smoothed.force_n, irw.smoothed.sigma_n, f, mask),
        "settle_ours_live_ms": "",
        "settle_kx_ms": "",
        "fit_rw": describe_fit(rw),
        "fit_irw": describe_fit(irw),
    }
    if record.load.events:
        events = record.load.events
        row["settle_ours_live_ms"] = fmt_settle(settling_times(t, ours_live, events))
        row["settle_kx_ms"] = fmt_settle(settling_times(t, kx, events))
    # ±2σ coverage on the rows right after (and, smoothed, around) each step, counted
    steps = [e.time_s for e in record.load.events] if record.load.shape == "staircase" else []
    for name, _, kind, offsets in NEAR_STEP_ROWS:
        est, sig = (ours_live, ours_live_u) if kind == "live" else (ours_sm, ours_sm_u)
        covered, n = coverage_near_steps(t, est, sig, f, steps, offsets) if steps else (0, 0)
        row[f"near_step_{name}_covered"] = covered
        row[f"near_step_{name}_rows"] = n
    return row, spent


def print_record(row: Row, record: Record) -> None:
    """The per-record table."""
    print(
        f"\n{row['record']}  (seed {row['seed']}; {row['n']} samples, "
        f"{row['n_scored']} scored from {SCORED_FROM_S * 1e3:.0f} ms)"
    )
    print(f"  load: {record.load.note}")
    print(f"  fitted on the readings: {row['fit_rw']};  {row['fit_irw']}")
    print(f"  {'':10}{'RMSE live':>14}{'RMSE smoothed':>16}{'±2σ live':>11}{'±2σ smoothed':>15}")
    for name, key in (("ours", "ours"), ("RW fit", "rw"), ("IRW fit", "irw")):
        live, smooth = row[f"rmse_{key}_live_n"], row[f"rmse_{key}_smoothed_n"]
        print(
            f"  {name:10}{live:>12.4g} N{smooth:>14.4g} N"
            f"{row[f'cover_{key}_live']:>11.3f}{row[f'cover_{key}_smoothed']:>15.3f}"
        )
    kx = row["rmse_kx_n"]  # static: one value serves live and smoothed
    print(f"  {'k·x':10}{kx:>12.4g} N{kx:>14.4g} N{'-':>11}{'-':>15}   (static, no σ)")
    if row["settle_ours_live_ms"]:
        print(f"  2 % settling after each change, ms:  ours live {row['settle_ours_live_ms']}")
        print(f"  {'':37}k·x       {row['settle_kx_ms']}")


def verdict(ok: bool | None) -> str:
    return "n/a " if ok is None else ("PASS" if ok else "FAIL")


def summary(rows: list[Row]) -> None:
    """Print the targets, the measured figures and PASS/FAIL."""
    print(
        f"\n=== Summary: {len(rows)} records of invented data, scored from "
        f"{SCORED_FROM_S * 1e3:.0f} ms ==="
    )
    # 1. Live RMSE against the better of (RW fit, k·x).
    r1 = [
        (
            float(r["rmse_ours_live_n"]) / min(float(r["rmse_rw_live_n"]), float(r["rmse_kx_n"])),
            str(r["record"]),
        )
        for r in rows
    ]
    share = sum(v <= 1.0 for v, _ in r1) / len(r1)
    worst, where = max(r1)
    ok = share >= LIVE_SHARE and worst <= LIVE_WORST
    print(
        f"[{verdict(ok)}] live RMSE ≤ better of (RW fit, k·x) on ≥ {LIVE_SHARE:.0%} of records, "
        f"never above {LIVE_WORST}×: {share:.0%} of records; worst ratio {worst:.3g} ({where})"
    )
    # 2. Smooth loads: live RMSE against the IRW fit.
    r2 = [
        (float(r["rmse_ours_live_n"]) / float(r["rmse_irw_live_n"]), str(r["record"]))
        for r in rows
        if r["shape"] in SMOOTH_SHAPES
    ]
    if r2:
        worst, where = max(r2)
        print(
            f"[{verdict(worst <= LIVE_VS_IRW)}] smooth loads ({', '.join(sorted(SMOOTH_SHAPES))}):"
            f" live RMSE ≤ {LIVE_VS_IRW}× IRW fit: worst ratio {worst:.3g} ({where})"
        )
    else:
        print(f"[{verdict(None)}] smooth loads: no such record selected")
    # 3. Smoothed RMSE against the better fitted smoother.
    r3 = [
        (
            float(r["rmse_ours_smoothed_n"])
            / min(float(r["rmse_rw_smoothed_n"]), float(r["rmse_irw_smoothed_n"])),
            str(r["record"]),
        )
        for r in rows
    ]
    share = sum(v <= SMOOTH_FACTOR for v, _ in r3) / len(r3)
    worst, where = max(r3)
    print(
        f"[{verdict(share >= SMOOTH_SHARE)}] smoothed RMSE ≤ {SMOOTH_FACTOR}× better fitted "
        f"smoother on ≥ {SMOOTH_SHARE:.0%} of records: {share:.0%} of records; "
        f"worst ratio {worst:.3g} ({where})"
    )
    # 4. Coverage.
    covers = [
        (float(r[f"cover_ours_{kind}"]), f"{r['record']} {kind}")
        for r in rows
        for kind in ("live", "smoothed")
    ]
    outside = [(v, w) for v, w in covers if not COVER_LOW <= v <= COVER_HIGH]
    print(
        f"[{verdict(not outside)}] ±2σ coverage in {COVER_LOW:.2f}–{COVER_HIGH:.2f} on every "
        f"record, live and smoothed: min {min(covers)[0]:.3f}, max {max(covers)[0]:.3f}; "
        f"{len(outside)} of {len(covers)} outside"
    )
    for v, w in sorted(outside):
        print(f"         outside: {w:<36} {v:.3f}")
    # Calibration of σ per load shape (information, not a target): the median of |e|/σ
    # over the shape's records, 0.674 when σ is the error's standard deviation.
    parts = []
    for shape in dict.fromkeys(str(r["shape"]) for r in rows):
        of = [r for r in rows if r["shape"] == shape]
        live = statistics.median(float(r["medz_ours_live"]) for r in of)
        smooth = statistics.median(float(r["medz_ours_smoothed"]) for r in of)
        parts.append(f"{shape} {live:.2f}/{smooth:.2f}")
    print(
        "[info] median |error|/σ by shape, live/smoothed (0.67 when σ is the error's "
        "standard deviation; lower: σ too large): " + ", ".join(parts)
    )
    # Coverage right after the steps (information): pooled over the staircases' steps.
    parts = []
    for name, label, _, _ in NEAR_STEP_ROWS:
        covered = sum(int(r[f"near_step_{name}_covered"]) for r in rows)
        n = sum(int(r[f"near_step_{name}_rows"]) for r in rows)
        parts.append(f"{label} {covered / n:.2f}" if n else f"{label} -")
    print(
        "[info] ±2σ coverage of the rows at each step of the staircases (row 1: the first "
        "sample at or after it, which may not show it yet): " + ", ".join(parts)
    )

    # 5. Spikes and dropped rows against the clean record.
    def same_load(r: Row) -> tuple[str, str, str]:  # the same load and noise: seed, cell, shape
        return str(r["seed"]).split(":")[0], str(r["cell"]), str(r["shape"])

    clean = {same_load(r): r for r in rows if r["variant"] == "clean"}
    for variant, limit in (("spikes", SPIKE_FACTOR), ("dropped", DROP_FACTOR)):
        pairs = [
            (r, clean[same_load(r)])
            for r in rows
            if r["variant"] == variant and same_load(r) in clean
        ]
        if not pairs:
            print(f"[{verdict(None)}] {variant}: no pair with a clean record selected")
            continue
        parts, ok = [], True
        for kind in ("live", "smoothed"):
            key = f"rmse_ours_{kind}_n"
            rs = [(float(a[key]) / float(b[key]), str(a["record"])) for a, b in pairs]
            worst, where = max(rs)
            ok &= worst <= limit
            parts.append(f"{kind} worst {worst:.3g} ({where})")
        print(
            f"[{verdict(ok)}] {variant}: RMSE ≤ {limit}× the clean record's: " + "; ".join(parts)
        )


def speed(records: list[Record], q_rw: list[float], repeats: int) -> None:
    """Live replay throughput of ours and of the fitted RW filter, interleaved repeats."""
    n_total = sum(r.t_s.size for r in records)
    model_of = [random_walk_model(r.cell) for r in records]
    rates_ours, rates_rw, ratios = [], [], []
    for _ in range(repeats):
        start = time.perf_counter()
        for r in records:
            ours.live(r.cell, r.t_s, r.z_m)
        t_ours = time.perf_counter() - start
        start = time.perf_counter()
        for r, model, q in zip(records, model_of, q_rw, strict=True):
            filter_at(model, r.cell, r.t_s, r.z_m, q)
        t_rw = time.perf_counter() - start
        rates_ours.append(n_total / t_ours)
        rates_rw.append(n_total / t_rw)
        ratios.append(rates_ours[-1] / rates_rw[-1])

    def med(xs: list[float]) -> str:
        lo, mid, hi = min(xs) / 1e6, statistics.median(xs) / 1e6, max(xs) / 1e6
        return f"{mid:.3g} M samples/s (range {lo:.3g}–{hi:.3g})"

    print(
        f"[info] speed over {len(records)} records ({n_total} samples), {repeats} interleaved "
        f"repeats:\n         ours live replay {med(rates_ours)};\n"
        f"         RW yardstick filter (discretise + compiled loop) {med(rates_rw)};\n"
        f"         ratio ours/RW median {statistics.median(ratios):.3g} "
        f"(range {min(ratios):.3g}–{max(ratios):.3g}); not a test"
    )


def write_csv(path: Path, rows: list[Row]) -> None:
    """The per-record table, one row per record; units in the column names."""
    path.parent.mkdir(parents=True, exist_ok=True)
    with path.open("w", newline="", encoding="utf-8") as fh:
        writer = csv.DictWriter(fh, fieldnames=list(rows[0]))
        writer.writeheader()
        for r in rows:
            writer.writerow({k: (f"{v:.6g}" if isinstance(v, float) else v) for k, v in r.items()})


def _seeds(text: str) -> list[int]:
    try:
        seeds = [int(part) for part in text.split(",")]
    except ValueError:
        raise argparse.ArgumentTypeError(
            f"{text!r}: give whole numbers separated by commas"
        ) from None
    if len(set(seeds)) != len(seeds):
        raise argparse.ArgumentTypeError(f"{text!r}: a seed is given twice")
    return seeds


def _cells(text: str) -> str:
    if text in ("tuned", "other", "all"):
        return text
    kind, _, count = text.partition(":")
    if kind not in ("random", "coarse") or not count.isdigit() or int(count) < 1:
        raise argparse.ArgumentTypeError(
            f"{text!r}: give tuned, other, all, random:N or coarse:N (N ≥ 1)"
        )
    return text


def cells_for(choice: str, seed: int) -> tuple[Cell, ...]:
    """The cells of ``--cells`` for one base seed (random cells are drawn per seed)."""
    if choice.startswith("random:"):
        return random_cells(int(choice.partition(":")[2]), seed)
    if choice.startswith("coarse:"):
        return random_cells(int(choice.partition(":")[2]), seed, (0.5, 3.0), "c")
    return {"tuned": CELLS, "other": OTHER_CELLS, "all": CELLS + OTHER_CELLS}[choice]


def parse_args(argv: Sequence[str] | None) -> argparse.Namespace:
    p = argparse.ArgumentParser(
        description="Accuracy benchmark of the force observer on invented cells and loads."
    )
    p.add_argument(
        "--quick",
        action="store_true",
        help="1 s records, no dropped-rows variant, 2 speed repeats (under a minute)",
    )
    p.add_argument(
        "--only",
        action="append",
        default=[],
        metavar="SHAPE/CELL",
        help=f"keep matching records; SHAPE in {', '.join(SHAPES)}, CELL in "
        f"{', '.join(c.name for c in CELLS + OTHER_CELLS)}; either part may be empty or '*'; "
        "repeatable",
    )
    p.add_argument(
        "--seed",
        type=_seeds,
        default=[2024],
        metavar="N[,N...]",
        help="base seed, or several separated by commas: one summary over the records of "
        "every seed, the targets met (or not) by all of them (default 2024)",
    )
    p.add_argument(
        "--cells",
        type=_cells,
        default="tuned",
        metavar="tuned|other|all|random:N|coarse:N",
        help="the three cells the observer's defaults were tuned on (default), three other "
        "invented cells it never saw (crisp, floaty, critical), all six, N cells drawn at "
        "random for each seed (r01, r02, ...; accuracy/cells.py, random_cells), or the same N "
        "read by an ADC whose step is 0.5-3 noise σ instead of 0.1-0.5 (c01, c02, ...)",
    )
    p.add_argument("--csv", type=Path, metavar="OUT", help="write the per-record table here")
    return p.parse_args(argv)


def main(argv: Sequence[str] | None = None) -> int:
    args = parse_args(argv)
    began = time.perf_counter()
    duration = QUICK_DURATION_S if args.quick else FULL_DURATION_S
    repeats = 2 if args.quick else 3
    variants = QUICK_VARIANTS if args.quick else VARIANTS
    print("Accuracy benchmark (invented cells, invented loads, simulated readings)")
    # The observer measured is whichever `estimator` this interpreter imports: the working
    # tree with an editable install, otherwise the copy made when the package was installed.
    spec = importlib.util.find_spec("estimator")
    print(f"  observer code from {Path(spec.origin).parent if spec and spec.origin else '?'}")
    for seed in args.seed:
        for cell in cells_for(args.cells, seed):
            if any(wanted(args.only, cell.name, s) for s in SHAPES):
                print(f"  {cell.describe()}" + (f"  (seed {seed})" if ":" in args.cells else ""))
    print(
        f"  {duration:g} s records, {len(variants)} variants ({', '.join(variants)}); "
        f"seed {', '.join(map(str, args.seed))}; q grid step {GRID_STEP_DECADES} decade; "
        f"OPENBLAS_NUM_THREADS={os.environ.get('OPENBLAS_NUM_THREADS')}"
    )
    records: list[Record] = []
    truth_s = 0.0
    for seed in args.seed:
        some, secs = build_records(
            seed, duration, args.only, cells_for(args.cells, seed), variants
        )
        records += some
        truth_s += secs
    if not records:
        print("no record matches --only", file=sys.stderr)
        return 2
    rows: list[Row] = []
    q_rw: list[float] = []
    spent: dict[str, float] = {"truth": truth_s}
    for record in records:
        label = (
            record.label if len(args.seed) == 1 else f"{record.seed.split(':')[0]}/{record.label}"
        )
        row, secs = score_record(record, GRID_STEP_DECADES, label)
        for k, v in secs.items():
            spent[k] = spent.get(k, 0.0) + v
        rows.append(row)
        q_rw.append(float(row["q_rw_n2_per_s"]))
        print_record(row, record)
        sys.stdout.flush()
    edges = [f"{r['record']} ({m})" for r in rows for m in ("rw", "irw") if r[f"q_{m}_at_edge"]]
    summary(rows)
    first = [r.seed.split(":")[0] == str(args.seed[0]) for r in records]  # one seed is enough
    speed(
        [r for r, keep in zip(records, first, strict=True) if keep],
        [q for q, keep in zip(q_rw, first, strict=True) if keep],
        repeats,
    )
    if edges:
        print("[note] q fit at the grid edge: " + ", ".join(edges))
    else:
        print("[note] no q fit at the grid edge")
    if args.csv:
        write_csv(args.csv, rows)
        print(f"[note] per-record table written to {args.csv}")
    timing = ", ".join(f"{k} {v:.1f} s" for k, v in spent.items())
    print(f"[note] time: {timing}; total {time.perf_counter() - began:.1f} s")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
