"""``forcelens export``: a recorded run's samples or estimates as CSV with units."""

from __future__ import annotations

import argparse
from pathlib import Path
from typing import Any

from ui.outputs import add_force_option, claim_file

__all__ = ["register"]


def register(subparsers: Any) -> None:
    p = subparsers.add_parser(
        "export",
        help="write a recorded run's samples (or live estimates) as CSV",
        description=(
            "Write one stream of a run folder as CSV: every column named with its unit, "
            "comment lines with the run id, cell, software version and whether the run "
            "was closed. Numbers are written so they read back exactly."
        ),
    )
    p.add_argument("run_folder", metavar="RUN", help="run folder")
    p.add_argument("--out", help="output CSV (default: RUN_ID-STREAM.csv here)")
    p.add_argument(
        "--stream",
        default="samples",
        help="'samples' (default) or 'estimates' (the force computed live)",
    )
    add_force_option(p)
    p.set_defaults(run=run)


def run(args: argparse.Namespace) -> int:
    from daq.runs import export_run_csv, read_run

    data = read_run(args.run_folder)
    if args.stream not in data.streams:
        known = ", ".join(sorted(data.streams))
        raise ValueError(f"{args.run_folder}: no stream {args.stream!r}; this run has {known}")
    out = Path(args.out or f"{data.description['run_id']}-{args.stream}.csv")
    replaced = claim_file(out, inputs=[args.run_folder], force=args.force)
    export_run_csv(data, out, stream=args.stream)
    if replaced:
        print(replaced)
    n = data.streams[args.stream].size
    print(f"wrote {out}: {n} rows of {args.stream}" + ("" if data.closed else " (run NOT closed)"))
    return 0
