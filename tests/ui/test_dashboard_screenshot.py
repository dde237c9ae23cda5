"""``forcelens dashboard --screenshot``: an existing file is replaced only with --force.

Issue 15's rule for every writer (an existing output is never replaced silently), which
the screenshot option had missed: it wrote over any file and printed "wrote" even after
"could not write".
"""

from __future__ import annotations

from pathlib import Path

import pytest

from ui.cli import main

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # PNG specification (ISO/IEC 15948), file signature


def test_an_existing_screenshot_file_is_refused_before_a_window_opens(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    out = tmp_path / "shot.png"
    out.write_bytes(b"an earlier picture")
    status = main(["dashboard", "--screenshot", str(out), "--after", "0.1"])
    assert status == 1
    assert "exists; give --force to replace it" in capsys.readouterr().err
    assert out.read_bytes() == b"an earlier picture"


def test_force_replaces_it_with_a_png_and_says_so(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    out = tmp_path / "shot.png"
    out.write_bytes(b"an earlier picture")
    argv = ["dashboard", "--screenshot", str(out), "--after", "0.5", "--force"]
    assert main(argv) == 0
    assert out.read_bytes().startswith(PNG_SIGNATURE)
    assert f"wrote {out} (replaced {out} (18 bytes))" in capsys.readouterr().out
