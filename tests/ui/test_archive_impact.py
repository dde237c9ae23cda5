"""``forcelens impact`` on a small archive of INVENTED runs made by the simulated cell.

The archive (``invented_archive.py``): two runs of the demo cell (known stiffness
k = 4·10⁵ N/m, u(k) = 800 N/m) holding 0, 50, 0.5, 100 and 0 N, one of them with a
transducer zero offset of 2 µm that the operator zeroes (tares) at 0.3 s; and one run of
another cell, which an assessment of the demo cell must leave out. The corrected profile
raises the stiffness by 0.5 %.
"""

from __future__ import annotations

import csv
import dataclasses
import hashlib
import json
from pathlib import Path

import numpy as np
import pytest

from daq.runs import read_run
from estimator.profile import profile_to_toml, save_profile
from tests.ui.invented_archive import PROFILE, record_run
from ui.archive.impact import CHANGE, READING, assess_run, parse_tolerance
from ui.cli import main
from ui.pipeline import ESTIMATE_STREAM

SHIFT = 0.005  # the corrected stiffness is 1.005 k
OFFSET_M = 2e-6  # invented transducer zero offset of the first run, m


@pytest.fixture(scope="module")
def archive(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Path]:
    base = tmp_path_factory.mktemp("impact")
    root = base / "runs"
    tared = record_run(root, seed=11, zero_offset_m=OFFSET_M, tare_at_s=0.3)
    plain = record_run(root, seed=12)
    other = PROFILE.with_updates(cell=dataclasses.replace(PROFILE.cell, name="other cell"))
    record_run(root, seed=13, profile=other, programme="hold 0.5 0; hold 0.6 20; hold 0.5 0")
    corrected = PROFILE.with_updates(
        plant=dataclasses.replace(
            PROFILE.plant, stiffness_n_per_m=PROFILE.plant.stiffness_n_per_m * (1 + SHIFT)
        )
    )
    save_profile(corrected, base / "corrected.toml")
    return {"base": base, "root": root, "tared": tared, "plain": plain}


def _rows(path: Path) -> list[dict[str, str]]:
    lines = [line for line in path.read_text().splitlines() if not line.startswith("#")]
    return list(csv.DictReader(lines))


def test_a_stiffness_corrected_by_half_a_percent_moves_every_settled_value_by_as_much(
    archive: dict[str, Path],
) -> None:
    toml = (archive["base"] / "corrected.toml").read_text()
    for folder in (archive["tared"], archive["plain"]):
        impact = assess_run(str(folder), corrected_toml=toml, tolerance=None)
        live = read_run(folder).streams[ESTIMATE_STREAM]
        u_run = float(np.median(live["force_u_n"]))
        readings = [r for r in impact.rows if r.kind == READING]
        changes = [r for r in impact.rows if r.kind == CHANGE]
        assert len(readings) >= 5 and len(changes) == 4  # 0, 50, 0.5, 100, 0 N
        for row in readings + changes:
            # F = k·x at rest (Hooke's law, common practice): the same displacement read
            # with 1.005 k gives 1.005 F. The two replays filter the same noise a little
            # differently, so the match is within the observer's standard uncertainty.
            u = (
                float(np.median(live["force_u_n"][row.index : row.end_index]))
                if row.kind == READING
                else u_run
            )
            assert abs(row.diff_n - SHIFT * row.old_n) <= u, row
            # flagged exactly when the shift exceeds the U (k = 2) the value was issued with
            assert row.exceeds == (SHIFT * abs(row.old_n) > row.expanded_u_n), row
        # the invented programme's levels, read back as k·x (Hooke's law)
        assert [r.old_n for r in changes] == pytest.approx([50, 0.5, 100, 0], abs=0.05)
        flagged = {round(r.old_n, 1) for r in changes if r.exceeds}
        assert flagged == {50.0, 100.0}  # U < 0.5 % of the reading only at 50 and 100 N
        top = max(changes, key=lambda r: r.old_n)
        # at 100 N the calibration term dominates: U ≈ 2·F·u(k)/k (JCGM 100:2008, eq. 10,
        # sensitivity ∂F/∂k = F/k) = 2·100·800/4e5 = 0.4 N
        assert top.expanded_u_n == pytest.approx(2 * 100 * 800 / 4e5, rel=0.01)


