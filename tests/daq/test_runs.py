"""Run folders: writer, crash-tolerant reader, verifier and CSV export (docs/run-format.md).

References outside the project: Python's hashlib (SHA-256 of the files), NumPy's own
``fromfile``/``memmap``/``loadtxt`` (reading the files without forcelens), Python's
``float()`` (exact read-back of the CSV text).
"""

from __future__ import annotations

import csv
import hashlib
import json
import math
import os
import re
import subprocess
import sys
import threading
import time
from datetime import UTC, datetime
from pathlib import Path

import numpy as np
import pytest

from daq.errors import FramingError, RunFormatError, SourceError
from daq.runs import (
    FLUSH_INTERVAL_MAX_S,
    RunWriter,
    export_run_csv,
    new_run_id,
    read_run,
    verify_run,
)
from daq.samples import FLAG_GAP_BEFORE, FLAG_RECONNECT_BEFORE, SAMPLE_DTYPE, empty_block

REPO = Path(__file__).resolve().parents[2]
CRASH_WRITER = Path(__file__).with_name("crash_writer.py")
EST_DTYPE = np.dtype([("t_s", "<f8"), ("force_n", "<f8"), ("force_u_n", "<f4"), ("ok", "?")])
EST_UNITS = {"t_s": "s", "force_n": "N", "force_u_n": "N", "ok": "1"}


def make_samples(rng: np.random.Generator, n: int, seq0: int = 0) -> np.ndarray:
    """Seeded random samples with consecutive seq, shape (n,)."""
    block = empty_block(n)
    block["seq"] = np.arange(seq0, seq0 + n)
    block["device_time_s"] = block["seq"] / 1000.0
    block["host_time_s"] = 100.0 + block["device_time_s"] + rng.uniform(0, 1e-3, n)
    block["counts"] = rng.integers(-(2**23), 2**23, n)
    block["displacement_m"] = rng.normal(0.0, 1e-4, n)
    return block


def make_estimates(rng: np.random.Generator, n: int) -> np.ndarray:
    est = np.zeros(n, dtype=EST_DTYPE)
    est["t_s"] = np.arange(n) / 100.0
    est["force_n"] = rng.normal(5.0, 2.0, n)
    est["force_u_n"] = rng.uniform(0.01, 0.1, n)
    est["ok"] = rng.random(n) > 0.2
    return est


def write_run(folder: Path, seed: int = 1, n_blocks: int = 4, **kwargs) -> dict:
    """Write a closed run with samples, estimates and events; return what was written."""
    rng = np.random.default_rng(seed)
    blocks = [make_samples(rng, 250, 250 * i) for i in range(n_blocks)]
    est = make_estimates(rng, 37)
    kwargs.setdefault("cell_name", "demo-cell")
    kwargs.setdefault("tags", ["creep", "bench-2"])
    with RunWriter(
        folder,
        extra_streams={"estimates": (EST_DTYPE, EST_UNITS)},
        profile_toml='format = "forcelens-cell-profile"\n',
        acquisition={"framing": "binary-24", "nominal_rate_hz": 1000.0},
        **kwargs,
    ) as writer:
        for i, block in enumerate(blocks):
            writer.append(block)
            writer.event("mark", f"block {i}", seq=block["seq"][-1])
        writer.append(est[:20], "estimates")
        writer.append(est[20:], "estimates")
        writer.event("alarm", "over-range", host_time_s=123.5)
    return {"samples": np.concatenate(blocks), "estimates": est}


# --------------------------------------------------------------------------- round trip


