"""The model in force, in words, against loads whose shape is known by construction."""

from __future__ import annotations

import math

import numpy as np

from daq.programme import parse_programme
from daq.simulator import SimulatedCell
from estimator.profile import default_demo_profile
from ui.model_in_force import model_in_force
from ui.pipeline import estimate_samples
from ui.wiring import scaling_for

PROFILE = default_demo_profile()


def _estimates(programme: str) -> np.ndarray:
    """The demo cell (invented) under `programme`, through the live estimation path."""
    pl, tr = PROFILE.plant, PROFILE.transducer
    scaling = scaling_for(PROFILE)
    cell = SimulatedCell(
        pl.mass_kg, pl.stiffness_n_per_m, pl.damping_ratio, tr.noise_m, scaling,
        PROFILE.acquisition.sample_rate_hz, seed=5,
    )  # fmt: skip
    run = cell.generate(parse_programme(programme))
    block = run.sample_block(scaling, host_time_s=run.time_s)
    return estimate_samples(PROFILE, block)


def _words(row: np.void) -> str:
    return model_in_force(row["p_hold"], row["p_rate"], row["p_jump"]).headline()


def test_a_held_load_reads_steady_and_a_ramp_reads_moving() -> None:
    # Invented programme: 0.3 s unloaded, a step to 40 N held 0.5 s, then a ramp of
    # 100 N/s for 0.5 s. By construction the load is constant in the hold and changes
    # at a constant rate in the ramp; the words must say so once the observer has had
    # 0.2 s of each.
    est = _estimates("hold 0.3 0; hold 0.5 40; ramp 0.5 90")
    t = est["time_s"]
    held = est[(t > 0.6) & (t < 0.8)]
    ramp = est[(t > 1.0) & (t < 1.3)]
    assert np.mean([_words(r).startswith("steady load") for r in held]) > 0.9
    assert np.mean([_words(r).startswith("moving load") for r in ramp]) > 0.9


def test_the_words_for_undecided_and_unknown() -> None:
    assert model_in_force(0.45, 0.45, 0.10).headline() == "undecided"
    assert model_in_force(0.02, 0.03, 0.95).headline() == "sudden change (95 %)"
    nan = math.nan
    assert model_in_force(nan, nan, nan).headline() == "—"
    assert model_in_force(0.98, 0.02, 0.0).detail() == "steady 98 % · moving 2 % · sudden 0 %"
