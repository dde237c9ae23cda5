"""Every figure forcelens reports about a run, recomputed from the recording.

`replay_run` replays a run through the same pipeline as the live run (its own profile and
zero events, unless another profile is given) a block at a time, hashing the samples and
estimates as they pass and keeping the `COLUMNS` in temporary files and the transitions in
a temporary file (``ui.transitions``); `compute_figures` gathers what a report shows and an
audit checks: the hashes, the load-change table (``estimator.metrics.changes_in_blocks``: the
numbers of the whole-array rules, bit for bit) and the settling and alarm transitions. The
result (`FIGURES_FORMAT`) is written beside a report (``ui.figures_file``) so that a later
audit can compare. Memory does not grow with the record (issue 12, big records).
"""

from __future__ import annotations

import contextlib
import hashlib
import math
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

__all__ = ["COLUMNS", "FIGURES_FORMAT", "Replayed", "compute_figures", "replay_run"]

FIGURES_FORMAT = "forcelens-figures"
FIGURES_VERSION = 1
_BLOCK = 16_384  # samples per observer call (as replay); any size gives the same numbers
#: The columns a replay keeps (in files), one row per sample: the estimate's time, force
#: and its standard uncertainty, and the recorded displacement.
COLUMNS = ("time_s", "force_n", "force_u_n", "displacement_m")


class _Collector:
    """Stands in for a run writer: keeps the events the pipeline logs (as JSON text)."""

    def __init__(self) -> None:
        from ui.transitions import Transitions

        self.events = Transitions()

    def append(self, block: np.ndarray, stream: str = "samples") -> None:
        del block, stream  # the replay keeps its own copy of the estimates

    def event(self, kind: str, message: str = "", **fields: Any) -> None:
        self.events.append({"kind": kind, "message": message, **fields})


@dataclass(frozen=True)
class Replayed:
    """A run replayed: its data, the profile used, the logged events, the hashes of the
    samples and estimates, and the `COLUMNS` of every row in temporary files (read a
    slice at a time with `column`; `close` removes them)."""

    data: Any  # daq.runs.RunData
    profile: Any
    own_profile: bool
    events: Any  # ui.transitions.Transitions: settling and alarm transitions, as logged live
    rows: int  # estimates (one per sample)
    samples_sha256: str
    estimates_sha256: str
    nonfinite_force: int  # rows whose force is NaN or infinite
    files: Any  # ui.column_files.ColumnFiles
    live: Any  # ui.replay_blocks.LiveComparison, or None when not compared

    def column(self, name: str) -> Any:
        """The column ``name`` of `COLUMNS` (``estimator.columns.Column``)."""
        return self.files.column(name)

    def close(self) -> None:
        """Remove the temporary column files and transitions."""
        self.files.close()
        self.events.close()


def replay_run(
    folder: str | Path,
    *,
    profile: Any = None,
    check_hash: bool = True,
    compare_live: bool = False,
    block_rows: int = _BLOCK,
) -> Replayed:
    """Replay `folder` through the live pipeline (its own profile unless `profile`), a
    block of ``block_rows`` samples at a time; with ``compare_live`` the estimates are
    compared with those recorded live as they come."""
    from daq.runs import read_run
    from daq.runs.blocks import iter_stream_blocks
    from ui.column_files import ColumnFiles
    from ui.pipeline import ESTIMATE_STREAM, TARE_EVENT, EstimationPipeline, tares_from_events
    from ui.progress import bar, progress_wanted
    from ui.replay_blocks import LiveComparison
    from ui.transducer_change import transducer_change
    from ui.wiring import profile_from_text

    folder = Path(folder)
    data = read_run(folder, check_hash=check_hash, event_kinds=(TARE_EVENT,))  # zeros only
    own = profile_from_text(data.description["profile_toml"], f"{folder / 'run.json'}")
    used = profile or own
    collector = _Collector()
    tares = tares_from_events(data.events)
    change = transducer_change(own, used)
    if change is not None:  # another transducer calibration: displacements from counts
        tares = change.tares(tares)
    pipe = EstimationPipeline(used, recorder=collector, tares=tares)
    live = None
    if compare_live and ESTIMATE_STREAM in data.streams:
        live = LiveComparison(data, ESTIMATE_STREAM, block_rows)
    samples_hash, estimates_hash = hashlib.sha256(), hashlib.sha256()
    rows = nonfinite = 0
    files = ColumnFiles(COLUMNS)
    try:
        total = int(data.samples.shape[0])
        with bar(total, "replaying", enabled=None if progress_wanted() else False) as shown:
            for block in iter_stream_blocks(data, "samples", block_rows):
                samples_hash.update(block.tobytes())
                est = pipe.process(change.samples(block) if change is not None else block)
                estimates_hash.update(est.tobytes())
                force = est["force_n"]
                files.append(
                    time_s=est["time_s"],
                    force_n=force,
                    force_u_n=est["force_u_n"],
                    displacement_m=block["displacement_m"],
                )
                rows += est.size
                nonfinite += int(np.count_nonzero(~np.isfinite(force)))
                if live is not None:
                    live.add(est)
                shown.update(block.size)
    except BaseException:
        files.close()
        raise
    final_tick = ((data.closing or {}).get("summary") or {}).get("final_tick_host_s")
    if final_tick is not None:  # the live run's last look for a silence at the end
        pipe.tick(float(final_tick))
    return Replayed(
        data,
        used,
        used == own,
        collector.events,
        rows,
        samples_hash.hexdigest(),
        estimates_hash.hexdigest(),
        nonfinite,
        files,
        live,
    )