def test_round_trip_samples_streams_events_and_hashes(tmp_path: Path) -> None:
    folder = tmp_path / "run"
    written = write_run(folder)
    run = read_run(folder)
    assert run.closed and run.status == "complete" and run.warnings == []
    # Bitwise equality: the file holds exactly the bytes appended.
    assert run.samples.tobytes() == written["samples"].tobytes()
    assert run.streams["estimates"].tobytes() == written["estimates"].tobytes()
    assert [e["kind"] for e in run.events] == ["mark"] * 4 + ["alarm"]
    assert [e["seq"] for e in run.events[:4]] == [249, 499, 749, 999]
    assert run.events[4]["host_time_s"] == 123.5
    assert run.description["tags"] == ["creep", "bench-2"]
    assert run.description["acquisition"]["framing"] == "binary-24"
    assert run.closing["streams"]["samples"]["records"] == 1000
    assert run.closing["streams"]["estimates"]["records"] == 37
    # Reference: Python's hashlib over the whole file.
    for name in ("samples", "estimates"):
        digest = hashlib.sha256((folder / f"{name}.bin").read_bytes()).hexdigest()
        assert run.closing["streams"][name]["sha256"] == digest
    events_digest = hashlib.sha256((folder / "events.jsonl").read_bytes()).hexdigest()
    assert run.closing["events"] == {"lines": 5, "sha256": events_digest}
    in_memory = read_run(folder, memmap=False)
    assert in_memory.samples.tobytes() == run.samples.tobytes()
    assert not isinstance(in_memory.samples, np.memmap)
    assert isinstance(run.samples, np.memmap) and not run.samples.flags.writeable


def test_numpy_recipe_from_the_doc_reads_the_same_data(tmp_path: Path) -> None:
    folder = tmp_path / "run"
    written = write_run(folder)
    doc = (REPO / "docs" / "run-format.md").read_text(encoding="utf-8")
    assert "np.fromfile(path, dtype=dtype, count=n)" in doc  # the recipe below is the doc's
    # --- recipe, as in docs/run-format.md (NumPy only) ---
    with open(os.path.join(folder, "run.json"), encoding="utf-8") as f:
        spec = json.load(f)["streams"]["samples"]
    dtype = np.dtype([tuple(field) for field in spec["dtype"]])
    path = os.path.join(folder, spec["file"])
    n = os.path.getsize(path) // dtype.itemsize
    samples = np.fromfile(path, dtype=dtype, count=n)
    samples_mapped = np.memmap(path, dtype=dtype, mode="r", shape=(n,))
    # --- end of recipe ---
    assert dtype == SAMPLE_DTYPE
    np.testing.assert_array_equal(samples, written["samples"])
    np.testing.assert_array_equal(samples_mapped, written["samples"])


def test_new_run_id() -> None:
    moment = datetime(2026, 12, 1, 22, 30, 15, tzinfo=UTC)
    run_id = new_run_id(moment)
    assert re.fullmatch(r"20261201T223015Z-[0-9a-f]{6}", run_id)
    assert re.fullmatch(r"\d{8}T\d{6}Z-[0-9a-f]{6}", new_run_id())
    with pytest.raises(RunFormatError, match="time zone"):
        new_run_id(datetime(2026, 12, 1))


def test_new_makes_the_folder_named_by_the_run_id(tmp_path: Path) -> None:
    moment = datetime(2026, 1, 2, 3, 4, 5, 600000, tzinfo=UTC)
    with RunWriter.new(tmp_path, started_utc=moment, cell_name="c") as writer:
        pass
    assert writer.folder.parent == tmp_path and writer.folder.name == writer.run_id
    run = read_run(writer.folder)
    assert run.description["started_utc"] == "2026-01-02T03:04:05.600000Z"
    assert run.samples.shape == (0,) and run.samples.dtype == SAMPLE_DTYPE


# --------------------------------------------------------------------------- flushing


def test_flush_interval_honoured_with_a_fake_clock(tmp_path: Path) -> None:
    now = [0.0]
    folder = tmp_path / "run"
    writer = RunWriter(folder, flush_interval_s=0.25, clock=lambda: now[0])
    rng = np.random.default_rng(2)

    def on_disk(name: str) -> int:
        return (folder / name).stat().st_size

    now[0] = 0.10
    writer.append(make_samples(rng, 10))
    now[0] = 0.20
    writer.event("note", "not yet")
    assert on_disk("samples.bin") == 0 and on_disk("events.jsonl") == 0
    assert writer.flushed_records == 0 and writer.pending_records() == 10
    now[0] = 0.26  # 0.26 s since the writer started: due
    writer.append(make_samples(rng, 10, 10))
    assert on_disk("samples.bin") == 20 * SAMPLE_DTYPE.itemsize
    assert on_disk("events.jsonl") > 0 and writer.flushed_records == 20
    now[0] = 0.30
    assert writer.maybe_flush() is False  # nothing waiting
    now[0] = 0.40
    writer.append(make_samples(rng, 5, 20))
    assert writer.flushed_records == 20  # only 0.14 s since the last flush
    now[0] = 0.50
    assert writer.maybe_flush() is False
    now[0] = 0.52  # 0.26 s since the flush at 0.26
    assert writer.maybe_flush() is True
    assert on_disk("samples.bin") == 25 * SAMPLE_DTYPE.itemsize
    writer.append(make_samples(rng, 3, 25))
    assert writer.flush() == 28  # forced, returns the samples on disk
    writer.close()
    assert read_run(folder).samples.shape == (28,)


