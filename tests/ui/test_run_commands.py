"""``forcelens replay / verify / runs / export / ports`` on runs recorded in-process.

The runs are made by the same recording path ``forcelens live --record`` uses, fed with a
simulated cell's samples (invented data) instead of a serial port.
"""

from __future__ import annotations

import csv
import dataclasses
from pathlib import Path

import numpy as np
import pytest

from daq.ports import PortInfo
from daq.programme import parse_programme
from daq.runs import read_run
from estimator.profile import default_demo_profile, save_profile
from ui.cli import main
from ui.pipeline import EstimationPipeline
from ui.recording import open_recording
from ui.wiring import scaling_for, simulated_cell_for

PROFILE = default_demo_profile()


def _record(root: Path, *, note: str = "", tags: tuple[str, ...] = (), tare: bool = True) -> Path:
    """Record 0.6 s of an invented load step, with one zero, in blocks of 97 samples."""
    run = simulated_cell_for(PROFILE, seed=4).generate(parse_programme("hold 0.2 0; hold 0.4 30"))
    samples = run.sample_block(scaling_for(PROFILE))
    rec = open_recording(root, PROFILE, note=note, tags=tags)
    pipe = EstimationPipeline(PROFILE, recorder=rec.writer)
    for i in range(0, samples.size, 97):
        pipe.process(samples[i : i + 97])
        if tare and i == 291:
            pipe.tare()
    rec.writer.event("mark", "operator mark (test)")
    rec.close("complete", {"samples": int(samples.size)})
    return rec.folder


