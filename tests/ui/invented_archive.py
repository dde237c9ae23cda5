"""Small archives of INVENTED runs for the archive-job tests and benchmark.

Each run is made by the simulated cell (``daq.simulator``) with a known stiffness, and
recorded in-process the way ``forcelens live --record`` records: samples and live
estimates through the estimation pipeline, a zero (tare) event when asked, a closing
record, an entry in the catalogue. The data are invented: they describe no real cell or
test.
"""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path

from daq.programme import parse_programme
from daq.simulator import SimulatedCell
from estimator.profile import CellProfile, default_demo_profile
from ui.pipeline import EstimationPipeline
from ui.recording import open_recording
from ui.wiring import scaling_for

#: The invented demo cell every run is made with unless another profile is given.
PROFILE = default_demo_profile()
#: Loads of the default programme, N: 0 and 0.5 N (where U exceeds 0.5 % of the
#: reading), 50 and 100 N (where it does not), then back to 0.
DEFAULT_PROGRAMME = "hold 0.5 0; hold 0.6 50; hold 0.6 0.5; hold 0.6 100; hold 0.5 0"


def record_run(
    root: Path,
    *,
    seed: int,
    programme: str = DEFAULT_PROGRAMME,
    profile: CellProfile = PROFILE,
    zero_offset_m: float = 0.0,
    tare_at_s: float | None = None,
    tags: Sequence[str] = ("invented",),
    note: str = "invented run (simulated cell)",
    block: int = 257,
) -> Path:
    """Record one invented run under ``root``; its folder.

    ``zero_offset_m`` is a transducer zero offset the simulated cell adds to every
    reading; ``tare_at_s`` zeroes (tares) once at that time, as an operator pressing zero
    on the unloaded cell would.
    """
    pl, tr = profile.plant, profile.transducer
    cell = SimulatedCell(
        mass_kg=pl.mass_kg,
        stiffness_n_per_m=pl.stiffness_n_per_m,
        damping_ratio=pl.damping_ratio,
        noise_m=tr.noise_m,
        scaling=scaling_for(profile),
        sample_rate_hz=profile.acquisition.sample_rate_hz,
        seed=seed,
        zero_offset_m=zero_offset_m,
    )
    run = cell.generate(parse_programme(programme))
    samples = run.sample_block(scaling_for(profile))
    rec = open_recording(root, profile, note=note, tags=tags)
    pipe = EstimationPipeline(profile, recorder=rec.writer)
    tare_index = (
        None if tare_at_s is None else round(tare_at_s * profile.acquisition.sample_rate_hz)
    )
    start = 0
    while start < samples.size:
        stop = min(samples.size, start + block)
        if tare_index is not None and start < tare_index <= stop:
            stop = tare_index
        pipe.process(samples[start:stop])
        if stop == tare_index:
            pipe.tare()
        start = stop
    rec.close("complete", {"samples": int(samples.size)})
    return rec.folder