@contextlib.contextmanager
def _finite_rows(replayed: Replayed, block: int) -> Iterator[tuple[Any, Any, Any, Any]]:
    """(time, force, force_u, k·x) of the rows whose force is finite, as columns."""
    from estimator.columns import blocks
    from ui.column_files import ColumnFiles, DerivedColumn

    k = replayed.profile.plant.stiffness_n_per_m
    t, f, u, x = (replayed.column(name) for name in COLUMNS)
    if not replayed.nonfinite_force:
        yield t, f, u, DerivedColumn(lambda v: k * v, x)
        return
    kept = ColumnFiles(("t", "f", "u", "s"))
    try:
        for a, force in blocks(f, block=block):
            ok = np.isfinite(force)
            b = a + force.size
            kept.append(
                t=t.read(a, b)[ok], f=force[ok], u=u.read(a, b)[ok], s=(k * x.read(a, b))[ok]
            )
        yield kept.column("t"), kept.column("f"), kept.column("u"), kept.column("s")
    finally:
        kept.close()


def _clean(value: Any) -> Any:
    """JSON-safe: NaN and infinities become None, NumPy scalars plain numbers."""
    if isinstance(value, dict):
        return {k: _clean(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_clean(v) for v in value]
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value


def _ms(seconds: float) -> float:
    return seconds * 1e3


def compute_figures(replayed: Replayed, *, block: int | None = None) -> dict[str, Any]:
    """The figures of a replayed run, as a mapping for ``ui.figures_file.write_figures``
    (the transitions as ``ui.transitions.Transitions``), read a block at a time: the same
    numbers as the whole-array rules of ``estimator.metrics``, whatever ``block`` (values
    read at a time; None: ``estimator.columns.BLOCK``)."""
    from estimator import exact_quantiles
    from estimator.columns import BLOCK, blocks
    from estimator.metrics.changes_in_blocks import iter_change_table_in_blocks
    from estimator.profile import profile_to_toml
    from ui.version import software_version

    block = block or BLOCK
    with _finite_rows(replayed, block) as (t, force, force_u, static):
        u_obs = (
            exact_quantiles.median(lambda: (b for _, b in blocks(force_u, block=block)))
            if force_u.size
            else math.nan
        )
        floor = 4.0 * u_obs if force_u.size else 0.0
        rows = iter_change_table_in_blocks(t, force, static, band_floor_n=floor, block=block)
        changes = [  # JSON-ready one at a time: the list is not copied again below
            _clean(
                {
                    "t_start_s": r.change.t_start_s,
                    "before_n": r.observer.initial,
                    "after_n": r.observer.final,
                    "rise_ms": _ms(r.observer.rise_time_s),
                    "overshoot_pct": r.observer.overshoot_pct,
                    "settle_ms": _ms(r.observer.settling_time_s),
                    "settle50_ms": _ms(r.observer.settling_time_mid_s),
                    "static_settle_ms": _ms(r.static.settling_time_s) if r.static else None,
                    "static_overshoot_pct": r.static.overshoot_pct if r.static else None,
                    "ratio": r.settling_ratio if r.static else None,
                }
            )
            for r in rows
        ]
    from estimator.uncertainty import ForceUncertainty

    closing = replayed.data.closing or {}
    top = max((abs(c["after_n"]) for c in changes), default=0.0)
    budget = ForceUncertainty.from_profile(replayed.profile).budget(top, u_obs)
    figures = {
        "format": FIGURES_FORMAT,
        "version": FIGURES_VERSION,
        "run_id": replayed.data.description["run_id"],
        "software_version": software_version(),
        "profile_sha256": hashlib.sha256(
            profile_to_toml(replayed.profile).encode("utf-8")
        ).hexdigest(),
        "own_profile": replayed.own_profile,
        "samples": int(replayed.data.samples.shape[0]),
        "samples_sha256": replayed.samples_sha256,
        "recorded_samples_sha256": closing.get("streams", {}).get("samples", {}).get("sha256"),
        "estimates_sha256": replayed.estimates_sha256,
        "changes": changes,
        "uncertainty": {
            "force_n": budget.force_n,
            "observer_n": budget.observer_n,
            "calibration_n": budget.calibration_n,
            "resolution_n": budget.resolution_n,
            "model_n": budget.model_n,
            "combined_n": budget.combined_n,
            "expanded_n_k2": budget.expanded_n,
        },
        "settling": replayed.events.of_kind("settling", _clean),
        "alarms": replayed.events.of_kind("alarm", _clean),
    }
    return {k: v if k == "changes" else _clean(v) for k, v in figures.items()}
