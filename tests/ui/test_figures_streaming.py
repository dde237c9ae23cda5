"""The figures of a run computed a block at a time (``ui.figures``) equal those of the
whole-array rules, bit for bit, whatever the block sizes (issue 12, big records).

Reference: the figures as computed before the block-wise replay, from whole arrays: the
run's samples and the estimates of one pipeline call, hashed whole, and
``estimator.metrics.change_table`` on the whole columns (the project's whole-array rule,
itself tested against python-control and closed forms in tests/estimator/test_metrics.py).
Invented data: a simulated cell following a load programme.
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
import math
from pathlib import Path
from typing import Any

import numpy as np
import pytest

from daq.programme import parse_programme
from daq.runs import read_run
from estimator.metrics import change_table
from estimator.profile import default_demo_profile
from ui.figures import compute_figures, replay_run
from ui.figures_file import figures_chunks, read_figures
from ui.pipeline import EstimationPipeline
from ui.recording import open_recording
from ui.transitions import Transitions
from ui.wiring import scaling_for, simulated_cell_for

PROFILE = default_demo_profile()
PROGRAMME = "hold 0.6 0; hold 0.6 20; hold 0.6 55; hold 0.6 10; hold 0.6 40; hold 0.6 0"


@pytest.fixture(scope="module")
def run_folder(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """3.6 s of an invented programme with five load changes, recorded as live does."""
    run = simulated_cell_for(PROFILE, seed=12).generate(parse_programme(PROGRAMME))
    samples = run.sample_block(scaling_for(PROFILE))
    rec = open_recording(tmp_path_factory.mktemp("runs"), PROFILE, note="invented data")
    pipe = EstimationPipeline(PROFILE, recorder=rec.writer)
    pipe.process(samples)
    rec.close("complete", {"samples": int(samples.size)})
    return rec.folder


class _Events:
    def __init__(self) -> None:
        self.events: list[dict[str, Any]] = []

    def append(self, block: np.ndarray, stream: str = "samples") -> None:
        pass

    def event(self, kind: str, message: str = "", **fields: Any) -> None:
        self.events.append({"kind": kind, "message": message, **fields})


def _rows(t: np.ndarray, f: np.ndarray, u: np.ndarray, s: np.ndarray) -> list[dict]:
    """The change table of whole arrays, as figures.json words it."""
    floor = 4.0 * float(np.median(u))
    return [
        {
            "t_start_s": r.change.t_start_s,
            "before_n": r.observer.initial,
            "after_n": r.observer.final,
            "rise_ms": r.observer.rise_time_s * 1e3,
            "overshoot_pct": r.observer.overshoot_pct,
            "settle_ms": r.observer.settling_time_s * 1e3,
            "settle50_ms": r.observer.settling_time_mid_s * 1e3,
            "static_settle_ms": r.static.settling_time_s * 1e3,
            "static_overshoot_pct": r.static.overshoot_pct,
            "ratio": r.settling_ratio,
        }
        for r in change_table(t, f, s, band_floor_n=floor)
    ]


def _json(value: Any) -> str:  # NaN as None, as figures.json has it
    return json.dumps(value, default=str).replace("NaN", "null")


def test_block_wise_figures_equal_the_whole_array_figures(run_folder: Path) -> None:
    data = read_run(run_folder)
    samples = np.asarray(data.samples)
    events = _Events()
    est = EstimationPipeline(PROFILE, recorder=events).process(samples)  # one call, whole
    ok = np.isfinite(est["force_n"])
    static = PROFILE.plant.stiffness_n_per_m * samples["displacement_m"]
    cols = est["time_s"][ok], est["force_n"][ok], est["force_u_n"][ok], static[ok]
    want_changes = _rows(*cols)
    assert len(want_changes) == 5
    for block_rows, block in ((16_384, None), (997, 61), (250, 4096), (7_000, 300)):
        replayed = replay_run(run_folder, block_rows=block_rows)
        try:
            got = compute_figures(replayed, block=block)
        finally:
            replayed.close()
        assert got["samples"] == samples.size
        assert got["samples_sha256"] == hashlib.sha256(samples.tobytes()).hexdigest()
        assert got["estimates_sha256"] == hashlib.sha256(est.tobytes()).hexdigest()
        assert _json(got["changes"]) == _json(want_changes)
        assert got["uncertainty"]["observer_n"] == float(np.median(cols[2]))
        settling = [e for e in events.events if e["kind"] == "settling"]
        assert list(got["settling"]) == json.loads(json.dumps(settling))
        assert len(got["alarms"]) == sum(e["kind"] == "alarm" for e in events.events)


def test_rows_without_a_force_are_left_out_as_by_the_whole_array_rule(
    run_folder: Path,
) -> None:
    replayed = replay_run(run_folder, block_rows=1000)
    try:
        column = replayed.column("force_n")
        force = column.read(0, column.size)
        force[[0, 1, 2, 1500, 1501, 4000]] = math.nan  # rows as if no force were estimated
        column.write(0, force)
        holed = dataclasses.replace(replayed, nonfinite_force=6)
        got = compute_figures(holed, block=333)
        ok = np.isfinite(force)
        t, u, x = (
            replayed.column(n).read(0, column.size)
            for n in ("time_s", "force_u_n", "displacement_m")
        )
        want = _rows(t[ok], force[ok], u[ok], PROFILE.plant.stiffness_n_per_m * x[ok])
    finally:
        replayed.close()
    assert len(want) == 5 and _json(got["changes"]) == _json(want)


def test_figures_file_text_is_that_of_json_dumps_and_reads_back() -> None:
    events = [
        {"kind": "settling", "message": "a → b", "index": 3, "time_s": 0.5, "new": "settled"},
        {"kind": "settling", "message": "b → c", "index": 9, "time_s": 1.0, "extra": {"x": [1]}},
    ]
    plain = {"format": "f", "changes": [{"a": 1.5, "b": None}], "settling": events, "alarms": []}
    mine = dict(plain, settling=Transitions(events), alarms=Transitions())
    text = "".join(figures_chunks(mine))
    assert text == json.dumps(plain, indent=2, ensure_ascii=False, allow_nan=False)
    assert "".join(figures_chunks({})) == json.dumps({}, indent=2)


@pytest.mark.parametrize("chunk", [1, 5, 1 << 16])
def test_read_figures_reads_what_json_reads(
    tmp_path: Path, chunk: int, monkeypatch: pytest.MonkeyPatch
) -> None:
    import ui.figures_file

    monkeypatch.setattr(ui.figures_file, "_CHUNK", chunk)  # values cut at every character
    events = [
        {"kind": "alarm", "message": "m → n", "index": 1, "event": "raised", "x": -12.5e-3},
        {"kind": "alarm", "message": "q", "index": 12345, "nested": {"a": [1, 2.0, None]}},
    ]
    plain = {
        "samples": 123456,
        "alarms": events,
        "settling": [],
        "changes": [{"a": 1.25, "b": None, "c": True}],
        "u": 0.000123,
    }
    path = tmp_path / "figures.json"
    path.write_text(json.dumps(plain, indent=2, ensure_ascii=False), encoding="utf-8")
    got = read_figures(path)
    assert isinstance(got["alarms"], Transitions) and list(got["alarms"]) == events
    assert len(got["settling"]) == 0
    assert {k: v for k, v in got.items() if k not in ("alarms", "settling")} == {
        k: v for k, v in plain.items() if k not in ("alarms", "settling")
    }


@pytest.mark.parametrize(
    ("text", "words"),
    [("[1, 2]", "not a JSON object"), ('{"a": 1} x', "text after"), ('{"a": 1', "expected")],
)
def test_read_figures_refuses_what_is_not_figures(tmp_path: Path, text: str, words: str) -> None:
    path = tmp_path / "figures.json"
    path.write_text(text)
    with pytest.raises(ValueError, match=words):
        read_figures(path)


def test_replay_steps_prints_the_whole_array_change_table(
    run_folder: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    from estimator.metrics import format_change_table
    from ui.cli import main

    data = read_run(run_folder)
    samples = np.asarray(data.samples)
    est = EstimationPipeline(PROFILE).process(samples)
    ok = np.isfinite(est["force_n"])
    static = PROFILE.plant.stiffness_n_per_m * samples["displacement_m"][ok]
    floor = 4.0 * float(np.median(est["force_u_n"][ok]))
    rows = change_table(est["time_s"][ok], est["force_n"][ok], static, band_floor_n=floor)
    assert len(rows) == 5
    capsys.readouterr()
    assert main(["replay", str(run_folder), "--steps"]) == 0
    assert format_change_table(rows) in capsys.readouterr().out
