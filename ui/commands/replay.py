"""``forcelens replay``: estimates from a recorded displacement file."""

from __future__ import annotations

import argparse
import sys
import time
from typing import Any

__all__ = ["register"]

_BLOCK = 200_000  # samples per observer call; any size gives the same numbers


def register(subparsers: Any) -> None:
    p = subparsers.add_parser(
        "replay",
        help="estimate force from a CSV of time and displacement",
        description=(
            "Run the force observer over a plain CSV file (header: time_s and displacement_m "
            "or displacement_mm) and write time_s, force_N, force_u_N, displacement_m, "
            "velocity_m_s, nis, flags. force_u_N is the standard uncertainty (k = 1)."
        ),
    )
    p.add_argument("file", help="input CSV with time_s and displacement_m/displacement_mm")
    p.add_argument("--profile", required=True, help="cell profile (TOML)")
    p.add_argument("--out", required=True, help="output CSV")
    p.add_argument(
        "--smooth",
        action="store_true",
        help="also use later samples (Rauch-Tung-Striebel smoother); offline only, slower",
    )
    p.set_defaults(run=run)


def run(args: argparse.Namespace) -> int:
    import numpy as np

    from daq.csvfile import read_displacement_csv
    from estimator.observer import ForceObserver
    from estimator.profile import load_profile
    from estimator.smoother import rts_smooth
    from ui.estimates_csv import write_estimates_csv

    profile = load_profile(args.profile)
    t, x = read_displacement_csv(args.file)
    observer = ForceObserver.from_profile(profile)
    show = _Progress(t.size)
    if args.smooth:
        print(f"smoothing {t.size} samples...", file=sys.stderr)
        estimates = rts_smooth(observer, t, x)
    else:
        parts = []
        for start in range(0, t.size, _BLOCK):
            parts.append(observer.process(t[start : start + _BLOCK], x[start : start + _BLOCK]))
            show("estimating", start + parts[-1].size)
        estimates = np.concatenate(parts) if parts else observer.process(t, x)
    write_estimates_csv(estimates, args.out, progress=lambda d, n: show("writing", d))
    show.done()
    c = observer.counters
    print(
        f"wrote {args.out}: {t.size} samples; rejected {c.rejected}, missing {c.missing}, "
        f"gaps {c.gaps}, re-acquired {c.reacquired}"
    )
    return 0


class _Progress:
    """A one-line progress indication on stderr for long inputs."""

    def __init__(self, total: int) -> None:
        self.total = total
        self.active = (total >= 2 * _BLOCK and sys.stderr.isatty()) or total >= 5 * _BLOCK
        self.last = 0.0

    def __call__(self, what: str, done: int) -> None:
        now = time.monotonic()
        if self.active and (now - self.last > 0.2 or done >= self.total):
            self.last = now
            pct = 100.0 * done / max(self.total, 1)
            print(f"\r{what}: {pct:5.1f} % of {self.total} samples", end="", file=sys.stderr)

    def done(self) -> None:
        if self.active:
            print(file=sys.stderr)
