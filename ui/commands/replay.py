"""``forcelens replay``: estimates from a recorded run or a plain CSV of displacement.

A run (a folder written by ``forcelens live --record``) is replayed with the profile and
the zero (tare) events recorded with it, through the same pipeline as the live run;
when the run holds the estimates computed live, the replay is compared with them
sample by sample and must be bit-identical.
"""

from __future__ import annotations

import argparse
import contextlib
import math
import sys
import time
from collections.abc import Iterator
from pathlib import Path
from typing import Any

from ui.outputs import add_force_option, claim_file
from ui.unverified import add_unverified_option

__all__ = ["register"]

# Samples per observer call (the observer's working arrays grow with it) and per block
# read from a run; any size gives the same numbers.
_BLOCK = 16_384
_CSV_CHUNK_CHARS = 1 << 20  # characters of a CSV read per block (~35 000 rows); any size does
_PACED_BLOCK_S = 0.05  # device time per block when pacing, s


def register(subparsers: Any) -> None:
    from ui.input_paths import input_path

    p = subparsers.add_parser(
        "replay",
        help="estimate force again from a recorded run or a CSV of time and displacement",
        description=(
            "Replay a recorded run (a run folder) or a plain CSV file (header: time_s and "
            "displacement_m, displacement_mm or displacement_um) through the force observer. "
            "A run is replayed with its own profile and zero events and compared with the "
            "estimates recorded live. --out writes the estimates as forcelens CSV (the "
            "columns of export --stream estimates: time_s [s], force_n [N], force_u_n [N], "
            "...; force_u_n is the standard uncertainty, k = 1); see docs/csv-files.md."
        ),
    )
    p.add_argument("source", metavar="RUN_OR_CSV", type=input_path, help="run folder or CSV file")
    p.add_argument(
        "--profile",
        metavar="FILE.toml",
        help="cell profile; required for a CSV (default for a run: the run's own)",
    )
    p.add_argument(
        "--out",
        metavar="FILE.csv",
        help="write the estimates to this CSV; required for a CSV input (default for a run: "
        "none written)",
    )
    p.add_argument(
        "--speed",
        default="max",
        metavar="X",
        help="'max' (as fast as possible), or seconds of the record per real second, a "
        "factor: 1 for real time, 5 for five times faster (default: max)",
    )
    p.add_argument(
        "--steps",
        action="store_true",
        help="also print the load changes found, with rise, overshoot and settling times "
        "for the estimate and for the static k·x",
    )
    p.add_argument(
        "--smooth",
        action="store_true",
        help="also use later samples (Rauch-Tung-Striebel smoother); offline only, slower",
    )
    add_force_option(p)
    add_unverified_option(p)
    p.set_defaults(run=run)


def _speed(text: str) -> float:
    if text == "max":
        return math.inf
    try:
        value = float(text)
    except ValueError:
        value = math.nan
    if not (math.isfinite(value) and value > 0):
        raise ValueError(f"--speed = {text!r}: give 'max' or a factor > 0 such as 1 or 5")
    return value


def run(args: argparse.Namespace) -> int:
    speed = _speed(args.speed)
    source = Path(args.source)
    if not source.exists():
        raise ValueError(f"{source}: no such file or folder")
    # checked before any work: an output never replaces an input or a file unasked
    args.replaced = None
    if args.out:
        inputs = [source] + ([args.profile] if args.profile else [])
        args.replaced = claim_file(args.out, inputs=inputs, force=args.force)
    if source.is_dir():
        return _replay_run(args, source, speed)
    return _replay_csv(args, source, speed)


def _replay_csv(args: argparse.Namespace, source: Path, speed: float) -> int:
    from estimator.profile import load_profile

    if not args.profile:
        raise ValueError(f"{source}: a CSV carries no profile; give --profile FILE")
    if not args.out and not args.steps:
        raise ValueError(
            f"{source}: give --out FILE for the estimates, or --steps for the load changes"
        )
    profile = load_profile(args.profile)
    replay = _Replay(args, profile, [], speed)
    with replay.writing():
        # read, estimated and written a chunk at a time: bounded memory (the smoother
        # keeps the record in temporary files)
        for block in _csv_blocks_shown(source):
            replay.feed(block)
        replay.complete()
    replay.finish()
    c = replay.observer.counters
    print(
        f"{source}: {replay.samples} samples; rejected {c.rejected}, missing {c.missing}, "
        f"gaps {c.gaps}, load jumps {c.jumps}{_restarted(replay.observer)}"
    )
    return 0


def _csv_blocks_shown(source: Path) -> Any:
    """The CSV's sample blocks, with a bar over the file's bytes on a terminal."""
    from ui.overlap import read_ahead
    from ui.progress import bar

    with bar(source.stat().st_size, "estimating", unit="B") as shown:
        done = 0
        for block, read in read_ahead(_csv_blocks(source)):  # parsed beside the estimation
            yield block
            shown.update(read - done)
            done = read


