"""``forcelens tune``: transducer noise and observer intensities from a recording.

Any record will do: a staircase, a ramp, a sine or a free-running load. The noise, the
hold model's intensity and the scale of the rate models' intensities are those that
maximise the innovation log-likelihood of the record (or of its ``--from``/``--to``
part); each search widens while its best value sits on an edge, the rate scale down to
1/25 and the hold intensity down to that of a 2 Hz bandwidth (`estimator.tuning`: a
staircase says nothing of the rate models, and its exactly constant holds would drive
both towards 0). A quiet stretch (cell
unloaded and at rest, ``--quiet-from``/``--quiet-to``) stays an option: it fixes the
noise, which is then not fitted. A staircase of load steps on the simulated cell
(invented data) then shows what the tuning gives: the noise of the held readings and
the settling time, before and after.
"""

from __future__ import annotations

import argparse
import dataclasses
import datetime
from pathlib import Path
from typing import Any

from ui.outputs import add_force_option, claim_file

__all__ = ["register"]


def register(subparsers: Any) -> None:
    from ui.input_paths import input_path

    p = subparsers.add_parser(
        "tune",
        help="noise and observer intensities by innovation likelihood on any record",
        description=(
            "Fit the transducer noise, the observer's hold intensity and the scale of its "
            "rate models by the innovation log-likelihood of a run or CSV (any load: "
            "steps, ramps, sines, free running); with --quiet-from/--quiet-to the noise "
            "comes from that quiet stretch (cell unloaded, at rest) instead. Shows the "
            "result on a simulated staircase (invented data). --out writes the tuned "
            "profile."
        ),
    )
    p.add_argument(
        "record",
        metavar="RUN_OR_CSV",
        type=input_path,
        help="run folder, or CSV with time_s and displacement_m/mm/um",
    )
    p.add_argument(
        "--quiet-from",
        type=float,
        metavar="S",
        help="start of a quiet stretch (cell unloaded, at rest), s, on the record's clock; "
        "with --quiet-to (default: none, the noise is fitted)",
    )
    p.add_argument(
        "--quiet-to",
        type=float,
        metavar="S",
        help="end of the quiet stretch, s, on the record's clock; with --quiet-from",
    )
    p.add_argument(
        "--from",
        dest="t_from",
        type=float,
        metavar="S",
        help="start of the part fitted, s, on the record's own clock: a run's device time "
        "(as replay and the dashboard show it) or a CSV's time_s (default: the record's "
        "start)",
    )
    p.add_argument(
        "--to",
        dest="t_to",
        type=float,
        metavar="S",
        help="end of the part fitted, s, on the same clock (default: the record's end)",
    )
    p.add_argument(
        "--profile",
        metavar="FILE.toml",
        help="cell profile (default: the run's own; a CSV needs one)",
    )
    p.add_argument(
        "--out",
        metavar="FILE.toml",
        help="write the tuned profile here (default: none written)",
    )
    add_force_option(p)
    p.set_defaults(run=run)


