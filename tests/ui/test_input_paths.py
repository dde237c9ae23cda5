"""An empty path argument is refused by the parser, naming the argument (issue 15).

Before, ``forcelens replay ''`` read the current folder as a run and blamed a missing
run.json there.
"""

from __future__ import annotations

import pytest

from ui.cli import main


@pytest.mark.parametrize(
    "argv",
    [
        ["replay", ""],
        ["export", " "],
        ["verify", "recordings", ""],
        ["report", ""],
        ["audit", ""],
        ["identify", "", "--test", "step"],
        ["tune", ""],
        ["dashboard", "--open", ""],
    ],
)
def test_an_empty_path_is_a_usage_error(
    argv: list[str], capsys: pytest.CaptureFixture[str]
) -> None:
    with pytest.raises(SystemExit) as stop:
        main(argv)
    assert stop.value.code == 2
    err = capsys.readouterr().err
    assert "an empty path; give a run folder or a file" in err
    assert "run.json" not in err
