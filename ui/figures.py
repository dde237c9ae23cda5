"""Every figure forcelens reports about a run, recomputed from the recording.

`compute_figures` replays a run through the same pipeline as the live run (its own
profile and zero events, unless another profile is given) and gathers what a report
shows and an audit checks: hashes of the inputs and of the replayed estimates, the
load-change table, and the settling and alarm transitions. The result is plain JSON
(`FIGURES_FORMAT`), written beside a report so that a later audit can compare.
"""

from __future__ import annotations

import hashlib
import math
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

__all__ = ["FIGURES_FORMAT", "Replayed", "compute_figures", "replay_run"]

FIGURES_FORMAT = "forcelens-figures"
FIGURES_VERSION = 1
_BLOCK = 200_000  # samples per observer call; any size gives the same numbers


class _Collector:
    """Stands in for a run writer: keeps the events the pipeline logs."""

    def __init__(self) -> None:
        self.events: list[dict[str, Any]] = []

    def append(self, block: np.ndarray, stream: str = "samples") -> None:
        del block, stream  # the replay keeps its own copy of the estimates

    def event(self, kind: str, message: str = "", **fields: Any) -> None:
        self.events.append({"kind": kind, "message": message, **fields})


@dataclass(frozen=True)
class Replayed:
    """A run replayed: its data, the profile used, the estimates and the logged events."""

    data: Any  # daq.runs.RunData
    profile: Any
    own_profile: bool
    estimates: np.ndarray
    events: list[dict[str, Any]]  # settling and alarm transitions, as the live run logs them


def replay_run(folder: str | Path, *, profile: Any = None, check_hash: bool = True) -> Replayed:
    """Replay `folder` through the live pipeline (its own profile unless `profile`)."""
    from daq.runs import read_run
    from estimator.observer import concat_estimates
    from ui.pipeline import EstimationPipeline, tares_from_events
    from ui.transducer_change import transducer_change
    from ui.wiring import profile_from_text

    folder = Path(folder)
    data = read_run(folder, check_hash=check_hash)
    own = profile_from_text(data.description["profile_toml"], f"{folder / 'run.json'}")
    used = profile or own
    collector = _Collector()
    tares = tares_from_events(data.events)
    samples = np.asarray(data.samples)
    change = transducer_change(own, used)
    if change is not None:  # another transducer calibration: displacements from counts
        samples, tares = change.samples(samples), change.tares(tares)
    pipe = EstimationPipeline(used, recorder=collector, tares=tares)
    from ui.progress import bar, progress_wanted

    parts = []
    with bar(samples.size, "replaying", enabled=None if progress_wanted() else False) as shown:
        for i in range(0, samples.size, _BLOCK):
            parts.append(pipe.process(samples[i : i + _BLOCK]))
            shown.update(parts[-1].size)
    est = concat_estimates(parts)
    final_tick = ((data.closing or {}).get("summary") or {}).get("final_tick_host_s")
    if final_tick is not None:  # the live run's last look for a silence at the end
        pipe.tick(float(final_tick))
    return Replayed(data, used, used == own, est, collector.events)


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


def compute_figures(replayed: Replayed) -> dict[str, Any]:
    """The figures of a replayed run, as a JSON-ready mapping."""
    from estimator.metrics import change_table
    from estimator.profile import profile_to_toml
    from ui.version import software_version

    est = replayed.estimates
    samples = np.asarray(replayed.data.samples)
    ok = np.isfinite(est["force_n"])
    k = replayed.profile.plant.stiffness_n_per_m
    static = k * samples["displacement_m"]
    floor = 4.0 * float(np.median(est["force_u_n"][ok])) if ok.any() else 0.0
    rows = change_table(est["time_s"][ok], est["force_n"][ok], static[ok], band_floor_n=floor)
    changes = [
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
        for r in rows
    ]
    from estimator.uncertainty import ForceUncertainty

    closing = replayed.data.closing or {}
    u_obs = float(np.median(est["force_u_n"][ok])) if ok.any() else math.nan
    top = max((abs(c["after_n"]) for c in changes), default=0.0)
    budget = ForceUncertainty.from_profile(replayed.profile).budget(top, u_obs)
    return _clean(
        {
            "format": FIGURES_FORMAT,
            "version": FIGURES_VERSION,
            "run_id": replayed.data.description["run_id"],
            "software_version": software_version(),
            "profile_sha256": hashlib.sha256(
                profile_to_toml(replayed.profile).encode("utf-8")
            ).hexdigest(),
            "own_profile": replayed.own_profile,
            "samples": int(samples.size),
            "samples_sha256": hashlib.sha256(samples.tobytes()).hexdigest(),
            "recorded_samples_sha256": closing.get("streams", {}).get("samples", {}).get("sha256"),
            "estimates_sha256": hashlib.sha256(est.tobytes()).hexdigest(),
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
            "settling": [e for e in replayed.events if e["kind"] == "settling"],
            "alarms": [e for e in replayed.events if e["kind"] == "alarm"],
        }
    )
