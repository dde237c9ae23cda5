"""The end of the simulated cell's programme is not a stalled stream.

`forcelens live --sim-once` used to wait 0.5 s of silence after the programme's last
sample before ending, exactly the stalled-stream timeout, so every such session ended
with "alarm raised: no sample received for more than 0.5 s".
"""

from __future__ import annotations

from pathlib import Path

import pytest

from tests.fuzz.harness import run_cli
from ui.session_log import LOG_DIR_ENV


def test_a_finished_programme_ends_the_session_without_a_stall_alarm(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    monkeypatch.setenv(LOG_DIR_ENV, str(tmp_path / "logs"))
    # invented programme: 0.3 s at rest, 0.4 s at 20 N
    outcome = run_cli(["live", "--sim-once", "--sim-programme", "hold 0.3 0; hold 0.4 20"])
    assert outcome.status == 0, outcome.stderr
    assert "simulated programme finished: 1400 samples, lost 0" in outcome.stdout
    assert "alarm raised" not in outcome.stdout
    (log,) = (tmp_path / "logs").glob("forcelens-*-live-*.log")
    text = log.read_text(encoding="utf-8")
    assert (
        "stalled-stream" not in text and "stopped (complete, simulated programme finished)" in text
    )
