"""``forcelens calibrate`` on the invented example sheet of docs/calibration-sheet.md."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
import scipy.stats

from daq.calsheet import read_calibration_sheet
from estimator.calibration import forces_from_sheet
from estimator.gravity import normal_gravity_m_s2
from estimator.profile import load_profile
from ui.cli import main

REPO = Path(__file__).resolve().parents[2]
SHEET = REPO / "docs" / "examples" / "invented-calibration-sheet.csv"
DEMO = REPO / "estimator" / "data" / "demo-cell.toml"


def test_calibrate_writes_summary_plots_and_an_updated_profile(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    out = tmp_path / "cal"
    args = ["calibrate", str(SHEET), "--latitude", "45", "--height-m", "100"]
    args += ["--weight-density", "7950", "--profile", str(DEMO), "--out", str(out)]
    assert main(args) == 0
    text = (out / "summary.txt").read_text()
    assert "GRS80 normal gravity at 45.0°" in text and "class A lower force limit" in text
    page = (out / "summary.html").read_text()
    # the heading once (issue 14: it was printed twice, once by the command, once by the fit)
    assert text.splitlines()[0] == f"forcelens static calibration of {SHEET}"
    assert text.lower().count("static calibration") == 1
    assert capsys.readouterr().out.lower().count("static calibration") == 1
    assert page.count("<h1>") == 1 and page.lower().count("static calibration") == 2  # + title
    assert page.count("data:image/png;base64,") == 2  # readable without forcelens
    assert (out / "fit.png").stat().st_size > 1000
    # Independent check of the stiffness: scipy.stats.linregress of the increasing
    # deflections (zero-corrected per series) against the buoyancy-corrected forces.
    sheet = read_calibration_sheet(SHEET)
    g = normal_gravity_m_s2(45.0, 100.0)
    forces = forces_from_sheet(sheet.load, sheet.load_column, g, weight_density_kg_m3=7950.0)
    up = (np.asarray(sheet.direction) == "up") & ~sheet.is_zero
    zero = {}
    for s, z, r in zip(sheet.series, sheet.is_zero, sheet.reading_m, strict=True):
        if z and s not in zero:
            zero[s] = r
    defl = np.array([r - zero[s] for s, r in zip(sheet.series, sheet.reading_m, strict=True)])
    reg = scipy.stats.linregress(forces[up], defl[up])
    profile = load_profile(out / "cell.toml")
    assert profile.plant.stiffness_n_per_m == pytest.approx(1.0 / reg.slope, rel=1e-9)
    assert profile.plant.stiffness_u_n_per_m == pytest.approx(reg.stderr / reg.slope**2, rel=1e-6)
    assert sheet.sha256 in profile.cell.source and profile.cell.calibration_date


def test_masses_need_the_site(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    args = ["calibrate", str(SHEET), "--resolution-m", "1e-7", "--out", str(tmp_path)]
    assert main(args) == 1
    assert "give the site as --latitude" in capsys.readouterr().err


def test_a_sheet_whose_readings_never_change_is_refused(tmp_path: Path, capsys) -> None:
    # Issue 15: all readings equal ended in a ZeroDivisionError traceback.
    rows = []
    for line in SHEET.read_text(encoding="utf-8").splitlines():
        fields = line.split(",")
        if len(fields) == 5 and fields[0].isdigit():
            fields[4] = "0.1"
        rows.append(",".join(fields))
    flat = tmp_path / "flat.csv"
    flat.write_text("\n".join(rows) + "\n", encoding="utf-8")
    argv = ["calibrate", str(flat), "--latitude", "45", "--height-m", "100"]
    assert main([*argv, "--resolution-m", "1e-7", "--out", str(tmp_path / "cal")]) == 1
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "the cell did not deflect" in err
