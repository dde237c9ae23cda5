"""Tests of `forcelens profile new` and `forcelens profile show`."""

from __future__ import annotations

import argparse
import math
import re
from collections.abc import Sequence
from pathlib import Path

import pytest

import ui.cli
import ui.commands.profile
from estimator.errors import ProfileError
from estimator.profile import default_demo_profile, load_profile, save_profile
from ui.outputs import OutputRefusedError

DEMO_FILE = Path(__file__).resolve().parents[2] / "estimator" / "data" / "demo-cell.toml"


def run(argv: Sequence[str]) -> int:
    """Parse ``argv`` with a parser holding only the profile command, then run it."""
    parser = argparse.ArgumentParser(prog="forcelens")
    sub = parser.add_subparsers(dest="command")
    ui.commands.profile.register(sub)
    args = parser.parse_args(list(argv))
    return args.run(args)


def new_args(out: Path, *extra: str) -> list[str]:
    return [
        "profile",
        "new",
        str(out),
        "--stiffness-n-per-m",
        "250000",
        "--damping-ratio",
        "0.08",
        "--noise-m",
        "4e-8",
        "--resolution-m",
        "7.5e-11",
        "--sample-rate-hz",
        "5000",
        "--force-max-n",
        "50",
        *extra,
    ]


def test_new_with_mass_writes_a_profile_with_the_requested_values(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    out = tmp_path / "bench-cell.toml"
    extra = ("--mass-kg", "0.25", "--bandwidth-hz", "35", "--travel-m", "1e-3")
    assert run(new_args(out, *extra)) == 0
    profile = load_profile(out)
    assert profile.cell.name == "bench-cell"  # default name: the file name without extension
    assert profile.plant.mass_kg == 0.25
    assert profile.plant.stiffness_n_per_m == 250000.0
    assert profile.plant.damping_ratio == 0.08
    assert profile.transducer.noise_m == 4e-8
    assert profile.transducer.volts_per_count == 20 / 2**24  # the documented default
    # R is stored as metres_per_volt = R / volts_per_count and read back as a product:
    # two roundings, so rel 1e-15 (a few ulps) is the honest tolerance.
    assert profile.transducer.resolution_m == pytest.approx(7.5e-11, rel=1e-15)
    assert profile.acquisition.sample_rate_hz == 5000.0
    assert profile.acquisition.port == ""
    assert profile.observer.force_bandwidth_hz == 35.0
    assert profile.limits.force_min_n == 0.0  # documented default
    assert profile.limits.force_max_n == 50.0
    assert profile.limits.travel_m == 1e-3
    printed = capsys.readouterr().out
    assert str(out) in printed
    # Printed derived values, recomputed here from handbook relations:
    # ωn = sqrt(k/m), c = 2ζ·sqrt(k·m), static resolution k·R.
    k, m, zeta = 250000.0, 0.25, 0.08
    assert f"{math.sqrt(k / m) / (2 * math.pi):.6g} Hz" in printed
    assert f"{2 * zeta * math.sqrt(k * m):.6g} N·s/m" in printed
    assert f"{k * 7.5e-11:.6g} N" in printed


def test_new_with_natural_frequency_derives_the_mass(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    out = tmp_path / "cell.toml"
    f_hz = 123.0
    assert run(new_args(out, "--natural-frequency-hz", str(f_hz), "--name", "rig A")) == 0
    profile = load_profile(out)
    assert profile.cell.name == "rig A"
    k = profile.plant.stiffness_n_per_m
    # Handbook relation ωn = sqrt(k/m) with ωn = 2π·f, checked in the inverse direction
    # from the stored mass. rel 1e-14: a handful of roundings in square, sqrt and divide.
    assert math.sqrt(k / profile.plant.mass_kg) / (2 * math.pi) == pytest.approx(f_hz, rel=1e-14)
    assert profile.plant.natural_freq_hz == pytest.approx(f_hz, rel=1e-14)
    assert f"{f_hz:.6g} Hz" in capsys.readouterr().out


def test_new_takes_the_plant_s_uncertainties_and_says_when_the_stiffness_s_is_missing(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    # A bench-day walk made its profile the README's way: no option took the stiffness's
    # uncertainty, and the report then stated U = 0.005 N at 50 N with a calibration term
    # of 0 N. The options exist now, and their absence is said.
    out = tmp_path / "cell.toml"
    extra = ("--mass-kg", "0.25", "--stiffness-u-n-per-m", "500", "--mass-u-kg", "1e-3")
    assert run(new_args(out, *extra, "--damping-ratio-u", "2e-4")) == 0
    plant = load_profile(out).plant
    assert (plant.stiffness_u_n_per_m, plant.mass_u_kg, plant.damping_ratio_u) == (
        500.0,
        1e-3,
        2e-4,
    )
    assert "no stiffness uncertainty" not in capsys.readouterr().out
    assert run(new_args(tmp_path / "bare.toml", "--mass-kg", "0.25")) == 0
    assert load_profile(tmp_path / "bare.toml").plant.stiffness_u_n_per_m == 0.0
    assert "note: no stiffness uncertainty given" in capsys.readouterr().out


def test_new_refuses_to_overwrite_without_force(tmp_path: Path) -> None:
    out = tmp_path / "cell.toml"
    out.write_text("keep me", encoding="utf-8")
    with pytest.raises(OutputRefusedError, match="exists; give --force"):
        run(new_args(out, "--mass-kg", "0.3"))
    assert out.read_text(encoding="utf-8") == "keep me"
    assert run(new_args(out, "--mass-kg", "0.3", "--force")) == 0
    assert load_profile(out).plant.mass_kg == 0.3


def test_new_refuses_invalid_values_and_writes_nothing(tmp_path: Path) -> None:
    out = tmp_path / "cell.toml"
    argv = new_args(out, "--mass-kg", "0.3")
    argv[argv.index("--damping-ratio") + 1] = "0"
    with pytest.raises(ProfileError, match="damping_ratio"):
        run(argv)
    with pytest.raises(ValueError, match="--resolution-m"):
        run(new_args(out, "--mass-kg", "0.3", "--resolution-m=-1e-9"))
    with pytest.raises(ValueError, match="--natural-frequency-hz"):
        run(new_args(out, "--natural-frequency-hz", "0"))
    assert not out.exists()


def test_new_needs_exactly_one_of_mass_and_natural_frequency(tmp_path: Path) -> None:
    out = tmp_path / "cell.toml"
    with pytest.raises(SystemExit):
        run(new_args(out))
    with pytest.raises(SystemExit):
        run(new_args(out, "--mass-kg", "0.3", "--natural-frequency-hz", "100"))
    assert not out.exists()


def test_show_prints_a_summary_with_units(capsys: pytest.CaptureFixture[str]) -> None:
    assert run(["profile", "show", str(DEMO_FILE)]) == 0
    out = capsys.readouterr().out
    demo = default_demo_profile()
    assert demo.cell.name in out
    assert f"{demo.plant.mass_kg:.6g} kg" in out
    assert f"{demo.plant.natural_freq_hz:.6g} Hz" in out
    assert "N/m" in out
    assert "never" in out  # calibration_date ""


def test_show_names_the_bias_of_a_count_coarser_than_the_noise(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    # An invented cell read by an ADC whose count is 4 noise σ: the bias that averaging
    # leaves (estimator.quantisation; checked there against scipy.stats.norm) is shown in
    # metres and newtons. The demo cell's 24-bit reading has none, and no such line.
    out = tmp_path / "coarse.toml"
    argv = new_args(out, "--mass-kg", "0.3")
    argv[argv.index("--resolution-m") + 1] = "1.6e-7"
    assert run(argv) == 0
    capsys.readouterr()
    assert run(["profile", "show", str(out)]) == 0
    line = next(x for x in capsys.readouterr().out.splitlines() if "quantisation bias" in x)
    bias_m = float(line.split()[2])
    # the series' first term, (Δ/π)·exp(−2π²σ²/Δ²)/√2, is 0.0655 of a count here
    leading = 1.6e-7 / math.pi * math.exp(-2 * math.pi**2 / 16) / math.sqrt(2)
    assert bias_m == pytest.approx(leading, rel=0.01)
    assert f"{250000 * bias_m:.3g} N" in line
    assert run(["profile", "show", str(DEMO_FILE)]) == 0
    assert "quantisation bias" not in capsys.readouterr().out


def test_show_refuses_a_broken_profile(tmp_path: Path) -> None:
    path = tmp_path / "broken.toml"
    path.write_text(
        DEMO_FILE.read_text(encoding="utf-8").replace("gate_sigma = 5.0", "gate_sigma = 0.5"),
        encoding="utf-8",
    )
    with pytest.raises(ProfileError, match=r"broken.toml: \[observer\] gate_sigma = 0.5"):
        run(["profile", "show", str(path)])


def test_profile_without_action_prints_help(capsys: pytest.CaptureFixture[str]) -> None:
    assert run(["profile"]) == 2
    assert "new" in capsys.readouterr().out


# --------------------------------------------------------- through the real entry point


def test_cli_main_show_broken_file_exits_1_naming_the_key(
    tmp_path: Path, capsys: pytest.CaptureFixture[str], monkeypatch: pytest.MonkeyPatch
) -> None:
    # Only the profile command is registered, so this runs whatever state the
    # sibling command modules are in.
    monkeypatch.setattr(ui.cli, "COMMAND_MODULES", ("profile",))
    path = tmp_path / "cell.toml"
    save_profile(default_demo_profile(), path)
    path.write_text(
        path.read_text(encoding="utf-8").replace("baudrate = 921600", 'baudrate = "fast"'),
        encoding="utf-8",
    )
    assert ui.cli.main(["profile", "show", str(path)]) == 1
    captured = capsys.readouterr()
    assert "forcelens profile: error:" in captured.err
    assert "[acquisition] baudrate" in captured.err
    assert captured.out == ""


def test_cli_main_with_every_command_module(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    for name in ui.cli.COMMAND_MODULES:
        pytest.importorskip(f"ui.commands.{name}")
    out = tmp_path / "cell.toml"
    assert ui.cli.main(new_args(out, "--mass-kg", "0.2")) == 0
    assert load_profile(out).plant.mass_kg == 0.2
    capsys.readouterr()
    assert ui.cli.main(new_args(out, "--mass-kg", "0.3")) == 1  # exists, no --force
    assert "--force" in capsys.readouterr().err
    assert load_profile(out).plant.mass_kg == 0.2
    out.write_text("version = 99\n", encoding="utf-8")
    assert ui.cli.main(["profile", "show", str(out)]) == 1
    assert "format" in capsys.readouterr().err


@pytest.mark.parametrize(
    ("option", "value", "words"),
    [
        # Issue 15: a ZeroDivisionError and an OverflowError traceback before.
        ("--volts-per-count", "0", "--volts-per-count = 0.0: must be a finite number > 0"),
        ("--natural-frequency-hz", "1e200", "below the Nyquist frequency"),
    ],
)
def test_new_refuses_impossible_values_in_one_line(
    tmp_path: Path, option: str, value: str, words: str
) -> None:
    out = tmp_path / "cell.toml"
    argv = new_args(out, "--natural-frequency-hz", "100")
    argv += [option, value]
    with pytest.raises(ValueError, match=re.escape(words)):
        run(argv)
    assert not out.exists()