@pytest.mark.parametrize("interval", [0.0, -0.1, FLUSH_INTERVAL_MAX_S + 0.01, math.nan])
def test_flush_interval_bounds(tmp_path: Path, interval: float) -> None:
    with pytest.raises(RunFormatError, match="flush_interval_s"):
        RunWriter(tmp_path / "run", flush_interval_s=interval)


def test_crash_leaves_every_flushed_sample_readable(tmp_path: Path) -> None:
    folder = tmp_path / "run"
    env = dict(
        os.environ, PYTHONPATH=os.pathsep.join([str(REPO), os.environ.get("PYTHONPATH", "")])
    )
    proc = subprocess.Popen(
        [sys.executable, str(CRASH_WRITER), str(folder)],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
        env=env,
    )
    lines: list[str] = []
    ready = threading.Event()

    def reader() -> None:
        for line in proc.stdout:
            lines.append(line.split())
            ready.set()

    thread = threading.Thread(target=reader, daemon=True)
    thread.start()
    try:
        assert ready.wait(15.0), "the child never started: " + proc.stderr.read()
        time.sleep(1.0)
        proc.kill()  # SIGKILL on POSIX: no clean-up runs in the child
        kill_s = time.monotonic()
        proc.wait(timeout=5.0)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
    thread.join(timeout=5.0)
    proc.stdout.close()
    proc.stderr.close()
    assert lines[0][0] == "ready"
    flushes = [(int(n), float(t)) for tag, n, t in lines[1:] if tag == "flushed"]
    # In about 1 s at one flush per 0.25 s there must be a few flushes, and not more than
    # the interval allows (+1 for the first flush right after start-up, +1 for rounding).
    assert 2 <= len(flushes) <= 1.0 / 0.25 + 2
    last_count, last_flush_s = flushes[-1]
    # Both times are time.monotonic() on the same machine (CLOCK_MONOTONIC is system-wide
    # on Linux). Bound on lost data: a flush is due every 0.25 s; the margin of 0.35 s
    # allows for scheduling delays on a busy 2-core test machine.
    assert kill_s - last_flush_s < 0.25 + 0.35

    run = read_run(folder)
    assert run.closed is False and run.closing is None
    assert any("did not finish" in w for w in run.warnings)
    n = run.samples.shape[0]
    assert n >= last_count
    np.testing.assert_array_equal(run.samples["seq"], np.arange(n))  # contiguous from 0
    np.testing.assert_array_equal(run.samples["device_time_s"], np.arange(n) / 10000.0)
    assert all(e["kind"] == "mark" for e in run.events)
    report = verify_run(folder)
    assert not report.ok and not report.closed
    assert any("not closed" in p for p in report.problems)


def test_torn_record_and_torn_event_line_are_tolerated(tmp_path: Path) -> None:
    folder = tmp_path / "run"
    written = write_run(folder)
    (folder / "closing.json").unlink()  # as if the process died after its last flush
    half = SAMPLE_DTYPE.itemsize // 2
    with open(folder / "samples.bin", "ab") as f:
        f.write(b"\x01" * half)
    with open(folder / "events.jsonl", "ab") as f:
        f.write(b'{"host_time_s": 1.0, "utc": "2026-')
    run = read_run(folder)
    assert not run.closed
    assert run.torn_bytes == {"samples": half, "estimates": 0}
    assert run.torn_event_line is True
    assert run.samples.tobytes() == written["samples"].tobytes()
    assert len(run.events) == 5
    assert any("torn record" in w and "samples.bin" in w for w in run.warnings)
    assert any("torn last line" in w for w in run.warnings)
    report = verify_run(folder)
    assert not report.ok
    assert any("samples.bin" in p and "torn" in p for p in report.problems)