def test_the_runs_zero_is_applied_in_both_replays(archive: dict[str, Path]) -> None:
    toml = (archive["base"] / "corrected.toml").read_text()
    impact = assess_run(str(archive["tared"]), corrected_toml=toml, tolerance=None)
    readings = [r for r in impact.rows if r.kind == READING]
    before = readings[0]  # before the zero at 0.3 s: the offset read as force
    assert before.time_s < 0.3
    # k·x with x = 2 µm (Hooke's law): 4e5 · 2e-6 = 0.8 N, and 1.005 times that
    assert before.old_n == pytest.approx(0.8, abs=0.01)
    assert before.new_n == pytest.approx(0.8 * (1 + SHIFT), abs=0.01)
    at_50 = next(r for r in readings if 40 < r.old_n < 60)
    # after the zero the offset is gone in both replays (without it: 50.8 and 51.05 N)
    assert at_50.old_n == pytest.approx(50.0, abs=0.05)
    assert at_50.new_n == pytest.approx(50.0 * (1 + SHIFT), abs=0.05)


def test_impact_command_writes_the_table_and_its_record_and_exits_1_when_affected(
    archive: dict[str, Path], capsys: pytest.CaptureFixture[str]
) -> None:
    base, root = archive["base"], archive["root"]
    out = base / "assessment"
    profile = base / "corrected.toml"
    argv = ["impact", "--profile", str(profile), "--root", str(root), "--out", str(out)]
    assert main([*argv, "--workers", "1"]) == 1
    text = capsys.readouterr().out
    assert "runs examined: 2 of 2 selected" in text  # the other cell's run is left out
    assert "running serially in this process: --workers 1" in text
    assert "AFFECTED" in text and "worst: run" in text
    rows = _rows(out / "impact.csv")
    assert {r["run_id"] for r in rows} == {archive["tared"].name, archive["plain"].name}
    assert {r["exceeds"] for r in rows if r["kind"] == READING} == {"yes", "no"}
    record = json.loads((out / "impact.json").read_text())
    assert (
        record["corrected_profile"]["sha256"] == hashlib.sha256(profile.read_bytes()).hexdigest()
    )
    assert record["command"].startswith("forcelens impact --profile")
    assert (out / "corrected-profile.toml").read_bytes() == profile.read_bytes()
    assert "forcelens impact assessment" in (out / "impact.html").read_text()
    # nothing is replaced unasked; with --force and a tolerance of 1 % + 0.01 N nothing
    # exceeds (the shift is 0.5 %; near 0 N the replays differ by noise alone)
    assert main([*argv, "--workers", "1"]) == 1
    assert "exists; give --force" in capsys.readouterr().err
    assert main([*argv, "--workers", "1", "--force", "--tolerance", "1%+0.01N"]) == 0
    text = capsys.readouterr().out
    assert "not affected" in text and "replaced" in text


@pytest.mark.parametrize(
    ("argv", "message"),
    [
        (["--tolerance", "abc"], "--tolerance 'abc': give a force in N"),
        (["--tolerance", "-1"], "--tolerance '-1'"),
        (["--workers", "0"], "--workers 0: give at least 1"),
        (["--since", "last week"], "--since 'last week': give a date YYYY-MM-DD"),
    ],
)
def test_bad_options_are_refused_in_one_line(
    archive: dict[str, Path], capsys: pytest.CaptureFixture[str], argv: list[str], message: str
) -> None:
    base = archive["base"]
    common = ["impact", "--profile", str(base / "corrected.toml"), "--root", str(archive["root"])]
    assert main([*common, "--out", str(base / "refused"), *argv]) == 1
    err = capsys.readouterr().err
    assert message in err and len(err.strip().splitlines()) == 1


