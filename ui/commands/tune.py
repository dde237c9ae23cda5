"""``forcelens tune``: transducer noise and observer bandwidth from a recording.

The noise comes from a quiet stretch (cell unloaded and at rest, ``--quiet-from`` /
``--quiet-to``); the force bandwidth from the innovation log-likelihood of the record (or
the ``--from``/``--to`` part of it). A staircase of load steps on the simulated cell
(invented data) then shows what the tuning gives: the noise of the held readings and the
settling time, for the chosen hold bandwidth and a faster one.
"""

from __future__ import annotations

import argparse
import dataclasses
import datetime
from pathlib import Path
from typing import Any

__all__ = ["register"]


def register(subparsers: Any) -> None:
    p = subparsers.add_parser(
        "tune",
        help="noise from a quiet stretch and the observer bandwidth by innovation likelihood",
        description=(
            "Estimate the transducer noise from a quiet stretch of a run or CSV (cell "
            "unloaded, at rest) and choose the observer's force bandwidth by the innovation "
            "log-likelihood of the record; show the resulting steady noise and settling on "
            "a simulated staircase, chosen and faster. --out writes the "
            "tuned profile."
        ),
    )
    p.add_argument("record", help="run folder, or CSV with time_s and displacement_m/mm/um")
    p.add_argument("--quiet-from", type=float, required=True, metavar="S", help="quiet start, s")
    p.add_argument("--quiet-to", type=float, required=True, metavar="S", help="quiet end, s")
    p.add_argument("--from", dest="t_from", type=float, metavar="S", help="record start, s")
    p.add_argument("--to", dest="t_to", type=float, metavar="S", help="record end, s")
    p.add_argument("--profile", help="cell profile (default: the run's own, or the demo cell)")
    p.add_argument("--out", help="write the tuned profile here (TOML)")
    p.set_defaults(run=run)


def run(args: argparse.Namespace) -> int:
    import numpy as np

    from estimator.profile import default_demo_profile, load_profile, save_profile
    from estimator.tuning import noise_from_quiet, tune_bandwidth
    from ui.commands.identify import _record

    t, x, digest, run_profile = _record(Path(args.record))
    profile = load_profile(args.profile) if args.profile else run_profile
    profile = profile or default_demo_profile()
    quiet = (t >= args.quiet_from) & (t <= args.quiet_to)
    noise = noise_from_quiet(t[quiet], x[quiet], profile.transducer.resolution_m)
    print(
        f"noise from {noise.samples} quiet samples: {noise.noise_m:.3g} m (1σ, quantisation "
        f"removed; was {profile.transducer.noise_m:.3g} m in the profile)"
    )
    keep = np.ones(t.size, dtype=bool)
    if args.t_from is not None:
        keep &= t >= args.t_from
    if args.t_to is not None:
        keep &= t <= args.t_to
    lim = profile.limits
    result = tune_bandwidth(
        profile.plant.plant(),
        profile.acquisition.sample_period_s,
        noise.noise_m,
        profile.transducer.resolution_m,
        t[keep],
        x[keep],
        force_range_n=lim.force_max_n - lim.force_min_n,
    )
    rel = result.log_likelihood - result.log_likelihood.max()
    print("force bandwidth, Hz, and log-likelihood relative to the best:")
    pairs = zip(result.bandwidths_hz, rel, strict=True)
    print("  " + "  ".join(f"{b:.3g}:{r:.1f}" for b, r in pairs))
    edge = ""
    if result.at_edge:
        edge = " (at the edge of the candidates: the record does not pin it down)"
    print(f"chosen: {result.best_hz:.3g} Hz{edge} for the hold model of the observer")
    tuned = profile.with_updates(
        transducer=dataclasses.replace(profile.transducer, noise_m=noise.noise_m),
        observer=dataclasses.replace(
            profile.observer, force_bandwidth_hz=result.best_hz, process_noise_n2_per_s=None
        ),
    )
    _staircase(tuned, result.best_hz)
    if args.out:
        today = datetime.date.today().isoformat()
        cell = dataclasses.replace(
            tuned.cell,
            source=f"tuned {today} on {Path(args.record).name} (SHA-256 {digest}); "
            f"was: {tuned.cell.source}",
        )
        save_profile(tuned.with_updates(cell=cell), args.out)
        print(f"wrote {args.out}")
    return 0


def _staircase(profile: Any, bandwidth_hz: float) -> None:
    """The tuning on a simulated staircase (invented data): noise and settling."""
    import numpy as np

    from daq.programme import parse_programme
    from estimator.observer import ForceObserver, ObserverTuning
    from estimator.tuning import compare_on_steps
    from ui.wiring import scaling_for, simulated_cell_for

    top = 0.8 * profile.limits.force_max_n
    levels = [0.2 * top, 0.6 * top, top, 0.3 * top, 0.0]
    spec = "hold 0.5 0; " + "; ".join(f"hold 0.5 {f:.6g}" for f in levels)
    run = simulated_cell_for(profile, seed=1).generate(parse_programme(spec))
    t = run.seq * profile.acquisition.sample_period_s
    x = scaling_for(profile).to_metres(run.counts)
    steps = [(0.5 * (i + 1), f) for i, f in enumerate(levels)]

    def observer(b: float) -> ForceObserver:
        base = ForceObserver.from_profile(profile)
        tuning = ObserverTuning(force_bandwidth_hz=b, gate_sigma=profile.observer.gate_sigma)
        span = profile.limits.force_max_n - profile.limits.force_min_n
        return ForceObserver(base.plant, base.dt_s, profile.transducer.noise_m,
                             profile.transducer.resolution_m, tuning, span)  # fmt: skip

    fast = min(10.0 * bandwidth_hz, 0.2 / profile.acquisition.sample_period_s)
    rows = compare_on_steps(
        [
            (f"hold model at {bandwidth_hz:.3g} Hz", observer(bandwidth_hz)),
            (f"hold model at {fast:.3g} Hz", observer(fast)),
        ],
        t,
        x,
        np.asarray(run.true_force_n),
        steps,
    )
    print("on a simulated staircase (invented data; 2 % settling band, common practice):")
    for r in rows:
        settle = (
            "never"
            if not np.isfinite(r.median_settling_s)
            else (f"{r.median_settling_s * 1e3:.3g} ms")
        )
        print(f"  {r.label:32s} held noise {r.hold_noise_n:.3g} N rms, median settling {settle}")