# --------------------------------------------------------------------------- damaged runs


def _edit_json(path: Path, change) -> None:
    data = json.loads(path.read_text(encoding="utf-8"))
    change(data)
    path.write_text(json.dumps(data), encoding="utf-8")


def _truncate(folder: Path) -> None:
    path = folder / "samples.bin"
    os.truncate(path, path.stat().st_size - SAMPLE_DTYPE.itemsize)


def _grow(folder: Path) -> None:
    with open(folder / "samples.bin", "ab") as f:
        f.write(bytes(SAMPLE_DTYPE.itemsize))


def _tamper(folder: Path) -> None:
    path = folder / "samples.bin"
    data = bytearray(path.read_bytes())
    data[1000] ^= 0x01
    path.write_bytes(bytes(data))


def _drop_flags_field(folder: Path) -> None:
    def change(d: dict) -> None:
        spec = d["streams"]["samples"]
        spec["dtype"] = spec["dtype"][:-1]
        spec["itemsize"] = SAMPLE_DTYPE.itemsize - 4  # consistent with the shorter descr
        del spec["units"]["flags"]

    _edit_json(folder / "run.json", change)


def _corrupt_event_line(folder: Path) -> None:
    path = folder / "events.jsonl"
    lines = path.read_text(encoding="utf-8").splitlines(keepends=True)
    lines[1] = "{oops\n"
    path.write_text("".join(lines), encoding="utf-8")


DAMAGE = {
    "truncated": (_truncate, ["samples.bin", "truncated after closing"]),
    "grown": (_grow, ["samples.bin", "grew after closing"]),
    "tampered": (_tamper, ["samples.bin", "SHA-256 differs"]),
    "corrupt run.json": (
        lambda f: (f / "run.json").write_text('{"format": "forcelens-run", ', encoding="utf-8"),
        ["run.json", "not valid JSON"],
    ),
    "missing run.json": (lambda f: (f / "run.json").unlink(), ["run.json", "missing"]),
    "wrong format": (
        lambda f: _edit_json(f / "run.json", lambda d: d.update(format="other")),
        ["run.json", "not a forcelens run"],
    ),
    "unknown version": (
        lambda f: _edit_json(f / "run.json", lambda d: d.update(version=2)),
        ["run.json", "version = 2", "reads version 1 only", "newer forcelens"],
    ),
    "wrong layout": (_drop_flags_field, ["run.json", "unsupported layout", "'flags' missing"]),
    "inconsistent itemsize": (
        lambda f: _edit_json(
            f / "run.json", lambda d: d["streams"]["samples"].update(itemsize=40)
        ),
        ["run.json", "itemsize = 40", f"{SAMPLE_DTYPE.itemsize} bytes per record"],
    ),
    "missing stream file": (
        lambda f: (f / "estimates.bin").unlink(),
        ["estimates.bin", "missing"],
    ),
    "corrupt event line": (_corrupt_event_line, ["events.jsonl", "line 2", "corrupt"]),
    "bad closing status": (
        lambda f: _edit_json(f / "closing.json", lambda d: d.update(status="done")),
        ["closing.json", "status = 'done'"],
    ),
}


@pytest.mark.parametrize("case", list(DAMAGE))
def test_damaged_runs_raise_and_verify_reports(tmp_path: Path, case: str) -> None:
    folder = tmp_path / "run"
    write_run(folder)
    assert verify_run(folder).ok  # intact before the damage
    damage, words = DAMAGE[case]
    damage(folder)
    with pytest.raises(RunFormatError) as info:
        read_run(folder)
    for word in words:
        assert word in str(info.value)
    report = verify_run(folder)
    assert not report.ok
    assert any(all(word in p for word in words) for p in report.problems), report.text()
    assert "NOT OK" in report.text()


