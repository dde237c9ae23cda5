"""End-to-end tests of the forcelens command line (invented cell and data)."""

from __future__ import annotations

import csv
import math
import subprocess
import sys
from pathlib import Path

import numpy as np

from daq.csv_table import read_csv_table
from daq.runs import read_run
from estimator.observer import ForceObserver
from estimator.smoother import smooth_record
from ui.cli import main
from ui.wiring import profile_from_text

ROOT = Path(__file__).resolve().parents[2]


def test_help_does_not_import_qt() -> None:
    code = (
        "import sys\n"
        "from ui.cli import main\n"
        "try:\n    main(['--help'])\nexcept SystemExit:\n    pass\n"
        "bad = [m for m in sys.modules if m.startswith(('PySide6', 'pyqtgraph'))]\n"
        "assert not bad, bad\n"
    )
    subprocess.run([sys.executable, "-c", code], check=True, capture_output=True)


def test_replay_csv_with_steps_alone_prints_the_load_changes(tmp_path: Path, capsys) -> None:
    # `replay RUN --steps` needs no --out; a CSV was refused without one even when only the
    # table of load changes was asked for. Invented programme: rest, then 30 N.
    from estimator.profile import default_demo_profile, save_profile
    from tests.ui.invented_records import simulated_record_csv

    prof = tmp_path / "cell.toml"
    save_profile(default_demo_profile(), prof)
    src = simulated_record_csv(tmp_path / "in.csv", "hold 0.3 0; hold 0.5 30", seed=3)
    assert main(["replay", str(src), "--profile", str(prof), "--steps"]) == 0
    rows = [line.split() for line in capsys.readouterr().out.splitlines() if line[:1] == "1"]
    assert len(rows) == 1 and abs(float(rows[0][3]) - 30.0) < 0.1  # "after N": the 30 N held
    assert main(["replay", str(src), "--profile", str(prof)]) == 1
    assert "give --out FILE for the estimates, or --steps" in capsys.readouterr().err


def test_replay_csv_matches_the_observer_and_names_bad_rows(tmp_path: Path, capsys) -> None:
    from daq.programme import parse_programme
    from daq.scaling import Scaling
    from daq.simulator import SimulatedCell
    from estimator.observer import ForceObserver
    from estimator.profile import default_demo_profile, save_profile

    profile = default_demo_profile()
    prof_path = tmp_path / "cell.toml"
    save_profile(profile, prof_path)
    tr, pl = profile.transducer, profile.plant
    scaling = Scaling(tr.volts_per_count, tr.metres_per_volt, tr.zero_volts)
    cell = SimulatedCell(
        pl.mass_kg, pl.stiffness_n_per_m, pl.damping_ratio, tr.noise_m, scaling, 2000.0, seed=3
    )
    run = cell.generate(parse_programme("hold 0.3 0; hold 0.5 30"))
    x_m = scaling.to_metres(run.counts)
    src = tmp_path / "in.csv"
    with open(src, "w", newline="") as fh:
        fh.write("# invented test data\ntime_s,displacement_mm\n")
        for t, x in zip(run.time_s, x_m, strict=True):
            fh.write(f"{float(t)!r},{float(x) * 1e3!r}\n")
    out = tmp_path / "out.csv"
    assert main(["replay", str(src), "--profile", str(prof_path), "--out", str(out)]) == 0
    with open(out) as fh:
        rows = list(csv.DictReader(line for line in fh if not line.startswith("#")))
    assert list(rows[0]) == [
        "time_s [s]", "force_n [N]", "force_u_n [N]", "displacement_m [m]",
        "velocity_m_s [m/s]", "innovation_m [m]", "nis [1]", "flags [1]",
        "p_hold [1]", "p_rate [1]", "p_jump [1]",
    ]  # fmt: skip
    force = np.array([float(r["force_n [N]"]) for r in rows])
    direct = ForceObserver.from_profile(profile).process(run.time_s, x_m * 1e3 * 1e-3)
    # Python's float() on the written text gives the computed doubles exactly (repr)
    np.testing.assert_array_equal(force, direct["force_n"])
    assert abs(force[-1] - 30.0) < 0.1  # applied 30 N (invented programme)
    # the model probabilities sum to 1 (to the file's 4 digits) and a held load ends on hold
    p = np.array([[float(r[f"{c} [1]"]) for c in ("p_hold", "p_rate", "p_jump")] for r in rows])
    np.testing.assert_allclose(p.sum(axis=1), 1.0, atol=2e-3)
    assert p[-1, 0] > 0.5

    bad = tmp_path / "bad.csv"
    bad.write_text("time_s,displacement_m\n0.0,1e-6\n0.0005,oops\n")
    assert (
        main(["replay", str(bad), "--profile", str(prof_path), "--out", str(out), "--force"]) == 1
    )
    err = capsys.readouterr().err
    assert "bad.csv:3" in err and "oops" in err


