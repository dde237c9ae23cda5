"""Invented displacement records of the simulated demo cell, written as forcelens CSV."""

from __future__ import annotations

from pathlib import Path


def simulated_record_csv(path: Path, programme: str, seed: int = 5) -> Path:
    """The simulated demo cell (invented data) under ``programme`` (the `forcelens
    simulate` syntax), written to ``path`` as ``time_s,displacement_m``; returns ``path``."""
    from daq.csv_dialect import write_csv_table
    from daq.programme import parse_programme
    from estimator.profile import default_demo_profile
    from ui.wiring import scaling_for, simulated_cell_for

    profile = default_demo_profile()
    run = simulated_cell_for(profile, seed=seed).generate(parse_programme(programme))
    write_csv_table(
        path,
        title="invented record (simulated cell)",
        columns=[
            ("time_s", "s", run.device_time_us * 1e-6),
            ("displacement_m", "m", scaling_for(profile).to_metres(run.counts)),
        ],
    )
    return path