def test_a_changed_description_is_caught(tmp_path: Path) -> None:
    # run.json holds the profile copy a replay uses: its hash is in closing.json.
    folder = tmp_path / "run"
    write_run(folder)
    _edit_json(folder / "run.json", lambda d: d.update(operator_note="edited later"))
    with pytest.raises(RunFormatError, match=r"run\.json: SHA-256 differs"):
        read_run(folder)
    report = verify_run(folder)
    assert not report.ok and any("run description" in p for p in report.problems)


def test_hash_check_can_be_skipped(tmp_path: Path) -> None:
    folder = tmp_path / "run"
    written = write_run(folder)
    _tamper(folder)
    run = read_run(folder, check_hash=False)
    assert run.samples.tobytes() != written["samples"].tobytes()


def test_missing_folder(tmp_path: Path) -> None:
    with pytest.raises(RunFormatError, match="run folder is missing"):
        read_run(tmp_path / "nowhere")
    report = verify_run(tmp_path / "nowhere")
    assert not report.ok and "missing" in report.problems[0]


def test_a_file_given_as_a_run_is_named_a_file(tmp_path: Path) -> None:
    # a CSV passed where a run folder belongs was "run folder is missing"
    path = tmp_path / "record.csv"
    path.write_text("time_s,displacement_m\n0,0\n")
    with pytest.raises(RunFormatError, match="a file, not a run folder"):
        read_run(path)


# --------------------------------------------------------------------------- verify


def _run_with_seq(folder: Path, seq: list[int], flags: list[int], status="complete") -> None:
    block = empty_block(len(seq))
    block["seq"] = seq
    block["flags"] = flags
    with RunWriter(folder) as writer:
        writer.append(block)
        writer.close(status, {"lost": 3})


def test_verify_counts_flagged_gaps_as_notes(tmp_path: Path) -> None:
    folder = tmp_path / "run"
    _run_with_seq(folder, [0, 1, 2, 5, 6, 0, 1], [0, 0, 0, FLAG_GAP_BEFORE, 0, FLAG_GAP_BEFORE, 0])
    report = verify_run(folder)
    assert report.ok, report.text()
    assert report.records == {"samples": 7} and report.status == "complete"
    assert any("1 flagged gap(s), 2 sample(s) lost" in n for n in report.notes)
    assert any("restarted 1 time(s)" in n for n in report.notes)
    assert "verdict: OK" in report.text()


def test_verify_reports_unflagged_seq_breaks(tmp_path: Path) -> None:
    folder = tmp_path / "run"
    _run_with_seq(folder, [0, 1, 2, 5, 6], [0] * 5, status="aborted")
    report = verify_run(folder)
    assert not report.ok
    assert any("seq 2 -> 5" in p for p in report.problems)
    assert any("aborted" in n for n in report.notes)
    assert read_run(folder).closing["summary"] == {"lost": 3}


@pytest.mark.parametrize("block", [1, 2, 3, 4, 100])
def test_verify_reads_the_samples_in_blocks_with_the_same_findings(
    tmp_path: Path, block: int, monkeypatch: pytest.MonkeyPatch
) -> None:
    """Gaps, restarts, breaks and reconnections across block boundaries count once each,
    at the right record (hand-made sequence: the expected counts by inspection)."""
    import daq.runs.verify as verify

    monkeypatch.setattr(verify, "_BLOCK", block)
    g, r = FLAG_GAP_BEFORE, FLAG_RECONNECT_BEFORE
    seq = [0, 1, 2, 5, 6, 0, 1, 4, 5, 9, 10]
    flags = [0, 0, 0, g, r, g, 0, 0, 0, g | r, 0]
    _run_with_seq(tmp_path / "run", seq, flags)
    report = verify_run(tmp_path / "run")
    assert report.problems == [
        "samples: 1 unflagged break(s) in seq, first at record 7 (seq 1 -> 4) without "
        "FLAG_GAP_BEFORE"
    ]
    assert report.notes[-3:] == [
        "samples: 2 flagged gap(s), 5 sample(s) lost in them",
        "samples: seq restarted 1 time(s) (flagged)",
        "samples: 2 reconnection(s) flagged",
    ]