def run(args: argparse.Namespace) -> int:
    import numpy as np

    from estimator.observer import process_noise_for_bandwidth
    from estimator.profile import load_profile, save_profile
    from estimator.tuning import fit_observer, noise_from_quiet
    from ui.commands.identify import _record

    if (args.quiet_from is None) != (args.quiet_to is None):
        raise ValueError("give both --quiet-from and --quiet-to, or neither")
    if not args.profile and Path(args.record).is_file():
        # the demo cell's model would be fitted to another cell's record without a word
        raise ValueError(f"{args.record}: a CSV carries no profile; give --profile FILE")
    replaced = None
    if args.out:  # checked before the fit: an output never replaces an input unasked
        inputs = [args.record] + ([args.profile] if args.profile else [])
        replaced = claim_file(args.out, inputs=inputs, force=args.force)
    t, x, digest, run_profile = _record(Path(args.record))
    profile = load_profile(args.profile) if args.profile else run_profile
    if profile is None:
        raise ValueError(f"{args.record}: it names no profile; give --profile FILE")
    tr, obs = profile.transducer, profile.observer
    noise_m = tr.noise_m
    if args.quiet_from is not None:
        quiet = (t >= args.quiet_from) & (t <= args.quiet_to)
        noise = noise_from_quiet(t[quiet], x[quiet], tr.resolution_m)
        noise_m = noise.noise_m
        print(
            f"noise from {noise.samples} quiet samples: {noise_m:.3g} m (1σ, quantisation "
            f"removed; was {tr.noise_m:.3g} m in the profile); not fitted"
        )
    keep = np.ones(t.size, dtype=bool)
    if args.t_from is not None:
        keep &= t >= args.t_from
    if args.t_to is not None:
        keep &= t <= args.t_to
    lim = profile.limits
    dt = profile.acquisition.sample_period_s
    plant = profile.plant.plant()
    q_hold = obs.process_noise_n2_per_s or process_noise_for_bandwidth(
        obs.force_bandwidth_hz,
        plant.stiffness_n_per_m,
        tr.noise_m**2 + tr.resolution_m**2 / 12,
        dt,
    )
    from ui.progress import busy

    with busy(f"fitting on {int(keep.sum())} samples by innovation likelihood"):
        fit = fit_observer(
            plant,
            dt,
            noise_m,
            tr.resolution_m,
            t[keep],
            x[keep],
            force_range_n=lim.force_max_n - lim.force_min_n,
            q_hold_n2_per_s=q_hold,
            rate_scale=obs.rate_scale,
            gate_sigma=obs.gate_sigma,
            fit_noise=args.quiet_from is None,
        )
    print(f"                         {'profile':>12} {'fitted':>12}")
    print(f"  noise, m               {tr.noise_m:12.4g} {fit.noise_m:12.4g}")
    print(f"  hold intensity, N²/s   {q_hold:12.4g} {fit.q_hold_n2_per_s:12.4g}")
    print(f"  rate-model scale       {obs.rate_scale:12.4g} {fit.rate_scale:12.4g}")
    print(
        f"log-likelihood {fit.log_likelihood:.1f} (profile's values: "
        f"{fit.start_log_likelihood:.1f}); {fit.evaluations} runs over the record"
    )
    if fit.at_edge:
        print(
            "not pinned down by this record (the search stopped at its widest, or at a lower "
            "limit: the rate scale 1/25, the hold model's bandwidth 2 Hz), so the profile's "
            "value is kept: " + ", ".join(fit.at_edge)
        )
    tuned = profile.with_updates(
        transducer=dataclasses.replace(
            tr, noise_m=tr.noise_m if "noise_m" in fit.at_edge else fit.noise_m
        ),
        observer=dataclasses.replace(
            obs,
            process_noise_n2_per_s=q_hold
            if "q_hold_n2_per_s" in fit.at_edge
            else fit.q_hold_n2_per_s,
            rate_scale=obs.rate_scale if "rate_scale" in fit.at_edge else fit.rate_scale,
        ),
    )
    _staircase(profile, tuned)
    if args.out:
        today = datetime.date.today().isoformat()
        cell = dataclasses.replace(
            tuned.cell,
            source=f"tuned {today} on {Path(args.record).name} (SHA-256 {digest}); "
            f"was: {tuned.cell.source}",
        )
        save_profile(tuned.with_updates(cell=cell), args.out)
        print(f"wrote {args.out}" + (f" ({replaced})" if replaced else ""))
    return 0


def _staircase(before: Any, after: Any) -> None:
    """Both profiles on a simulated staircase (invented data): noise and settling."""
    import numpy as np

    from daq.programme import parse_programme
    from estimator.observer import ForceObserver
    from estimator.tuning import compare_on_steps
    from ui.wiring import scaling_for, simulated_cell_for

    top = 0.8 * after.limits.force_max_n
    levels = [0.2 * top, 0.6 * top, top, 0.3 * top, 0.0]
    spec = "hold 0.5 0; " + "; ".join(f"hold 0.5 {f:.6g}" for f in levels)
    run = simulated_cell_for(after, seed=1).generate(parse_programme(spec))
    t = run.seq * after.acquisition.sample_period_s
    x = scaling_for(after).to_metres(run.counts)
    steps = [(0.5 * (i + 1), f) for i, f in enumerate(levels)]
    rows = compare_on_steps(
        [
            ("profile as given", ForceObserver.from_profile(before)),
            ("tuned", ForceObserver.from_profile(after)),
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
        print(f"  {r.label:18s} held noise {r.hold_noise_n:.3g} N rms, median settling {settle}")
