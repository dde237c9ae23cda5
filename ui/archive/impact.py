"""Impact of a corrected profile on one run: its settled readings and load changes, old and new.

`assess_run` replays a run twice through the live pipeline (``ui.figures.replay_run``):
with the profile recorded with it, and with the corrected one. Both replays apply the
run's own zero (tare) events at the same samples, since the pipeline takes them from the
event log, not from the profile. Then:

* **settled readings**: each time the settling monitor (``estimator.monitor``, as the
  replay logs it) enters ``settled``, the reading is the mean force estimate from that
  sample until the monitor leaves ``settled`` (or the run ends). The same samples are
  averaged in the corrected replay, so old and new describe the same moment;
* **load changes**: the change table of each replay (``ui.figures.compute_figures``,
  which uses ``estimator.metrics.change_table`` exactly as a report does); each change
  of the old replay is paired with the change of the corrected replay that starts
  nearest to it, within a quarter of a second. Its value is the level reached after the
  change ("to N" in a report), with the settling times alongside.

A difference is compared with the expanded uncertainty U (k = 2) the old value was
issued with: the GUM combination of ``estimator.uncertainty`` for the run's own profile,
with the observer's standard uncertainty (the median over the reading's samples; over the
run for a load change, as a report does). With a tolerance, the tolerance replaces U.

Everything here depends on the run alone, so a worker process can compute it; the
results are plain frozen values.
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass
from pathlib import Path
from typing import Any

__all__ = [
    "CHANGE",
    "READING",
    "ImpactRow",
    "RunImpact",
    "Tolerance",
    "assess_run",
    "impact_task",
    "parse_tolerance",
]

#: Row kinds.
READING = "reading"
CHANGE = "change"
#: A load change of the old replay pairs with one of the corrected replay that starts
#: within this time of it, s (half the change table's shortest hold of 0.5 s).
PAIRING_S = 0.25


@dataclass(frozen=True)
class Tolerance:
    """The largest difference accepted instead of U: ``fraction`` of the old value plus
    ``absolute_n`` N (``text`` as the user wrote it)."""

    fraction: float
    absolute_n: float
    text: str

    @property
    def relative(self) -> bool:
        """True when the limit depends on the value."""
        return self.fraction > 0

    def limit_n(self, old_n: float) -> float:
        """The limit for a value ``old_n``, N."""
        return self.fraction * abs(old_n) + self.absolute_n


def parse_tolerance(text: str) -> Tolerance:
    """``0.05`` or ``0.05N`` (newtons), ``0.1%`` (of each old value), or both added as
    ``0.1%+0.005N`` (a share of the reading with a floor for readings near zero).

    Raises ValueError naming the option for anything else, or a part not > 0.
    """
    fraction = absolute = 0.0
    parts = [p.strip() for p in text.split("+")]
    ok = 1 <= len(parts) <= 2
    for part in parts if ok else []:
        relative = part.endswith("%")
        number = part[:-1] if relative else part.removesuffix("N").removesuffix("n")
        try:
            value = float(number)
        except ValueError:
            value = math.nan
        if not (math.isfinite(value) and value > 0) or (fraction if relative else absolute):
            ok = False
            break
        if relative:
            fraction = value / 100.0
        else:
            absolute = value
    if not ok:
        raise ValueError(
            f"--tolerance {text!r}: give a force in N (0.05 or 0.05N), a share of each "
            "value (0.1%), or both added (0.1%+0.005N); each > 0"
        )
    return Tolerance(fraction, absolute, text.strip())


@dataclass(frozen=True)
class ImpactRow:
    """One settled reading or load change, old against new.

    Attributes:
        kind: ``"reading"`` or ``"change"``.
        index: stream position of its first sample (reading: entry into settled;
            change: its start).
        time_s: that sample's time, s.
        old_n: the value with the run's own profile, N.
        new_n: the value with the corrected profile, N (NaN: no matching change).
        expanded_u_n: U (k = 2) of the old value, N.
        limit_n: the difference allowed (U, or the tolerance), N.
        end_index: for a reading, the stream position after its last sample.
        old_settle_ms, new_settle_ms: for a change, its settling time in each replay.
    """

    kind: str
    index: int
    time_s: float
    old_n: float
    new_n: float
    expanded_u_n: float
    limit_n: float
    end_index: int | None = None
    old_settle_ms: float | None = None
    new_settle_ms: float | None = None

    @property
    def diff_n(self) -> float:
        """``new_n − old_n``, N (NaN when there is no new value)."""
        return self.new_n - self.old_n

    @property
    def exceeds(self) -> bool:
        """True when the difference exceeds the limit, or there is no new value to compare."""
        d = self.diff_n
        return not math.isfinite(d) or abs(d) > self.limit_n

    @property
    def ratio(self) -> float:
        """``|difference| / limit`` (inf without a new value or with a zero limit)."""
        d = abs(self.diff_n)
        if not math.isfinite(d):
            return math.inf
        return d / self.limit_n if self.limit_n > 0 else (math.inf if d > 0 else 0.0)


@dataclass(frozen=True)
class RunImpact:
    """The impact on one run.

    Attributes:
        run_id, folder, started_utc, cell_name: the run.
        samples: samples replayed.
        samples_sha256: SHA-256 of the samples file as recorded in its closing record
            (None for a run that was never closed).
        own_profile_sha256: SHA-256 of the profile text the run was recorded with.
        rows: readings, then load changes, each in time order.
        notes: what the reader of the assessment should know about this run.
    """

    run_id: str
    folder: str
    started_utc: str
    cell_name: str
    samples: int
    samples_sha256: str | None
    own_profile_sha256: str
    rows: tuple[ImpactRow, ...]
    notes: tuple[str, ...] = ()


def impact_task(corrected_toml: str, tolerance: Tolerance | None) -> Any:
    """`assess_run` with the corrected profile and tolerance bound: a task of one folder."""
    return functools.partial(assess_run, corrected_toml=corrected_toml, tolerance=tolerance)


def assess_run(folder: str, *, corrected_toml: str, tolerance: Tolerance | None) -> RunImpact:
    """Replay the run in ``folder`` with its own profile and with ``corrected_toml``.

    Raises ValueError (``daq.errors.RunFormatError``) when the run cannot be read: a
    missing or torn file, a SHA-256 that does not match the closing record.
    """
    from ui.figures import compute_figures, replay_run
    from ui.wiring import profile_from_text

    corrected = profile_from_text(corrected_toml, "the corrected profile")
    old = replay_run(folder, compare_live=True)  # the SHA-256 of every file is checked here
    try:
        new = replay_run(folder, profile=corrected, check_hash=False)
    except BaseException:
        old.close()
        raise
    try:
        old_fig, new_fig = compute_figures(old), compute_figures(new)
        budget = _budget(old.profile)
        notes = _notes(old, corrected)
        if old.live is not None and (not old.live.identical or old.live.live_rows != old.rows):
            notes.append(
                "the replay with the run's own profile differs from the estimates computed "
                f"live (recorded with {old.data.description['software_version']}); old values "
                "are the replay's"
            )
        rows = _readings(old, new, budget, tolerance) + _changes(
            old, old_fig, new_fig, budget, tolerance
        )
    finally:
        old.close()
        new.close()
    d = old.data.description
    return RunImpact(
        run_id=str(d["run_id"]),
        folder=str(Path(folder)),
        started_utc=str(d["started_utc"]),
        cell_name=str(d["cell_name"]),
        samples=int(old_fig["samples"]),
        samples_sha256=old_fig["recorded_samples_sha256"],
        own_profile_sha256=str(old_fig["profile_sha256"]),
        rows=tuple(rows),
        notes=tuple(notes),
    )


def _budget(profile: Any) -> Any:
    from estimator.uncertainty import ForceUncertainty

    return ForceUncertainty.from_profile(profile)


def _limit(budget: Any, tolerance: Tolerance | None, old_n: float, u_obs: float) -> tuple:
    expanded = float(budget.expanded_n(old_n, u_obs))
    return expanded, (tolerance.limit_n(old_n) if tolerance else expanded)


def _notes(old: Any, corrected: Any) -> list[str]:
    notes = []
    if old.profile.transducer != corrected.transducer:
        notes.append(
            "the corrected profile changes [transducer]: the displacements were derived "
            "again from the recorded counts, and the run's zeros with them"
        )
    if old.profile.cell.name != corrected.cell.name:
        notes.append(
            f"recorded for the cell {old.profile.cell.name!r}; the corrected profile names "
            f"{corrected.cell.name!r}"
        )
    return notes


def _readings(old: Any, new: Any, budget: Any, tolerance: Tolerance | None) -> list[ImpactRow]:
    """One row per entry into ``settled`` in the old replay (see the module docstring)."""
    import itertools

    import numpy as np

    from estimator.monitor import SETTLED, SETTLING_EVENT

    # (sample, new state) of each transition: small however many there are
    changes = [(int(e["index"]), e["new"]) for e in old.events if e["kind"] == SETTLING_EVENT]
    n = old.rows
    old_force, new_force = old.column("force_n"), new.column("force_n")
    old_u = old.column("force_u_n")
    rows = []
    for i, (start, state) in enumerate(changes):
        if state != SETTLED:
            continue
        later = itertools.islice(changes, i + 1, None)
        stop = next((index for index, _ in later if index > start), n)
        a, b = old_force.read(start, stop), new_force.read(start, stop)
        u = old_u.read(start, stop)
        ok = np.isfinite(a) & np.isfinite(b) & np.isfinite(u)
        if not ok.any():
            continue
        old_n, new_n = float(np.mean(a[ok])), float(np.mean(b[ok]))
        expanded, limit = _limit(budget, tolerance, old_n, float(np.median(u[ok])))
        rows.append(
            ImpactRow(
                READING,
                start,
                float(old.column("time_s").read(start, start + 1)[0]),
                old_n,
                new_n,
                expanded,
                limit,
                end_index=stop,
            )
        )
    return rows


def _changes(
    old: Any, old_fig: dict, new_fig: dict, budget: Any, tolerance: Tolerance | None
) -> list[ImpactRow]:
    """One row per load change of the old replay, paired with the corrected replay's."""
    import numpy as np

    from estimator import exact_quantiles
    from estimator.columns import blocks
    from ui.column_files import searchsorted

    force, u_all = old.column("force_n"), old.column("force_u_n")

    def finite() -> Any:
        for a, f in blocks(force):
            u = u_all.read(a, a + f.size)
            yield u[np.isfinite(f) & np.isfinite(u)]

    u_obs = exact_quantiles.median(finite) if any(v.size for v in finite()) else math.nan
    times = old.column("time_s")
    unused = list(new_fig["changes"])
    rows = []
    for change in old_fig["changes"]:
        t0 = change["t_start_s"]
        match = min(unused, key=lambda c: abs(c["t_start_s"] - t0), default=None)
        if match is not None and abs(match["t_start_s"] - t0) <= PAIRING_S:
            unused.remove(match)
        else:
            match = None
        old_n = change["after_n"]
        expanded, limit = _limit(budget, tolerance, old_n, u_obs)
        rows.append(
            ImpactRow(
                CHANGE,
                searchsorted(times, t0),
                float(t0),
                float(old_n),
                float(match["after_n"]) if match else math.nan,
                expanded,
                limit,
                old_settle_ms=change["settle_ms"],
                new_settle_ms=match["settle_ms"] if match else None,
            )
        )
    return rows