# --------------------------------------------------------------------------- writer rules


def test_writer_refuses_a_non_empty_folder(tmp_path: Path) -> None:
    folder = tmp_path / "busy"
    folder.mkdir()
    (folder / "something.txt").write_text("x")
    with pytest.raises(SourceError, match=r"busy.*not empty"):
        RunWriter(folder)
    RunWriter(tmp_path / "empty-but-existing").close()  # an empty folder is fine
    (tmp_path / "empty2").mkdir()
    RunWriter(tmp_path / "empty2").close()


def test_append_checks_dtype_and_stream(tmp_path: Path) -> None:
    with RunWriter(tmp_path / "run", extra_streams={"estimates": (EST_DTYPE, EST_UNITS)}) as w:
        with pytest.raises(FramingError, match=r"'samples'.*float64"):
            w.append(np.zeros(3))
        with pytest.raises(FramingError, match="'estimates'"):
            w.append(empty_block(3), "estimates")
        with pytest.raises(RunFormatError, match="'nope' is not declared"):
            w.append(empty_block(3), "nope")
        with pytest.raises(FramingError, match="1-D"):
            w.append(empty_block(4).reshape(2, 2))


@pytest.mark.parametrize(
    ("streams", "words"),
    [
        ({"samples": (SAMPLE_DTYPE, {})}, "reserved"),
        ({"Bad Name": (EST_DTYPE, EST_UNITS)}, "stream name"),
        ({"est": (np.dtype("<f8"), {})}, "not a structured dtype"),
        ({"est": (np.dtype([("a", ">f8")]), {"a": "s"})}, "little-endian"),
        ({"est": (np.dtype([("a", "<f8", (3,))]), {"a": "s"})}, "one bool, integer or float"),
        ({"est": (EST_DTYPE, {"t_s": "s"})}, "units"),
    ],
)
def test_extra_stream_declarations_are_checked(tmp_path: Path, streams: dict, words: str) -> None:
    with pytest.raises(RunFormatError, match=words):
        RunWriter(tmp_path / "run", extra_streams=streams)


def test_event_kind_and_fields_are_checked(tmp_path: Path) -> None:
    with RunWriter(tmp_path / "run") as writer:
        with pytest.raises(RunFormatError, match="event kind"):
            writer.event("Bad Kind")
        with pytest.raises(RunFormatError, match="cannot be stored as JSON"):
            writer.event("note", "x", value=math.nan)
        writer.event("open-failed", "port busy", seq=None)
    assert read_run(tmp_path / "run").events[0]["kind"] == "open-failed"


def test_context_manager_closes_failed_and_reraises(tmp_path: Path) -> None:
    folder = tmp_path / "run"
    with pytest.raises(RuntimeError, match="simulated"), RunWriter(folder) as writer:
        writer.append(make_samples(np.random.default_rng(3), 10))
        raise RuntimeError("simulated failure while recording")
    run = read_run(folder)
    assert run.status == "failed" and run.samples.shape == (10,)
    assert run.closing["summary"]["error"] == "RuntimeError: simulated failure while recording"
    writer.close("complete")  # idempotent: the first closing stays
    assert read_run(folder).status == "failed"
    with pytest.raises(SourceError, match="closed"):
        writer.append(empty_block(1))


# --------------------------------------------------------------------------- CSV


def test_csv_export_reads_back_exactly(tmp_path: Path) -> None:
    folder = tmp_path / "run"
    written = write_run(folder)
    samples = written["samples"].copy()
    run = read_run(folder)
    out = tmp_path / "samples.csv"
    assert export_run_csv(run, out) == samples.shape[0]
    text = out.read_text(encoding="utf-8").splitlines()
    comments = [line for line in text if line.startswith("#")]
    assert any(run.run_id in line for line in comments)
    assert "# cell: demo-cell" in comments and "# closed: yes, status complete" in comments
    header = text[len(comments)]
    assert header == (
        "seq [1],device_time_s [s],host_time_s [s],counts [count],displacement_m [m],flags [1]"
    )
    # Reference: Python's float()/int() on each field must give the stored value exactly.
    rows = list(csv.reader(text[len(comments) + 1 :]))
    for name, column in zip(SAMPLE_DTYPE.names, zip(*rows, strict=True), strict=True):
        kind = SAMPLE_DTYPE[name].kind
        values = np.array([int(v) if kind in "iu" else float(v) for v in column])
        np.testing.assert_array_equal(values, samples[name])
    # Reference: NumPy's loadtxt reads the same numbers (all columns fit float64 exactly).
    table = np.loadtxt(out, delimiter=",", comments="#", skiprows=len(comments) + 1)
    np.testing.assert_array_equal(table[:, 4], samples["displacement_m"])
    np.testing.assert_array_equal(table[:, 1], samples["device_time_s"])


