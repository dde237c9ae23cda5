"""What the first page of a report says: the run, its readings with U, settled or not,
alarms, verification and the commands that reproduce and check it."""

from __future__ import annotations

import shlex
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

__all__ = ["Reading", "ReportSummary", "summarise"]


@dataclass(frozen=True)
class Reading:
    """A held level after a load change: the estimate and its expanded uncertainty (k = 2)."""

    t_start_s: float
    force_n: float
    expanded_u_n: float
    settle_ms: float | None
    #: "49.9990 N ± 0.0050 N": U to two significant digits and the value to the same
    #: decimal place, in the cell's force unit (GUM 7.2.6; `ui.display_units`)
    text: str = ""


@dataclass(frozen=True)
class ReportSummary:
    """The facts of the report's first page."""

    run_id: str
    cell: str
    started_utc: str
    duration_s: float
    samples: int
    note: str
    readings: list[Reading]
    final_state: str
    alarms: int
    verify: str
    reproduce: str
    check: str
    changes: int
    median_settle_ms: float | None
    median_static_settle_ms: float | None
    median_ratio: float | None
    max_overshoot_pct: float | None
    #: the profile states the stiffness's uncertainty (else U leaves calibration out)
    calibration_stated: bool = True


def _median(values: list[Any]) -> float | None:
    finite = [float(v) for v in values if v is not None and np.isfinite(v)]
    return float(np.median(finite)) if finite else None


def summarise(
    replayed: Any, figures: dict[str, Any], folder: Path, out: Path, verify: Any
) -> ReportSummary:
    """The summary of a replayed run and its figures; commands with absolute paths."""
    from estimator.uncertainty import ForceUncertainty
    from ui.display_units import CellUnits

    d = replayed.data.description
    t = replayed.column("time_s")
    n = replayed.rows
    budget = ForceUncertainty.from_profile(replayed.profile)
    u_obs = figures["uncertainty"]["observer_n"] or 0.0
    units = CellUnits.for_profile(replayed.profile)
    readings = []
    for c in figures["changes"]:
        u = float(budget.expanded_n(np.float64(c["after_n"]), np.float64(u_obs)))
        text = f"{units.force_text(c['after_n'], u)} ± {units.u_text(u)}"
        readings.append(Reading(c["t_start_s"], c["after_n"], u, c["settle_ms"], text))
    states = [e.get("new") for e in figures["settling"] if e.get("new")]
    changes = figures["changes"]
    run = shlex.quote(str(folder.resolve()))
    where = shlex.quote(str(out.resolve()))
    if verify.ok:
        verified = "OK: closed, every file matches its closing record"
    else:
        verified = "NOT OK: " + "; ".join(verify.problems)
    return ReportSummary(
        run_id=d["run_id"],
        cell=replayed.profile.cell.name,
        started_utc=d["started_utc"],
        duration_s=float(t.read(n - 1, n)[0] - t.read(0, 1)[0]) if n > 1 else 0.0,
        samples=int(n),
        note=d["operator_note"],
        readings=readings,
        final_state=states[-1] if states else "never settled",
        alarms=len(figures["alarms"]),
        verify=verified,
        calibration_stated=replayed.profile.plant.stiffness_u_n_per_m > 0.0,
        reproduce=f"forcelens report {run} --out {where} --force",
        check=f"forcelens audit {run} --report {where}",
        changes=len(changes),
        median_settle_ms=_median([c["settle_ms"] for c in changes]),
        median_static_settle_ms=_median([c["static_settle_ms"] for c in changes]),
        median_ratio=_median([c["ratio"] for c in changes]),
        max_overshoot_pct=max(
            (c["overshoot_pct"] for c in changes if c["overshoot_pct"] is not None), default=None
        ),
    )