def test_a_missing_profile_is_named(
    archive: dict[str, Path], capsys: pytest.CaptureFixture[str]
) -> None:
    missing = archive["base"] / "nope.toml"
    assert main(["impact", "--profile", str(missing), "--root", str(archive["root"])]) == 1
    err = capsys.readouterr().err
    assert "nope.toml" in err and len(err.strip().splitlines()) == 1


def test_tolerance_reads_newtons_and_percent() -> None:
    # the two ways a tolerance is written: an absolute force or a share of the reading
    assert parse_tolerance("0.05").limit_n(100.0) == pytest.approx(0.05)
    assert parse_tolerance("0.05N").limit_n(-3.0) == pytest.approx(0.05)
    assert parse_tolerance("0.1%").limit_n(-200.0) == pytest.approx(0.2)
    assert parse_tolerance("0.1% + 0.01N").limit_n(-200.0) == pytest.approx(0.21)
    for bad in ("1%+2%", "0.1%+", "1+2+3", "0N"):
        with pytest.raises(ValueError, match="--tolerance"):
            parse_tolerance(bad)


def test_a_transducer_sensitivity_corrected_by_half_a_percent_moves_every_value_by_as_much(
    archive: dict[str, Path],
) -> None:
    # The runs keep their raw counts: a transducer recalibrated to 1.005 times the metres
    # per volt reads the same counts as 1.005 times the displacement (the linear chain of
    # daq.scaling, x = (counts·V/count − zero V)·m/V), hence 1.005 F at rest (F = k·x,
    # Hooke's law, common practice), the run's zero carried through the same change.
    tr = PROFILE.transducer
    corrected = PROFILE.with_updates(
        transducer=dataclasses.replace(tr, metres_per_volt=tr.metres_per_volt * (1 + SHIFT))
    )
    impact = assess_run(
        str(archive["tared"]), corrected_toml=profile_to_toml(corrected), tolerance=None
    )
    assert any("derived again from the recorded counts" in n for n in impact.notes)
    live = read_run(archive["tared"]).streams[ESTIMATE_STREAM]
    readings = [r for r in impact.rows if r.kind == READING]
    for row in readings:
        u = float(np.median(live["force_u_n"][row.index : row.end_index]))
        assert abs(row.diff_n - SHIFT * row.old_n) <= u, row
    before = readings[0]  # before the zero at 0.3 s: k·x with x = 2 µm, then 2.01 µm
    assert before.old_n == pytest.approx(0.8, abs=0.01)
    assert before.new_n == pytest.approx(0.8 * (1 + SHIFT), abs=0.01)
    at_50 = next(r for r in readings if 40 < r.old_n < 60)
    assert at_50.new_n == pytest.approx(50.0 * (1 + SHIFT), abs=0.05)


def test_replay_with_a_recalibrated_transducer_reads_the_counts_again(
    archive: dict[str, Path], tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    tr = PROFILE.transducer
    corrected = PROFILE.with_updates(
        transducer=dataclasses.replace(tr, metres_per_volt=tr.metres_per_volt * (1 + SHIFT))
    )
    path = tmp_path / "recalibrated.toml"
    save_profile(corrected, path)
    out = tmp_path / "est.csv"
    folder = archive["tared"]
    assert main(["replay", str(folder), "--profile", str(path), "--out", str(out)]) == 0
    assert "derived again from the recorded counts" in capsys.readouterr().out
    rows = _rows(out)
    force_key = next(k for k in rows[0] if k.startswith("force_n"))
    force = np.array([float(r[force_key]) for r in rows])
    old = read_run(folder).streams[ESTIMATE_STREAM]["force_n"]
    held = np.abs(old - 50.0) < 0.2  # the invented programme's 50 N hold, as read live
    # 1.005 times the displacement at rest reads 1.005 F (Hooke's law), within noise
    assert np.median(force[held]) == pytest.approx(50.0 * (1 + SHIFT), abs=0.05)
