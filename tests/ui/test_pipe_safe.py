"""A console that closes under a recording (``forcelens live --record ... | head``).

Found by a walk through a bench day: the reader of ``live``'s output left after three
lines, the next ``print`` raised BrokenPipeError, and the process ended with exit 1 and a
run folder of empty files with no ``closing.json``. Nothing received may be lost because
the console went away: the session goes on to its own end and seals its run.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

from daq.runs import read_run, verify_run
from ui.pipe_safe import PipeSafeStream

REPO = Path(__file__).resolve().parents[2]


def test_a_write_to_a_closed_pipe_becomes_silence() -> None:
    read_end, write_end = os.pipe()
    stream = os.fdopen(write_end, "w", buffering=1)
    safe = PipeSafeStream(stream)
    assert safe.write("first\n") == 6
    safe.flush()
    assert os.read(read_end, 100) == b"first\n"
    os.close(read_end)  # the reader goes away
    assert safe.write("second\n") == 7  # no BrokenPipeError
    safe.flush()
    assert safe.broken and not safe.isatty()
    assert safe.write("third\n") == 6
    stream.close()  # its fd now points at the null device: closing raises nothing


def test_a_recording_outlives_its_console(tmp_path: Path) -> None:
    root = tmp_path / "runs"
    proc = subprocess.Popen(
        [sys.executable, "-m", "ui.cli", "live", "--record", str(root), "--sim-once",
         "--sim-programme", "hold 0.4 0; hold 0.6 30", "--duration", "30"],
        cwd=REPO,
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        env={**os.environ, "PYTHONPATH": str(REPO)},
    )  # fmt: skip
    assert proc.stdout.readline().startswith(b"Caution")
    proc.stdout.close()  # `| head -1`
    err = proc.stderr.read().decode()
    assert proc.wait(timeout=180) == 0, err
    assert err.splitlines() == [
        "forcelens: standard output closed by its reader; the session goes on without it "
        "(q or Ctrl-C stops it)"
    ], err
    (folder,) = [p for p in root.iterdir() if p.is_dir()]
    closing = json.loads((folder / "closing.json").read_text())
    assert closing["status"] == "complete"
    assert closing["summary"]["reason"] == "simulated programme finished"
    run = read_run(folder)
    assert run.streams["samples"].shape[0] == closing["summary"]["samples"] == 2000  # 1 s, 2 kHz
    assert verify_run(folder).ok
    log = (folder / "session.log").read_text()
    assert "standard output closed by its reader" in log
