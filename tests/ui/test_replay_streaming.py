"""Replay in blocks (issue 12, big records): a record is read, estimated and written a
block at a time, and the output is the same, byte for byte, as the whole-record path
(the record read whole, estimated in one call, written from one array). Tiny blocks make
every kind of boundary occur (a CSV chunk of 64 characters holds one or two rows; a run
block of 7 samples cuts the recorded zero and the live blocks of 97 at odd places).
The records are recorded from the simulated cell (invented data)."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest

from daq.csvfile import read_displacement_csv
from daq.programme import parse_programme
from daq.runs import read_run
from daq.samples import empty_block
from estimator.profile import save_profile
from tests.ui.test_run_commands import PROFILE, _record
from ui.cli import main
from ui.commands import replay as replay_command
from ui.estimates_csv import write_estimates_csv
from ui.pipeline import EstimationPipeline, estimate_samples, tares_from_events
from ui.version import software_version
from ui.wiring import scaling_for, simulated_cell_for


def _meta(source: Path, profile_arg: str) -> dict[str, str]:
    return {
        "source": source.name,
        "cell": PROFILE.cell.name,
        "profile": profile_arg,
        "method": "observer (as live)",
        "software_version": software_version(),
    }


def _invented_csv(path: Path) -> None:
    """0.5 s of an invented load step from the simulated cell, in µm with `;`, CRLF, a
    comment between rows and two missing samples."""
    run = simulated_cell_for(PROFILE, seed=6).generate(parse_programme("hold 0.2 0; hold 0.3 25"))
    t = run.device_time_us * 1e-6
    x_um = scaling_for(PROFILE).to_metres(run.counts) * 1e6
    rows = [f"{a!r};{b!r}" for a, b in zip(t.tolist(), x_um.tolist(), strict=True)]
    rows[300] = f"{float(t[300])!r};"
    rows[301] = f"{float(t[301])!r};nan"
    rows.insert(500, "# invented: a comment between rows")
    text = "# invented record\r\ntime_s [s];displacement_um [um]\r\n" + "\r\n".join(rows) + "\r\n"
    path.write_bytes(text.encode("utf-8"))


@pytest.mark.parametrize("chunk_chars", [64, 1 << 22])
def test_csv_replay_in_chunks_writes_the_bytes_of_the_whole_record_path(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch, chunk_chars: int
) -> None:
    source = tmp_path / "record.csv"
    _invented_csv(source)
    prof = tmp_path / "cell.toml"
    save_profile(PROFILE, prof)
    # the whole-record path: read whole, one observer call, one array written
    t, x = read_displacement_csv(source)
    samples = empty_block(t.size)
    samples["seq"] = np.arange(t.size)
    samples["device_time_s"] = t
    samples["host_time_s"] = math.nan
    samples["displacement_m"] = x
    whole = estimate_samples(PROFILE, samples, block_size=t.size)
    ref = tmp_path / "whole.csv"
    write_estimates_csv(whole, ref, metadata=_meta(source, str(prof)))
    monkeypatch.setattr(replay_command, "_CSV_CHUNK_CHARS", chunk_chars)
    out = tmp_path / "streamed.csv"
    assert main(["replay", str(source), "--profile", str(prof), "--out", str(out)]) == 0
    assert out.read_bytes() == ref.read_bytes()
    assert np.isnan(x[300:302]).all()  # the missing samples are in the record


@pytest.mark.parametrize("speed", ["max", "20"])
def test_run_replay_in_tiny_blocks_writes_the_bytes_of_the_live_estimates(
    tmp_path: Path,
    monkeypatch: pytest.MonkeyPatch,
    capsys: pytest.CaptureFixture[str],
    speed: str,
) -> None:
    folder = _record(tmp_path / "runs")  # with one zero (tare) event
    run = read_run(folder, memmap=False)
    ref = tmp_path / "live.csv"
    write_estimates_csv(run.streams["estimates"], ref, metadata=_meta(folder, "the run's own"))
    # and the whole-record path of the replay itself gives the live numbers
    whole = estimate_samples(
        PROFILE, run.samples, tares_from_events(run.events), block_size=run.samples.size
    )
    assert whole.tobytes() == run.streams["estimates"].tobytes()
    monkeypatch.setattr(replay_command, "_BLOCK", 7)
    out = tmp_path / "streamed.csv"
    assert main(["replay", str(folder), "--out", str(out), "--speed", speed]) == 0
    assert "identical to the 1200 estimates computed live" in capsys.readouterr().out
    assert out.read_bytes() == ref.read_bytes()


def test_a_departure_is_found_across_tiny_blocks(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch, capsys: pytest.CaptureFixture[str]
) -> None:
    folder = _record(tmp_path / "runs", tare=False)
    original = EstimationPipeline._estimate

    def changed(self: EstimationPipeline, part: np.ndarray) -> np.ndarray:
        est = original(self, part)
        est["force_n"][part["seq"] >= 703] += 1e-9  # stands for a changed software version
        return est

    monkeypatch.setattr(EstimationPipeline, "_estimate", changed)
    monkeypatch.setattr(replay_command, "_BLOCK", 7)  # 703 is inside a block of 7
    assert main(["replay", str(folder)]) == 1
    assert "DIFFERS from the live estimates from sample 703 on (seq 703)" in (
        capsys.readouterr().err
    )


def test_a_bad_row_late_in_a_csv_leaves_no_output(tmp_path: Path) -> None:
    source = tmp_path / "record.csv"
    rows = [f"{i / 2000!r},{1e-6 * (i % 5)!r}" for i in range(3000)]
    rows[2900] = "0.00001,1e-6"  # time goes back, late in the file
    source.write_text("time_s,displacement_m\n" + "\n".join(rows) + "\n", encoding="utf-8")
    prof = tmp_path / "cell.toml"
    save_profile(PROFILE, prof)
    out = tmp_path / "est.csv"
    assert main(["replay", str(source), "--profile", str(prof), "--out", str(out)]) == 1
    assert not out.exists() and not list(tmp_path.glob(".est.csv.*"))


def test_audit_counts_every_differing_row_across_tiny_blocks(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch, capsys: pytest.CaptureFixture[str]
) -> None:
    import ui.figures

    folder = _record(tmp_path / "runs", tare=False)
    original = EstimationPipeline._estimate
    altered = {5, 6, 703, 704, 1100}  # sample indices; seq equals the index here

    def changed(self: EstimationPipeline, part: np.ndarray) -> np.ndarray:
        est = original(self, part)
        est["force_n"][np.isin(part["seq"], list(altered))] += 1e-9
        return est

    monkeypatch.setattr(EstimationPipeline, "_estimate", changed)
    monkeypatch.setattr(ui.figures, "_BLOCK", 7)  # the replay and the live rows in blocks of 7
    assert main(["audit", str(folder)]) == 1
    out = capsys.readouterr().out
    assert "differ from those computed live: 5 of 1200 samples, first at sample 5" in out
