"""An unclosed run: a crash mid-flush against records removed afterwards
(`daq.runs.loss`, issue 15). The allowance follows from the writer's own rule: every
stream and the event log are written together at most one flush interval apart."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from daq.runs import RunWriter, read_run, verify_run
from daq.samples import empty_block
from estimator.observer import ESTIMATE_DTYPE

RATE_HZ = 1000.0


def _units(dtype: np.dtype) -> dict[str, str]:
    return dict.fromkeys(dtype.names, "1")


def _crashed_run(folder: Path, seconds: float = 3.0) -> Path:
    """A run of ``seconds`` of samples with one estimate each, flushed, never closed."""
    now = [0.0]
    writer = RunWriter(
        folder,
        flush_interval_s=0.25,
        clock=lambda: now[0],
        extra_streams={"estimates": (ESTIMATE_DTYPE, _units(ESTIMATE_DTYPE))},
    )
    n = int(seconds * RATE_HZ)
    block = empty_block(n)
    block["seq"] = np.arange(n)
    block["device_time_s"] = block["seq"] / RATE_HZ
    est = np.zeros(n, ESTIMATE_DTYPE)
    est["time_s"] = block["device_time_s"]
    for i in range(0, n, 100):
        now[0] = i / RATE_HZ
        writer.append(block[i : i + 100])
        writer.append(est[i : i + 100], "estimates")
    writer.event("settling", "settled", index=n - 1)
    writer.flush()
    return folder  # no close: as after a crash


def _cut(path: Path, keep_records: int, itemsize: int) -> None:
    with open(path, "r+b") as fh:
        fh.truncate(keep_records * itemsize)


def test_a_crash_mid_flush_is_only_not_closed(tmp_path: Path) -> None:
    folder = _crashed_run(tmp_path / "run")
    # a crash between the two streams' writes of the last flush: 0.2 s of samples missing
    _cut(folder / "samples.bin", 2800, empty_block(0).dtype.itemsize)
    report = verify_run(folder)
    assert not report.ok and not any("data lost" in p for p in report.problems)
    assert any("did not finish" in w for w in read_run(folder).warnings)


@pytest.mark.parametrize("stream", ["samples", "estimates"])
def test_half_a_stream_cut_away_is_data_lost(tmp_path: Path, stream: str) -> None:
    # issue 15: closing.json deleted and half of samples.bin cut -> "ended mid-flush"
    folder = _crashed_run(tmp_path / "run")
    itemsize = (empty_block(0).dtype if stream == "samples" else ESTIMATE_DTYPE).itemsize
    _cut(folder / f"{stream}.bin", 1500, itemsize)
    report = verify_run(folder)
    assert any("data lost" in p for p in report.problems), report.problems
    assert any("data lost" in w for w in read_run(folder).warnings)


def test_an_event_beyond_the_samples_is_data_lost(tmp_path: Path) -> None:
    folder = _crashed_run(tmp_path / "run")
    # both streams cut alike (so they agree), but the settling event names sample 2999
    _cut(folder / "samples.bin", 1000, empty_block(0).dtype.itemsize)
    _cut(folder / "estimates.bin", 1000, ESTIMATE_DTYPE.itemsize)
    report = verify_run(folder)
    assert any("names sample 2999" in p for p in report.problems), report.problems


def test_the_flush_interval_is_recorded_and_checked(tmp_path: Path) -> None:
    folder = _crashed_run(tmp_path / "run")
    assert read_run(folder).description["flush_interval_s"] == 0.25
    text = (folder / "run.json").read_text()
    (folder / "run.json").write_text(
        text.replace('"flush_interval_s": 0.25', '"flush_interval_s": 5')
    )
    assert any("flush_interval_s = 5" in p for p in verify_run(folder).problems)


@pytest.mark.parametrize("kinds", [(), ("tare",), ("settling",), None])
def test_keeping_few_event_kinds_loses_no_check(tmp_path: Path, kinds: tuple | None) -> None:
    """read_run(event_kinds=...) (replay keeps only zeros, export none): the events kept
    are those of read_run() of these kinds, and the loss check of an unclosed run still
    sees every event (here the one naming sample 2999)."""
    folder = _crashed_run(tmp_path / "run")
    _cut(folder / "samples.bin", 1000, empty_block(0).dtype.itemsize)
    _cut(folder / "estimates.bin", 1000, ESTIMATE_DTYPE.itemsize)
    every = read_run(folder)
    some = read_run(folder, event_kinds=kinds)
    assert some.events == [e for e in every.events if kinds is None or e["kind"] in kinds]
    assert any("names sample 2999" in w for w in some.warnings)
    assert some.warnings == every.warnings
