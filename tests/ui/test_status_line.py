"""The terminal status line in the cell's units, digits from U, with the model in force."""

from __future__ import annotations

import numpy as np

from estimator.observer import ESTIMATE_DTYPE
from estimator.profile import default_demo_profile
from ui.display_units import CellUnits
from ui.status import format_status


def _row() -> np.ndarray:
    est = np.zeros(1, ESTIMATE_DTYPE)
    est["time_s"] = 4.1225
    est["force_n"] = 50.01234
    est["force_u_n"] = 0.1  # U = 0.20 N (k = 2)
    est["displacement_m"] = 125.0312e-6
    est["p_hold"], est["p_rate"], est["p_jump"] = 0.97, 0.03, 0.0
    return est


def test_status_line_in_the_cells_units() -> None:
    profile = default_demo_profile()  # invented cell: N and µm, 2 kHz
    line = format_status(
        _row(),
        settling="settled",
        rejected=2,
        units=CellUnits.for_profile(profile),
        framing=profile.acquisition.framing,
    )
    # JCGM 100:2008 7.2.6: U to two significant digits, the value rounded where U is.
    assert "t = 4.1225 s" in line
    assert "F 50.01 N ± 0.20 N (U, k=2)" in line
    assert "x 125.03 µm" in line
    assert "[SETTLED]" in line and "steady load (97 %)" in line
    assert "2 bad lines" in line  # an ASCII source rejects lines
    binary = format_status(
        _row(), rejected=2, units=CellUnits.for_profile(profile), framing="binary-24"
    )
    assert "2 bad frames" in binary
