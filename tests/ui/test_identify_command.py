"""``forcelens identify`` on the demo run in recordings/ (invented data)."""

from __future__ import annotations

from pathlib import Path

import pytest

from estimator.profile import default_demo_profile, load_profile
from ui.cli import main

RUN = sorted((Path(__file__).resolve().parents[2] / "recordings").glob("*/run.json"))[0].parent
DEMO = Path(__file__).resolve().parents[2] / "estimator" / "data" / "demo-cell.toml"


def test_step_identification_recovers_the_simulated_cell_and_writes_a_profile(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    # The demo run's 0 → 50 N step at 0.3 s. The simulated cell (an exact integrator of
    # the invented demo plant: 0.4 kg, 4e5 N/m, ζ = 0.12) is the reference; tolerances are
    # a few of the stated standard uncertainties plus the simulator's own discretisation.
    out = tmp_path / "cell.toml"
    args = ["identify", str(RUN), "--test", "step", "--from", "0.25", "--to", "0.99"]
    args += ["--step-force-n", "50", "--profile", str(DEMO), "--out", str(out)]
    assert main(args) == 0
    text = capsys.readouterr().out
    assert "residual check passed" in text and "standard uncertainties, k = 1" in text
    plant = load_profile(out).plant
    truth = default_demo_profile().plant
    assert plant.stiffness_n_per_m == pytest.approx(truth.stiffness_n_per_m, rel=1e-3)
    assert plant.mass_kg == pytest.approx(truth.mass_kg, rel=1e-3)
    assert plant.damping_ratio == pytest.approx(truth.damping_ratio, rel=1e-2)
    assert "step identification" in load_profile(out).cell.source


def test_out_needs_a_profile(capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["identify", str(RUN), "--test", "step", "--out", "x.toml"]) == 1
    assert "give --profile too" in capsys.readouterr().err


def test_tune_estimates_the_noise_and_writes_a_tuned_profile(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    out = tmp_path / "tuned.toml"
    args = ["tune", str(RUN), "--quiet-from", "0.05", "--quiet-to", "0.28", "--out", str(out)]
    assert main(args) == 0
    text = capsys.readouterr().out
    assert "not fitted" in text and "tuned" in text and "held noise" in text
    tuned = load_profile(out)
    # The demo run's simulated noise is 50 nm (invented); 460 samples give a relative
    # standard error of about 3.3 % on a standard deviation: 15 % is over four of those.
    assert tuned.transducer.noise_m == pytest.approx(5e-8, rel=0.15)
    assert "tuned" in tuned.cell.source and tuned.observer.process_noise_n2_per_s > 0


def test_tune_fits_the_noise_on_the_whole_record_without_a_quiet_stretch(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    out = tmp_path / "tuned.toml"
    assert main(["tune", str(RUN), "--out", str(out)]) == 0
    # The whole demo run (rest, a 50 N step, rest), no quiet stretch named: the
    # likelihood fit finds the simulator's 50 nm noise (invented; a 10 % grid step).
    assert load_profile(out).transducer.noise_m == pytest.approx(5e-8, rel=0.12)
    assert "log-likelihood" in capsys.readouterr().out
