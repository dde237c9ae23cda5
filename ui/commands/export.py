"""``forcelens export``: a recorded run's samples or estimates as CSV, MAT or HDF5."""

from __future__ import annotations

import argparse
from pathlib import Path
from typing import Any

from ui.outputs import add_force_option, claim_file

__all__ = ["register"]

#: Formats and the file name ending each one takes by default.
FORMATS = {"csv": ".csv", "mat": ".mat", "hdf5": ".h5"}
_SUFFIXES = {".csv": "csv", ".mat": "mat", ".h5": "hdf5", ".hdf5": "hdf5", ".he5": "hdf5"}


def register(subparsers: Any) -> None:
    from ui.input_paths import input_path

    p = subparsers.add_parser(
        "export",
        help="write a recorded run's samples (or live estimates) as CSV, MATLAB or HDF5",
        description=(
            "Write one stream of a run folder as CSV (every column named with its unit, "
            "comment lines with the run id, cell, software and library versions and "
            "whether the run was closed; numbers that read back exactly), as a MATLAB/Octave "
            ".mat file (one variable per column, structs 'units' and 'run'), or as HDF5 "
            "(one dataset per column with its unit, the run's facts as attributes). "
            "See docs/csv-files.md and docs/run-format.md."
        ),
    )
    p.add_argument("run_folder", metavar="RUN", type=input_path, help="run folder")
    p.add_argument(
        "--out",
        metavar="FILE",
        help="output file (default: RUN_ID-STREAM.csv, .mat or .h5 in the current folder)",
    )
    p.add_argument(
        "--stream",
        default="samples",
        metavar="STREAM",
        help="samples (the raw samples) or estimates (the force computed live); default: samples",
    )
    p.add_argument(
        "--format",
        choices=tuple(FORMATS),
        help="csv, mat (MATLAB/Octave, scipy.io.savemat) or hdf5 (h5py); default: from "
        "the ending of --out (.mat, .h5/.hdf5), else csv",
    )
    add_force_option(p)
    p.set_defaults(run=run)


def _format(args: argparse.Namespace) -> str:
    """The format asked for, or the one the ending of --out names; a clash is refused."""
    implied = _SUFFIXES.get(Path(args.out).suffix.lower()) if args.out else None
    if args.format and implied and args.format != implied:
        raise ValueError(
            f"--out {args.out}: the ending says {implied} but --format is {args.format}; "
            f"end the name in {FORMATS[args.format]} or leave --format out"
        )
    return args.format or implied or "csv"


def run(args: argparse.Namespace) -> int:
    from daq.runs import read_run
    from ui.outputs import replacing

    fmt = _format(args)
    data = read_run(args.run_folder, event_kinds=())  # checked and counted, none kept
    if args.stream not in data.streams:
        known = ", ".join(sorted(data.streams))
        raise ValueError(f"{args.run_folder}: no stream {args.stream!r}; this run has {known}")
    out = Path(args.out or f"{data.description['run_id']}-{args.stream}{FORMATS[fmt]}")
    replaced = claim_file(out, inputs=[args.run_folder], force=args.force)
    if fmt == "csv":
        from daq.runs import export_run_csv

        export_run_csv(data, out, stream=args.stream)
    else:
        if fmt == "mat":
            from daq.runs.export_mat import export_run_mat as write
        else:
            from daq.runs.export_hdf5 import export_run_hdf5 as write
        with replacing(out) as tmp:
            write(data, tmp, stream=args.stream)
    if replaced:
        print(replaced)
    n = data.streams[args.stream].size
    print(
        f"wrote {out}: {n} rows of {args.stream} as {fmt}"
        + ("" if data.closed else " (run NOT closed)")
    )
    return 0
