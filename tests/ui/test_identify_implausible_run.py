"""``identify`` and ``tune`` on a run folder apply the limits a CSV's rows meet
(`daq.samples.TIME_MAX_S`, `DISPLACEMENT_MAX_M`; issue 15): a sealed run whose samples
hold a displacement of 1e308 m is refused in one line naming the sample, not overflowed.
Such a run cannot come from the pipeline (it refuses those values); it is written here
with the run writer directly. Invented data.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from daq.runs import RunWriter
from daq.samples import empty_block
from estimator.profile import default_demo_profile, profile_to_toml
from ui.cli import main


def _run(root: Path, field: str, value: float) -> Path:
    profile = default_demo_profile()
    n = 400
    block = empty_block(n)
    block["seq"] = np.arange(n)
    block["device_time_s"] = np.arange(n) / 2000.0
    block["host_time_s"] = np.nan
    block["displacement_m"] = 2.5e-5
    block[field][123] = value
    writer = RunWriter.new(
        root,
        cell_name=profile.cell.name,
        profile_toml=profile_to_toml(profile),
        software_version="test",
    )
    writer.append(block)
    writer.close("complete", {"samples": n})
    return writer.folder


@pytest.mark.parametrize(
    ("field", "value", "words"),
    [
        ("displacement_m", 1e308, "displacement_m = 1e+308, 1 m or more from zero"),
        ("device_time_s", 1.7e308, "device_time_s = 1.7e+308, 1e+12 s or more from zero"),
    ],
)
@pytest.mark.parametrize("command", [["identify", "--test", "step"], ["tune"]])
def test_a_run_with_an_implausible_sample_is_refused(
    tmp_path: Path,
    capsys: pytest.CaptureFixture[str],
    field: str,
    value: float,
    words: str,
    command: list[str],
) -> None:
    folder = _run(tmp_path / "runs", field, value)
    status = main([command[0], str(folder), *command[1:]])
    err = capsys.readouterr().err
    assert status == 1, err
    assert f"sample 123 (seq 123) has {words}" in err
    assert "Traceback" not in err