def test_csv_export_of_an_extra_stream_and_non_finite_values(tmp_path: Path) -> None:
    folder = tmp_path / "run"
    est = np.zeros(4, dtype=EST_DTYPE)
    est["force_n"] = [math.nan, math.inf, -math.inf, 5e-324]
    est["force_u_n"] = np.float32(0.1)
    est["ok"] = [True, False, True, False]
    with RunWriter(folder, extra_streams={"estimates": (EST_DTYPE, EST_UNITS)}) as writer:
        writer.append(est, "estimates")
    folder_run = read_run(folder)
    out = tmp_path / "est.csv"
    export_run_csv(folder_run, out, stream="estimates")
    lines = [line for line in out.read_text().splitlines() if not line.startswith("#")]
    assert lines[0] == "t_s [s],force_n [N],force_u_n [N],ok [1]"
    force = [float(line.split(",")[1]) for line in lines[1:]]
    np.testing.assert_array_equal(force, est["force_n"])  # NaN compares equal here
    assert np.float32(float(lines[1].split(",")[2])) == np.float32(0.1)
    assert [line.split(",")[3] for line in lines[1:]] == ["1", "0", "1", "0"]
    with pytest.raises(RunFormatError, match="'nope'"):
        export_run_csv(folder_run, out, stream="nope")


@pytest.mark.parametrize("block_rows", [1, 7, 1000])
def test_csv_export_in_blocks_is_byte_identical_to_the_whole_table(
    tmp_path: Path, block_rows: int
) -> None:
    """Reference: the stream read whole (``numpy.fromfile``, in memory) and written as one
    table; the export reads the file a block at a time and must give the same bytes."""
    from daq.csv_dialect import write_csv_table
    from daq.runs.export import export_metadata

    folder = tmp_path / "run"
    write_run(folder)
    run = read_run(folder)
    for stream in ("samples", "estimates"):
        whole = np.fromfile(folder / f"{stream}.bin", dtype=run.streams[stream].dtype)
        units = run.description["streams"][stream]["units"]
        meta = {k: v for k, v in export_metadata(run, stream).items() if k != "run_id"}
        ref = tmp_path / f"{stream}-whole.csv"
        write_csv_table(
            ref,
            title=f"run {run.run_id}",
            metadata=meta,
            columns=[(n, units[n], whole[n]) for n in whole.dtype.names],
        )
        for r in (run, read_run(folder, memmap=False)):
            out = tmp_path / f"{stream}-{block_rows}.csv"
            assert export_run_csv(r, out, stream=stream, block_rows=block_rows) == whole.size
            assert out.read_bytes() == ref.read_bytes()


def test_keeping_few_event_kinds_still_counts_every_line(tmp_path: Path) -> None:
    """A closed run's closing.json counts every event line: a run read keeping only the
    alarms still matches it, and one line removed from the log is still caught."""
    folder = tmp_path / "run"
    write_run(folder)
    every = read_run(folder)
    alarms = read_run(folder, event_kinds=("alarm",))
    assert alarms.events == [e for e in every.events if e["kind"] == "alarm"]
    assert len(alarms.events) == 1 and len(every.events) == 5
    log = folder / "events.jsonl"
    log.write_bytes(b"".join(log.read_bytes().splitlines(keepends=True)[1:]))
    with pytest.raises(RunFormatError, match="says 5 lines but the file holds 4"):
        read_run(folder, event_kinds=("alarm",), check_hash=False)