def test_replay_smooth_runs(tmp_path: Path) -> None:
    from estimator.profile import default_demo_profile, save_profile

    prof_path = tmp_path / "cell.toml"
    save_profile(default_demo_profile(), prof_path)
    src = tmp_path / "in.csv"
    t = np.arange(2000) * 5e-4
    rng = np.random.default_rng(2)
    x = 5e-5 + rng.normal(0, 5e-8, t.size)  # 20 N static on the demo cell
    np.savetxt(
        src, np.column_stack([t, x]), delimiter=",", header="time_s,displacement_m", comments=""
    )
    out = tmp_path / "out.csv"
    assert (
        main(["replay", str(src), "--profile", str(prof_path), "--out", str(out), "--smooth"]) == 0
    )
    data = np.genfromtxt(out, delimiter=",", names=True, comments="#", skip_header=6)
    assert abs(np.mean(data["force_n_N"][500:]) - 20.0) < 0.01  # k·x = 4e5 · 5e-5 N


def test_demo_end_to_end(tmp_path: Path, capsys, monkeypatch) -> None:
    monkeypatch.setenv("QT_QPA_PLATFORM", "offscreen")
    out = tmp_path / "demo"
    assert main(["demo", "--out", str(out), "--speed", "5"]) == 0
    text = capsys.readouterr().out
    assert "received 10200 of 10200 samples" in text
    # the status line is live's (issue 14: one unit per quantity, the cell's): the demo
    # cell's travel is 0.5 mm, so displacements in µm; force ± U (k = 2) in N
    status = [line for line in text.splitlines() if line.startswith("t = ")]
    assert status and all(" µm  [" in line and "(U, k=2)" in line for line in status)
    assert not any(" mm " in line for line in status)
    for name in ("estimates.csv", "truth.csv", "summary.txt", "demo.png"):
        assert (out / name).stat().st_size > 0
    # the session's log beside them (issue 12: traceable sessions), as live writes one
    log = (out / "session.log").read_text(encoding="utf-8")
    assert "command: forcelens demo" in log and "source: the built-in simulated cell" in log
    assert "connected: " in log and "samples 10200, samples_lost 0" in log
    # a demo run again over the same folder replaces the log, not appends to it
    assert main(["demo", "--out", str(out), "--speed", "5", "--force", "--no-plot"]) == 0
    assert (out / "session.log").read_text(encoding="utf-8").count("command: ") == 1
    # Every load step: observer within 2 % of the step of the applied force, and faster
    # to settle than k·x by at least 3 times (the requirement).
    rows = [line.split() for line in (out / "summary.txt").read_text().splitlines()[3:8]]
    assert len(rows) == 5
    for row in rows:
        applied, observed, obs_ms, kx_ms = (
            float(row[1]),
            float(row[2]),
            float(row[5]),
            float(row[6]),
        )
        assert abs(observed - applied) < 0.02 * 20.0
        assert math.isfinite(obs_ms) and obs_ms * 3 <= kx_ms


