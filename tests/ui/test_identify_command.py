"""``forcelens identify`` on the demo run in recordings/ (invented data)."""

from __future__ import annotations

import math
from pathlib import Path

import pytest

from estimator.profile import default_demo_profile, load_profile
from tests.ui.invented_records import simulated_record_csv
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


def test_tune_refuses_a_csv_without_a_profile(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    # Issue 12's rule: the demo cell's model serves the simulated cell only. A CSV names no
    # cell, and tune used to fit the demo cell's model to it without a word (as replay
    # refuses, it now asks for the profile); with the profile it runs.
    record = simulated_record_csv(tmp_path / "whole.csv", "hold 0.3 0; hold 0.5 50; hold 0.5 0")
    assert main(["tune", str(record)]) == 1
    err = capsys.readouterr().err
    assert "a CSV carries no profile; give --profile FILE" in err and "Traceback" not in err
    assert main(["tune", str(record), "--profile", str(DEMO)]) == 0
    assert "log-likelihood" in capsys.readouterr().out


def test_ringdown_on_a_whole_run_finds_the_free_decay_after_the_release(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    # Issue 12: on a whole run (rest, load, release) identify gave fn = 0.66 Hz and
    # ζ ≈ 5e-29 and exited 0. Reference: the simulated cell integrates the invented demo
    # plant exactly, fn = √(k/m)/2π (textbook), ζ = 0.12; tolerances as in the step test
    # above (1e-3 on k and m, 1e-2 on ζ); and the result of a hand-picked window.
    record = simulated_record_csv(tmp_path / "whole.csv", "hold 0.3 0; hold 0.5 50; hold 0.5 0")
    out = tmp_path / "found.toml"
    assert main(["identify", str(record), "--test", "ringdown", "--profile", str(DEMO),
                 "--out", str(out)]) == 0  # fmt: skip
    text = capsys.readouterr().out
    assert "window found: 0.79" in text  # the release at 0.8 s, not the load at 0.3 s
    found = load_profile(out).plant
    truth = default_demo_profile().plant
    fn_truth = math.sqrt(truth.stiffness_n_per_m / truth.mass_kg) / (2 * math.pi)
    assert found.natural_freq_hz == pytest.approx(fn_truth, rel=1e-3)
    assert found.damping_ratio == pytest.approx(truth.damping_ratio, rel=1e-2)
    picked = tmp_path / "picked.toml"
    assert main(["identify", str(record), "--test", "ringdown", "--from", "0.8", "--to", "0.9",
                 "--profile", str(DEMO), "--out", str(picked)]) == 0  # fmt: skip
    hand = load_profile(picked).plant
    assert found.natural_freq_hz == pytest.approx(hand.natural_freq_hz, rel=1e-3)
    assert found.damping_ratio == pytest.approx(hand.damping_ratio, rel=1e-2)


@pytest.mark.parametrize(
    ("programme", "why"),
    [
        ("hold 1 0", "nothing moves"),  # rest only
        ("hold 0.3 0; hold 0.01 50", "ends while the cell still rings"),  # cut short
    ],
)
def test_ringdown_without_a_usable_decay_is_refused_in_one_line(
    tmp_path: Path, capsys: pytest.CaptureFixture[str], programme: str, why: str
) -> None:
    record = simulated_record_csv(tmp_path / "whole.csv", programme)
    assert main(["identify", str(record), "--test", "ringdown"]) == 1
    err = capsys.readouterr().err
    assert why in err and "--from S --to S" in err
    assert len(err.strip().splitlines()) == 1 and "Traceback" not in err


def test_step_on_a_whole_run_finds_the_load_step(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    # Issue 12: identify --test step on a whole run (rest, load, release) fitted the
    # whole record and refused it ("no step found": it ends where it began). Reference as
    # in the step test above: the simulated cell integrates the invented demo plant
    # exactly (k = 4e5 N/m, m = 0.4 kg, ζ = 0.12); tolerances 1e-3 on k and m, 1e-2 on ζ;
    # and the result of a hand-picked window.
    record = simulated_record_csv(tmp_path / "whole.csv", "hold 0.3 0; hold 0.5 50; hold 0.5 0")
    out = tmp_path / "found.toml"
    assert main(["identify", str(record), "--test", "step", "--step-force-n", "50",
                 "--profile", str(DEMO), "--out", str(out)]) == 0  # fmt: skip
    text = capsys.readouterr().out
    found_line = next(line for line in text.splitlines() if line.startswith("window found"))
    start, end = (float(v) for v in found_line.split(": ")[1].split(",")[0][:-2].split(" s to "))
    assert start < 0.3 < end < 0.8  # the loading at 0.3 s, not the release at 0.8 s
    assert "residual check passed" in text
    found = load_profile(out).plant
    truth = default_demo_profile().plant
    assert found.stiffness_n_per_m == pytest.approx(truth.stiffness_n_per_m, rel=1e-3)
    assert found.mass_kg == pytest.approx(truth.mass_kg, rel=1e-3)
    assert found.damping_ratio == pytest.approx(truth.damping_ratio, rel=1e-2)
    picked = tmp_path / "picked.toml"
    hand_args = ["identify", str(record), "--test", "step", "--from", "0.25", "--to", "0.75"]
    hand_args += ["--step-force-n", "50", "--profile", str(DEMO), "--out", str(picked)]
    assert main(hand_args) == 0
    hand = load_profile(picked).plant
    assert found.natural_freq_hz == pytest.approx(hand.natural_freq_hz, rel=1e-3)
    assert found.damping_ratio == pytest.approx(hand.damping_ratio, rel=1e-2)


@pytest.mark.parametrize(
    ("programme", "why"),
    [
        ("hold 1 0", "nothing moves"),  # rest only
        ("hold 0.3 0; hold 0.01 50", "at rest both before and after"),  # cut short
        ("hold 0.3 0; hold 0.5 0.3; hold 0.3 0", "the largest level change, 0.2"),  # 16σ
    ],
)
def test_step_without_a_usable_step_is_refused_in_one_line(
    tmp_path: Path, capsys: pytest.CaptureFixture[str], programme: str, why: str
) -> None:
    record = simulated_record_csv(tmp_path / "whole.csv", programme)
    assert main(["identify", str(record), "--test", "step"]) == 1
    err = capsys.readouterr().err
    assert why in err and "--from S --to S" in err
    assert len(err.strip().splitlines()) == 1 and "Traceback" not in err
