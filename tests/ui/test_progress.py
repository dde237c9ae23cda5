"""Progress of long jobs: drawn by tqdm on stderr only when stderr is a terminal
(issue 12, part 5); a pipe or a log file gets nothing. The records are simulated
(invented data)."""

from __future__ import annotations

import io
import sys
from pathlib import Path

import pytest

from estimator.profile import default_demo_profile, save_profile
from tests.ui.invented_records import simulated_record_csv
from ui.cli import main


class _Terminal(io.StringIO):
    """A stderr that says it is a terminal (as a console's is, os.isatty)."""

    def isatty(self) -> bool:
        return True


@pytest.fixture(scope="module")
def record(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, Path]:
    tmp = tmp_path_factory.mktemp("progress")
    path = simulated_record_csv(tmp / "in.csv", "hold 0.2 0; hold 0.3 20", seed=3)
    prof = tmp / "cell.toml"
    save_profile(default_demo_profile(), prof)
    return path, prof


@pytest.mark.parametrize(
    ("command", "words"),
    [
        (["replay", "{csv}", "--profile", "{prof}", "--out", "{out}"], "estimating"),
        (["replay", "{csv}", "--profile", "{prof}", "--out", "{out}", "--smooth"], "smoothing"),
        (["identify", "{csv}", "--test", "step"], "fitting the step"),
    ],
    ids=["replay", "smooth", "identify"],
)
def test_a_bar_on_a_terminal_and_nothing_in_a_pipe(
    record: tuple[Path, Path],
    tmp_path: Path,
    monkeypatch: pytest.MonkeyPatch,
    capsys: pytest.CaptureFixture[str],
    command: list[str],
    words: str,
) -> None:
    csv, prof = record
    args = [a.format(csv=csv, prof=prof, out=tmp_path / "o.csv") for a in command]
    assert main([*args, "--force"] if "--out" in args else args) == 0
    err = capsys.readouterr().err  # pytest's capture is no terminal: a pipe or a log
    assert words not in err and "\r" not in err
    terminal = _Terminal()
    monkeypatch.setattr(sys, "stderr", terminal)
    assert main([*args, "--force"] if "--out" in args else args) == 0
    assert words in terminal.getvalue() and "\r" in terminal.getvalue()