def _csv_blocks(source: Path) -> Any:
    """``(samples, bytes read)`` per chunk of ``source`` (`_CSV_CHUNK_CHARS` characters)."""
    from ui.replay_blocks import csv_sample_blocks

    return csv_sample_blocks(source, chunk_chars=_CSV_CHUNK_CHARS)


def _replay_run(args: argparse.Namespace, folder: Path, speed: float) -> int:

    from daq.runs import read_run
    from daq.runs.blocks import iter_stream_blocks
    from estimator.profile import load_profile
    from ui.overlap import read_ahead
    from ui.pipeline import ESTIMATE_STREAM, TARE_EVENT, tares_from_events
    from ui.progress import bar
    from ui.replay_blocks import LiveComparison
    from ui.transducer_change import transducer_change
    from ui.unverified import refuse_unverifiable
    from ui.wiring import profile_from_text

    data = read_run(folder, event_kinds=(TARE_EVENT,))  # a long run's log is big; zeros only
    refuse_unverifiable(folder, data.warnings, args.unverified)
    for warning in data.warnings:
        print(f"warning: {warning}", file=sys.stderr)
    if data.warnings:
        print("UNVERIFIED run (--unverified): the estimates rest on what is left of it")
    recorded_profile = profile_from_text(
        data.description["profile_toml"], f"{folder / 'run.json'} [profile_toml]"
    )
    profile = load_profile(args.profile) if args.profile else recorded_profile
    own_profile = profile == recorded_profile
    tares = tares_from_events(data.events)
    change = transducer_change(recorded_profile, profile)
    if change is not None:
        print(
            "the profile's [transducer] table differs from the run's: displacements are "
            "derived again from the recorded counts, and the zeros with them"
        )
        tares = change.tares(tares)
    state = "closed" if data.closed else "NOT closed (ended without its closing record)"
    n_samples = int(data.samples.shape[0])
    print(f"run {data.description['run_id']}: {n_samples} samples, {state}")
    live = None
    if ESTIMATE_STREAM in data.streams and not args.smooth:
        live = LiveComparison(data, ESTIMATE_STREAM, _BLOCK)
    replay = _Replay(args, profile, tares, speed, live)
    with replay.writing():
        with bar(n_samples, "estimating") as shown:
            # bounded memory; read beside the estimation
            for block in read_ahead(iter_stream_blocks(data, "samples", _BLOCK)):
                replay.feed(block if change is None else change.samples(block))
                shown.update(block.size)
        replay.complete()
    replay.finish()
    c = replay.observer.counters
    print(
        f"replayed {replay.samples} samples; rejected {c.rejected}, gaps {c.gaps}, "
        f"load jumps {c.jumps}, zero events {len(tares)}{_restarted(replay.observer)}"
    )
    if live is None:
        return 0
    n = live.compared
    if live.identical and live.live_rows == live.replayed:
        print(f"identical to the {n} estimates computed live (bit for bit)")
        return 0
    if not own_profile:
        print("differs from the live estimates, as expected: --profile replaces the run's own")
        return 0
    if live.identical:
        lost = any("data lost" in w for w in data.warnings)
        why = "records were removed after the recording" if lost else "the run ended mid-flush"
        print(
            f"the first {n} estimates are identical to the live ones; the live stream holds "
            f"{live.live_rows} and the samples {live.replayed} ({why})"
        )
        return 1 if lost else 0
    first = int(live.first_difference or 0)
    print(
        f"DIFFERS from the live estimates from sample {first} on "
        f"(seq {int(data.samples['seq'][first])}); the run or the software has changed",
        file=sys.stderr,
    )
    return 1


