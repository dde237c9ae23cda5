"""Units and digits on screen: one unit per quantity from the cell's range, digits from U."""

from __future__ import annotations

import dataclasses

import pytest

from estimator.profile import default_demo_profile
from ui.display_units import CellUnits, Unit, decimals_for, fixed, unit_for


@pytest.mark.parametrize(
    ("largest", "symbol", "size"),
    [
        # SI prefixes in steps of 10³ (BIPM, The International System of Units, 9th
        # edition 2019, Table 7): the value reads from 1 to below 1000 in the unit.
        (120.0, "N", 1.0),
        (5000.0, "kN", 1e3),
        (0.5, "mN", 1e-3),
        (999.0, "N", 1.0),
        (1000.0, "kN", 1e3),
        (2.5e6, "MN", 1e6),
    ],
)
def test_force_unit_from_the_range(largest: float, symbol: str, size: float) -> None:
    assert unit_for("N", largest) == Unit(symbol, size)


def test_displacement_unit_from_the_travel_or_the_range_over_the_stiffness() -> None:
    demo = default_demo_profile()  # invented cell: travel 0.5 mm, range to 120 N, 4e5 N/m
    assert CellUnits.for_profile(demo).displacement.symbol == "µm"
    stiff = demo.with_updates(limits=dataclasses.replace(demo.limits, travel_m=None))
    assert CellUnits.for_profile(stiff).displacement.symbol == "µm"  # 120 N / 4e5 N/m = 300 µm
    long = demo.with_updates(limits=dataclasses.replace(demo.limits, travel_m=0.002))
    assert CellUnits.for_profile(long).displacement.symbol == "mm"


@pytest.mark.parametrize(
    ("u", "decimals"),
    [
        # JCGM 100:2008 (GUM) 7.2.6: U to at most two significant digits.
        (0.2003, 2),  # 0.20
        (0.0075, 4),  # 0.0075
        (0.0996, 2),  # rounds to 0.10: still two digits, two decimals
        (0.996, 1),  # 1.0
        (3.4, 1),  # 3.4
        (230.0, 0),  # 230: never negative decimals
    ],
)
def test_u_has_two_significant_digits(u: float, decimals: int) -> None:
    assert decimals_for(u, Unit("N", 1.0)) == decimals


def test_the_value_is_rounded_where_u_is() -> None:
    units = CellUnits.for_profile(default_demo_profile())
    assert units.force_text(50.01234, 0.2003) == "50.01 N"
    assert units.u_text(0.2003) == "0.20 N"
    assert units.force_text(-0.0003575, 0.0075) == "-0.0004 N"
    assert units.force_text(-0.00004, 0.0075) == "0.0000 N"  # no "-0.0000"
    # Displacement: U of one sample 2·√(σ² + LSB²/12) with the invented σ = 50 nm: 0.10 µm.
    assert units.displacement_text(125.0312e-6) == "125.03 µm"
    # Times resolve one sample period (0.5 ms at 2 kHz); durations in ms likewise.
    assert units.time_text(4.1225) == "t = 4.1225 s"
    assert units.duration_ms(0.00049) == "0.5"


def test_a_value_without_an_uncertainty_still_reads() -> None:
    assert fixed(float("nan"), 2) == "—"
    assert decimals_for(float("nan"), Unit("N", 1.0)) == 3
