"""``forcelens replay`` of a CSV with a silence of hours: one line of summary, no crash.

The exact input of issue 15's finding (by fuzzing): a record whose second sample comes
3000 s after its first ended in exit 3 (a division by zero in the observer's kernel).
Invented data.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from estimator.profile import default_demo_profile, save_profile
from ui.cli import main


def test_replay_starts_afresh_after_a_silence_of_hours(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    profile = tmp_path / "cell.toml"
    save_profile(default_demo_profile(), profile)
    t = np.concatenate(([0.0], 3000.0005 + np.arange(999) * 5e-4))
    x = np.full(t.size, 2.5e-5)  # 10 N held on the invented demo cell (k = 4e5 N/m)
    csv = tmp_path / "gap.csv"
    lines = ["time_s,displacement_m"] + [
        f"{a!r},{b!r}" for a, b in zip(t.tolist(), x.tolist(), strict=True)
    ]
    csv.write_text("\n".join(lines) + "\n", encoding="utf-8")
    out = tmp_path / "est.csv"
    for extra in ([], ["--smooth"]):
        out.unlink(missing_ok=True)
        argv = ["replay", str(csv), "--profile", str(profile), "--out", str(out), *extra]
        assert main(argv) == 0
        text = capsys.readouterr().out
        assert out.stat().st_size > 0
        if not extra:
            assert "observer started afresh after 1 silence(s) longer than 60 s" in text