def test_replay_of_a_run_is_bit_identical_and_writes_csv(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    folder = _record(tmp_path / "runs")
    out = tmp_path / "est.csv"
    assert main(["replay", str(folder), "--out", str(out)]) == 0
    text = capsys.readouterr().out
    assert "identical to the 1200 estimates computed live" in text
    assert "zero events 1" in text
    rows = [r for r in out.read_text().splitlines() if not r.startswith("#")]
    assert rows[0].startswith("time_s [s],force_n [N],force_u_n [N]") and len(rows) == 1201


def test_paced_replay_gives_the_same_numbers(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    folder = _record(tmp_path / "runs")
    assert main(["replay", str(folder), "--speed", "20"]) == 0  # 0.6 s of data in ~30 ms
    assert "identical to the 1200 estimates" in capsys.readouterr().out


def test_replay_flags_estimates_that_no_longer_match(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    folder = _record(tmp_path / "runs", tare=False)
    path = folder / "estimates.bin"
    data = bytearray(path.read_bytes())
    itemsize = read_run(folder).streams["estimates"].dtype.itemsize
    data[500 * itemsize + 8] ^= 0x01  # force_n of record 500: one bit
    path.write_bytes(bytes(data))
    assert main(["replay", str(folder)]) == 1  # the hash check refuses it first
    err = capsys.readouterr().err
    assert "estimates.bin: SHA-256 differs" in err


def test_replay_reports_where_a_changed_computation_departs(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch, capsys: pytest.CaptureFixture[str]
) -> None:
    folder = _record(tmp_path / "runs", tare=False)
    original = EstimationPipeline._estimate

    def changed(self: EstimationPipeline, part: np.ndarray) -> np.ndarray:
        est = original(self, part)
        est["force_n"][part["seq"] >= 700] += 1e-9  # stands for a changed software version
        return est

    monkeypatch.setattr(EstimationPipeline, "_estimate", changed)
    assert main(["replay", str(folder)]) == 1
    assert "DIFFERS from the live estimates from sample 700 on (seq 700)" in (
        capsys.readouterr().err
    )


def test_replay_with_another_profile_says_so(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    folder = _record(tmp_path / "runs")
    other = dataclasses.replace(PROFILE.observer, force_bandwidth_hz=40.0)
    path = tmp_path / "other.toml"
    save_profile(PROFILE.with_updates(observer=other), path)
    assert main(["replay", str(folder), "--profile", str(path)]) == 0
    assert "--profile replaces the run's own" in capsys.readouterr().out


def test_replay_speed_is_checked(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    folder = _record(tmp_path / "runs")
    assert main(["replay", str(folder), "--speed", "fast"]) == 1
    assert "--speed = 'fast'" in capsys.readouterr().err


def test_verify_passes_an_intact_run_and_names_a_tampered_file(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    folder = _record(tmp_path / "runs")
    assert main(["verify", str(folder)]) == 0
    assert "verdict: OK" in capsys.readouterr().out
    path = folder / "samples.bin"
    data = bytearray(path.read_bytes())
    data[100] ^= 0xFF
    path.write_bytes(bytes(data))
    assert main(["verify", str(folder)]) == 1
    out = capsys.readouterr().out
    assert "verdict: NOT OK" in out and "samples.bin" in out


def test_runs_lists_and_filters(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    root = tmp_path / "runs"
    a = _record(root, note="first", tags=("static",))
    _record(root, note="second", tags=("dynamic",))
    assert main(["runs", "--root", str(root)]) == 0
    out = capsys.readouterr().out
    assert "2 run(s)" in out and "first" in out and "second" in out
    assert main(["runs", "--root", str(root), "--tag", "static"]) == 0
    out = capsys.readouterr().out
    assert "1 run(s)" in out and a.name in out
    assert main(["runs", "--root", str(root), "--status", "open"]) == 0
    assert "no run" in capsys.readouterr().out
    assert main(["runs", "--root", str(tmp_path / "nothing")]) == 1
    assert "no such folder" in capsys.readouterr().err


def test_runs_takes_plain_dates_text_filters_and_lists_unreadable_runs(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    # Issue 12: `--since 2026-12-01` was refused (wanted a zone), `--cell demo` found
    # nothing (whole-name match), unreadable runs vanished from the list without a word.
    import datetime as dt
    import json

    root = tmp_path / "runs"
    a = _record(root, note="first", tags=("Static-Load",))
    broken = root / "broken-run"
    broken.mkdir()
    (broken / "run.json").write_text("{not json", encoding="utf-8")
    today = dt.datetime.now(dt.UTC).date()
    for since, until, n in ((today, today, 1), (today + dt.timedelta(days=1), None, 0)):
        argv = ["runs", "--root", str(root), "--since", since.isoformat()]
        argv += ["--until", until.isoformat()] if until else []
        assert main(argv) == 0
        out = capsys.readouterr().out
        assert "dates in UTC" in out and (f"{n} run(s)" in out if n else "no run" in out)
    assert main(["runs", "--root", str(root), "--cell", "DEMO", "--tag", "static"]) == 0
    out = capsys.readouterr().out
    assert "1 run(s)" in out and a.name in out
    assert f"unreadable: {broken.resolve()}" in out and "not valid JSON" in out
    assert main(["runs", "--root", str(root), "--json"]) == 0
    listed = json.loads(capsys.readouterr().out)
    assert [r["run_id"] for r in listed["runs"]] == [a.name]
    assert listed["unreadable"][0]["folder"] == str(broken.resolve())
    assert main(["runs", "--root", str(root), "--since", "yesterday"]) == 1
    assert "give a date YYYY-MM-DD" in capsys.readouterr().err


def test_export_writes_units_and_exact_numbers(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    folder = _record(tmp_path / "runs")
    out = tmp_path / "s.csv"
    assert main(["export", str(folder), "--out", str(out)]) == 0
    with open(out, encoding="utf-8") as fh:
        rows = [r for r in csv.reader(fh) if not r[0].startswith("#")]
    assert rows[0][:2] == ["seq [1]", "device_time_s [s]"]
    assert "displacement_m [m]" in rows[0]
    col = rows[0].index("displacement_m [m]")
    got = np.array([float(r[col]) for r in rows[1:]])
    assert np.array_equal(got, read_run(folder).samples["displacement_m"])
    assert main(["export", str(folder), "--stream", "nothing"]) == 1
    assert "no stream 'nothing'" in capsys.readouterr().err


def test_ports_lists_what_pyserial_finds(
    monkeypatch: pytest.MonkeyPatch, capsys: pytest.CaptureFixture[str]
) -> None:
    import daq.ports

    monkeypatch.setattr(
        daq.ports, "list_ports", lambda: [PortInfo("/dev/ttyUSB0", "USB serial", "USB VID:PID")]
    )
    assert main(["ports"]) == 0
    assert "/dev/ttyUSB0  USB serial  [USB VID:PID]" in capsys.readouterr().out
    monkeypatch.setattr(daq.ports, "list_ports", lambda: [])
    assert main(["ports"]) == 0
    assert "no serial port found" in capsys.readouterr().out


def test_an_exported_run_reads_back_in_replay_and_identify(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    # Issue 12: `export` wrote `device_time_s [s]`, which replay, identify and tune
    # refused: the tool could not read its own files. The round trip, number for number.
    from daq.csvfile import read_displacement_csv

    folder = _record(tmp_path / "runs", tare=False)
    out = tmp_path / "s.csv"
    assert main(["export", str(folder), "--out", str(out)]) == 0
    t, x = read_displacement_csv(out)
    samples = read_run(folder).samples
    assert np.array_equal(t, samples["device_time_s"])
    assert np.array_equal(x, samples["displacement_m"])
    prof = tmp_path / "cell.toml"
    save_profile(PROFILE, prof)
    est = tmp_path / "est.csv"
    assert main(["replay", str(out), "--profile", str(prof), "--out", str(est)]) == 0
    assert main(["identify", str(out), "--test", "step", "--step-force-n", "30"]) == 0
    capsys.readouterr()


def test_status_choices_are_the_catalogue_s() -> None:
    # `runs --status done` named the key ("status = 'done'"), not the option; argparse
    # now refuses it naming --status, from this list, which must stay the catalogue's.
    from daq.catalogue import CATALOGUE_STATUSES
    from ui.run_selection import RUN_STATUSES

    assert sorted(RUN_STATUSES) == sorted(CATALOGUE_STATUSES)