class _Replay:
    """Sample blocks in, in stream order; estimates out to ``--out`` (written as they
    come), to the live comparison and, with ``--steps``, kept in temporary column files for
    the change table (``estimator.metrics.changes_in_blocks``: bounded memory)."""

    def __init__(
        self, args: argparse.Namespace, profile: Any, tares: list, speed: float, live: Any = None
    ) -> None:
        from ui.display_units import CellUnits
        from ui.pipeline import EstimationPipeline

        self.args, self.profile, self.live = args, profile, live
        self.pipeline = EstimationPipeline(profile, tares=tares)
        if args.smooth and tares:
            raise ValueError("--smooth cannot replay a run with zero events yet; leave it out")
        self.speed = speed
        self.units = CellUnits.for_profile(profile)  # the status line in the cell's units
        self.samples = 0
        self._out: Any = None
        self._steps: Any = None  # ui.column_files.ColumnFiles of the finite rows, --steps
        if args.steps:
            from ui.column_files import ColumnFiles

            self._steps = ColumnFiles(_STEP_COLUMNS)
        self._status: Any = None
        self._clock: tuple[float, float] | None = None  # (monotonic, device time) at start
        self._smoother: Any = None  # estimator.smoother.RecordSmoother, with --smooth
        if args.smooth:
            from estimator.smoother import RecordSmoother

            self._smoother = RecordSmoother(self.pipeline.observer)

    @property
    def observer(self) -> Any:
        return self.pipeline.observer

    @contextlib.contextmanager
    def writing(self) -> Iterator[None]:
        """``--out`` open while the blocks are fed: complete on success, none on error."""
        if not self.args.out:
            yield
            return
        from ui.estimates_csv import estimates_csv_writer
        from ui.overlap import WriteBehind

        metadata = _metadata(self.args, self.profile)
        with (
            estimates_csv_writer(self.args.out, metadata=metadata) as out,
            WriteBehind(out.write) as behind,  # formatted and written beside the estimation
        ):
            self._out = behind
            try:
                yield
            finally:
                self._out = None
        print(
            f"wrote {self.args.out}" + (f" ({self.args.replaced})" if self.args.replaced else "")
        )

    def feed(self, samples: Any) -> None:
        """Estimate one block of samples (with ``--smooth``, keep it for `complete`)."""
        self.samples += samples.size
        if self._smoother is not None:
            self._smoother.add(samples["device_time_s"], samples["displacement_m"])
        elif math.isinf(self.speed):
            for start in range(0, samples.size, _BLOCK):
                part = samples[start : start + _BLOCK]
                self._use(self.pipeline.process(part), part)
        else:
            self._paced(samples)

    def complete(self) -> None:
        """The whole record is in: with ``--smooth``, smooth it and use its estimates."""
        if self._smoother is None:
            return
        from ui.progress import busy

        try:
            with busy(f"smoothing {self.samples} samples") as say:
                self._smoother.smooth(say)
            for est, displacement in self._smoother.rows():
                self._use(est, {"displacement_m": displacement})
        finally:
            self._smoother.close()

    def _paced(self, samples: Any) -> None:
        from ui.status import StatusLine, format_status

        if self._status is None:
            self._status = StatusLine()
        t = samples["device_time_s"]
        if self._clock is None and t.size:
            self._clock = (time.monotonic(), float(t[0]))
        start = 0
        while start < samples.size:
            stop = int(t.searchsorted(t[start] + _PACED_BLOCK_S * self.speed, side="right"))
            stop = max(stop, start + 1)
            t0, t0_dev = self._clock or (time.monotonic(), 0.0)
            wait = t0 + (float(t[stop - 1]) - t0_dev) / self.speed - time.monotonic()
            if wait > 0:
                time.sleep(wait)
            est = self.pipeline.process(samples[start:stop])
            self._use(est, samples[start:stop])
            start = stop
            if self._status.due():
                self._status.show(
                    format_status(
                        est,
                        state=f"replay ×{self.speed:g}",
                        units=self.units,
                        framing=self.profile.acquisition.framing,
                    )
                )

    def _use(self, est: Any, samples: Any) -> None:
        if self._out is not None:
            self._out.put([est[name] for name in est.dtype.names])
        if self.live is not None:
            self.live.add(est)
        if self._steps is not None:
            import numpy as np

            ok = np.isfinite(est["force_n"])
            static = self.profile.plant.stiffness_n_per_m * samples["displacement_m"]
            self._steps.append(
                t=est["time_s"][ok], f=est["force_n"][ok], u=est["force_u_n"][ok], s=static[ok]
            )

    def finish(self) -> None:
        """End the status line; print the change table with ``--steps``."""
        if self._status is not None:
            self._status.finish()
        if self._steps is not None:
            try:
                _print_steps(*(self._steps.column(name) for name in _STEP_COLUMNS))
            finally:
                self._steps.close()


_STEP_COLUMNS = ("t", "f", "u", "s")  # time, force, its u and k·x of the rows with a force


def _print_steps(t: Any, force: Any, force_u: Any, static: Any) -> None:
    """The change table of the estimate and of the static conversion k·x (columns)."""
    from estimator import exact_quantiles
    from estimator.columns import blocks
    from estimator.metrics import format_change_table
    from estimator.metrics.changes_in_blocks import iter_change_table_in_blocks

    # The band is 2 % of each step, never narrower than twice the steady force
    # uncertainty (so noise alone cannot hold the reading "unsettled").
    floor = (
        4.0 * exact_quantiles.median(lambda: (b for _, b in blocks(force_u)))
        if force_u.size
        else 0.0
    )
    rows = list(iter_change_table_in_blocks(t, force, static, band_floor_n=floor))
    print(format_change_table(rows) if rows else "no load change found")


def _metadata(args: argparse.Namespace, profile: Any) -> dict[str, str]:
    """The ``# key: value`` lines of ``--out``: what was estimated, and how."""
    from ui.version import software_version

    return {
        "source": Path(args.source).name,
        "cell": profile.cell.name,
        "profile": args.profile or "the run's own",
        "method": "smoother (offline)" if args.smooth else "observer (as live)",
        "software_version": software_version(),
    }


def _restarted(observer: Any) -> str:
    """The fresh starts after long silences, said when there were any."""
    n = observer.counters.restarts
    if not n:
        return ""
    return (
        f"; observer started afresh after {n} silence(s) longer than {observer.restart_gap_s:g} s"
    )
