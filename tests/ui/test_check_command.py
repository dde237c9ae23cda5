"""``forcelens check`` on the invented demo cell against handbook formulas."""

from __future__ import annotations

import math

import pytest

from ui.cli import main


def test_check_reports_the_miss_and_the_damping_that_meets_the_overshoot(
    capsys: pytest.CaptureFixture[str],
) -> None:
    assert main(["check", "--settling-time-s", "0.02", "--max-overshoot", "0.05"]) == 1
    text = capsys.readouterr().out
    # Demo cell ζ = 0.12: peak overshoot exp(−πζ/√(1−ζ²)) = 68.4 % (handbook, e.g. Ogata).
    os_ = math.exp(-math.pi * 0.12 / math.sqrt(1 - 0.12**2))
    assert f"overshoot {100 * os_:.3g} %" in text and "overshoot MISSED" in text
    # ζ for 5 % overshoot: −ln(0.05)/√(π² + ln²(0.05)) = 0.6901 (same handbook formula).
    zeta = -math.log(0.05) / math.sqrt(math.pi**2 + math.log(0.05) ** 2)
    assert f"ζ = {zeta:.4g}" in text
    # b = 2ζ√(km) with m = 0.4 kg, k = 4e5 N/m (the demo profile).
    assert f"b = {2 * zeta * math.sqrt(4e5 * 0.4):.4g} N·s/m" in text


def test_check_passes_a_lax_target(capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["check", "--settling-time-s", "0.05", "--max-overshoot", "0.7"]) == 0
    assert "settling met, overshoot met" in capsys.readouterr().out


@pytest.mark.parametrize(
    ("option", "value"), [("--max-overshoot", "-1"), ("--max-overshoot", "5"), ("--band", "2")]
)
def test_fractions_out_of_range_are_refused(option: str, value: str, capsys) -> None:
    # Issue 15: `--max-overshoot -1` was accepted; a user typing 2 meaning 2 % is told.
    assert main(["check", "--settling-time-s", "0.1", option, value]) == 1
    err = capsys.readouterr().err
    assert f"{option} = {float(value)!r}: a fraction" in err and "means" in err