def test_replay_refuses_a_missing_or_reordered_csv_in_one_line(tmp_path: Path, capsys) -> None:
    # Formerly: "a CSV carries no profile" for a missing file, and exit 0 with U ≈ 130 N
    # on every row of a shuffled one (the observer restarted at every step back in time).
    from estimator.profile import default_demo_profile, save_profile

    prof = tmp_path / "cell.toml"
    save_profile(default_demo_profile(), prof)
    out = tmp_path / "out.csv"
    assert (
        main(["replay", str(tmp_path / "none.csv"), "--profile", str(prof), "--out", str(out)])
        == 1
    )
    assert "none.csv: no such file" in capsys.readouterr().err
    shuffled = tmp_path / "shuffled.csv"
    shuffled.write_text("time_s,displacement_m\n0.0,1e-6\n0.001,1e-6\n0.0005,1e-6\n")
    assert main(["replay", str(shuffled), "--profile", str(prof), "--out", str(out)]) == 1
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "shuffled.csv:4: time_s goes back" in err
    assert not out.exists()


def test_an_unexpected_failure_is_one_line_and_a_crash_report(
    tmp_path: Path, capsys, monkeypatch
) -> None:
    # Issue 15: no traceback reaches a user; exit 3 and a saved report for a fault.
    import ui.commands.check as check

    def broken(args) -> int:
        raise RuntimeError("invented fault")

    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path))
    monkeypatch.setattr(check, "run", broken)
    assert main(["check", "--settling-time-s", "0.1"]) == 3
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "Traceback" not in err
    assert "internal error (RuntimeError: invented fault)" in err
    reports = list((tmp_path / "forcelens" / "crash").glob("crash-*.txt"))
    assert len(reports) == 1 and str(reports[0]) in err
    text = reports[0].read_text(encoding="utf-8")
    assert "Traceback" in text and "invented fault" in text and "check --settling-time-s" in text


def test_output_into_a_closed_pipe_ends_quietly() -> None:
    # ``forcelens runs | head -1``: formerly a BrokenPipeError traceback. A command that
    # prints far more than a pipe holds (64 KiB), whose reader leaves after one line.
    code = (
        "import sys\n"
        "import ui.commands.check as c\n"
        "c.run = lambda args: [print('x' * 99) for _ in range(100_000)] and 0\n"
        "from ui.cli import main\n"
        "sys.exit(main(['check', '--settling-time-s', '0.1']))\n"
    )
    proc = subprocess.Popen(
        [sys.executable, "-c", code], stdout=subprocess.PIPE, stderr=subprocess.PIPE
    )
    assert proc.stdout.readline() == b"x" * 99 + b"\n"
    proc.stdout.close()  # the reader goes away
    err = proc.stderr.read().decode()
    assert proc.wait(timeout=60) == 1
    assert err == "", err


def test_a_real_port_without_a_profile_is_refused(capsys) -> None:
    # Issue 12: `live --port X` without --profile ran the invented demo cell's model on
    # real hardware. Refused before anything opens, with the commands that make a profile.
    for command in ("live", "dashboard"):
        assert main([command, "--port", "/dev/ttyUSB7"]) == 1
        err = capsys.readouterr().err
        assert err.count("\n") == 1
        assert "--port /dev/ttyUSB7: give the profile" in err and "forcelens profile new" in err


def test_replay_run_smooth_is_the_smoother_on_the_runs_samples(tmp_path: Path) -> None:
    # `replay RUN --smooth` reads the run a block at a time into temporary files; its rows
    # must be those of smooth_record on the whole arrays, to the bit (the writer's numbers
    # read back exactly). The repository's demo run: invented data.
    run = sorted((ROOT / "recordings").glob("*-*"))[0]
    out = tmp_path / "smoothed.csv"
    assert main(["replay", str(run), "--smooth", "--out", str(out)]) == 0
    data = read_run(run)
    profile = profile_from_text(data.description["profile_toml"], "run.json")
    samples = data.samples
    want = smooth_record(
        ForceObserver.from_profile(profile), samples["device_time_s"], samples["displacement_m"]
    )
    got = read_csv_table(out).columns
    for name in ("force_n", "force_u_n", "displacement_m"):
        assert np.array_equal(got[name], want[name]), name
