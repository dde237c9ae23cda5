"""Tests of estimator.profile: the cell profile model, reader and writer."""

from __future__ import annotations

import dataclasses
import math
import os
import random
import re
import tomllib
from pathlib import Path
from typing import Any

import numpy as np
import pytest

from estimator.errors import ProfileError
from estimator.profile import (
    KEY_HELP,
    PROFILE_FORMAT,
    PROFILE_VERSION,
    AcquisitionSection,
    CellInfo,
    CellProfile,
    LimitsSection,
    ObserverSection,
    PlantSection,
    TransducerSection,
    default_demo_profile,
    load_profile,
    profile_from_mapping,
    profile_to_toml,
    save_profile,
)

REPO = Path(__file__).resolve().parents[2]
DEMO_FILE = REPO / "estimator" / "data" / "demo-cell.toml"


def demo_mapping() -> dict[str, Any]:
    """The demo file parsed by tomllib: a fresh, mutable nested dict per call."""
    return tomllib.loads(DEMO_FILE.read_text(encoding="utf-8"))


# ------------------------------------------------------------------------- demo profile


def test_demo_profile_loads_with_the_specified_values() -> None:
    profile = default_demo_profile()
    assert profile == load_profile(DEMO_FILE)
    assert "invented" in profile.cell.description
    assert "not a real device" in profile.cell.description
    assert profile.cell.calibration_date == ""
    assert profile.plant == PlantSection(
        mass_kg=0.4,
        stiffness_n_per_m=4.0e5,
        damping_ratio=0.12,
        mass_u_kg=0.002,
        stiffness_u_n_per_m=800.0,
        damping_ratio_u=0.006,
    )
    # The file writes the number 20/2**24; it must be that double exactly.
    assert profile.transducer.volts_per_count == 20 / 2**24
    assert profile.transducer.metres_per_volt == 5.0e-5
    assert profile.transducer.noise_m == 5.0e-8
    assert profile.acquisition == AcquisitionSection(sample_rate_hz=2000.0)
    assert profile.acquisition.port == ""
    assert profile.observer == ObserverSection(
        force_bandwidth_hz=10.0, gate_sigma=5.0, rate_scale=1.0
    )
    assert profile.limits == LimitsSection(force_min_n=-10.0, force_max_n=120.0, travel_m=5.0e-4)


def test_pyproject_ships_the_demo_file_as_package_data() -> None:
    config = tomllib.loads((REPO / "pyproject.toml").read_text(encoding="utf-8"))
    assert "data/*.toml" in config["tool"]["setuptools"]["package-data"]["estimator"]


def test_docs_describe_every_key() -> None:
    text = (REPO / "docs" / "cell-profile.md").read_text(encoding="utf-8")
    for table, keys in KEY_HELP.items():
        assert f"[{table}]" in text
        for key in keys:
            assert f"`{key}`" in text, f"docs/cell-profile.md lacks [{table}] {key}"


# --------------------------------------------------------------------------- round trip


def _awkward_profile(seed: int) -> CellProfile:
    """A valid profile whose floats have long repr()s and whose strings need escaping."""
    rng = random.Random(seed)

    def r(lo: float, hi: float) -> float:
        return rng.uniform(lo, hi)

    return CellProfile(
        cell=CellInfo(
            name='cell "Q" \\ 7\tβ',
            description="line one\nline two\r\x01\x7f end ω ζ",
            source="seeded test",
            calibration_date="2024-02-29",
        ),
        plant=PlantSection(
            mass_kg=r(0.01, 10),
            stiffness_n_per_m=r(1e3, 1e7),
            damping_ratio=r(0.01, 2),
            mass_u_kg=r(0, 1e-3),
            stiffness_u_n_per_m=1 / 3,
            damping_ratio_u=0.1 + 0.2,
        ),
        transducer=TransducerSection(
            volts_per_count=r(1e-9, 1e-3),
            metres_per_volt=-r(1e-6, 1e-3),
            zero_volts=r(-1, 1),
            noise_m=5e-324,  # smallest subnormal double: repr must keep it
        ),
        acquisition=AcquisitionSection(
            sample_rate_hz=r(100, 1e5), port="/dev/ttyUSB0", baudrate=115200
        ),
        observer=ObserverSection(
            force_bandwidth_hz=r(1, 40),
            process_noise_n2_per_s=r(1e-3, 1e3),
            gate_sigma=r(1.5, 9),
            rate_scale=r(0.1, 10),
        ),
        limits=LimitsSection(force_min_n=-r(0, 1e3), force_max_n=1e300, travel_m=r(1e-5, 1e-2)),
    )


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_save_then_load_gives_back_the_same_profile_bit_for_bit(tmp_path: Path, seed: int) -> None:
    original = _awkward_profile(seed)
    path = tmp_path / "cell.toml"
    save_profile(original, path)
    loaded = load_profile(path)
    assert loaded == original
    # == on floats is already exact; compare the bits as well to rule out -0.0 == 0.0 slips.
    for name in ("cell", "plant", "transducer", "acquisition", "observer", "limits"):
        a, b = getattr(original, name), getattr(loaded, name)
        for field in dataclasses.fields(a):
            va, vb = getattr(a, field.name), getattr(b, field.name)
            assert type(va) is type(vb), field.name
            if isinstance(va, float):
                assert va.hex() == vb.hex(), field.name


def test_demo_profile_round_trips(tmp_path: Path) -> None:
    demo = default_demo_profile()
    path = tmp_path / "demo.toml"
    save_profile(demo, path)
    assert load_profile(path) == demo


def test_writer_states_format_version_and_units_and_omits_none() -> None:
    profile = default_demo_profile().with_updates(
        limits=LimitsSection(force_min_n=0.0, force_max_n=1.0, travel_m=None)
    )
    text = profile_to_toml(profile)
    assert text.startswith("#")
    assert "SI" in text.split("\n\n")[0]  # header comment states the units
    data = tomllib.loads(text)
    assert data["format"] == PROFILE_FORMAT
    assert data["version"] == PROFILE_VERSION
    assert set(data) == {"format", "version", *KEY_HELP}
    assert "travel_m" not in data["limits"]
    assert "process_noise_n2_per_s" not in data["observer"]


def test_ints_given_for_floats_are_stored_as_floats() -> None:
    plant = PlantSection(mass_kg=1, stiffness_n_per_m=1000, damping_ratio=1)
    assert all(type(v) is float for v in dataclasses.astuple(plant))


def test_save_replaces_atomically_and_leaves_no_temporary_file(tmp_path: Path) -> None:
    path = tmp_path / "cell.toml"
    path.write_text("old content", encoding="utf-8")
    os.chmod(path, 0o600)
    save_profile(default_demo_profile(), path)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["cell.toml"]
    assert (path.stat().st_mode & 0o777) == 0o600  # existing permission bits kept
    assert load_profile(path) == default_demo_profile()


def test_failed_save_keeps_the_old_file_and_removes_the_temporary(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    path = tmp_path / "cell.toml"
    path.write_text("old content", encoding="utf-8")

    def broken_replace(src: object, dst: object) -> None:
        raise OSError("simulated failure of the rename")

    monkeypatch.setattr(os, "replace", broken_replace)
    with pytest.raises(OSError, match="simulated"):
        save_profile(default_demo_profile(), path)
    assert path.read_text(encoding="utf-8") == "old content"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["cell.toml"]


# ------------------------------------------------------------------------ refused files


def _set(table: str | None, key: str, value: Any) -> Any:
    def mutate(data: dict[str, Any]) -> None:
        (data if table is None else data[table])[key] = value

    return mutate


def _delete(table: str | None, key: str) -> Any:
    def mutate(data: dict[str, Any]) -> None:
        del (data if table is None else data[table])[key]

    return mutate


# (id, mutation, text the message must contain). Every message must also name the key.
INVALID_CASES = [
    ("negative mass", _set("plant", "mass_kg", -1), "[plant] mass_kg = -1: must be > 0"),
    ("zero mass", _set("plant", "mass_kg", 0.0), "mass_kg"),
    ("NaN stiffness", _set("plant", "stiffness_n_per_m", math.nan), "stiffness_n_per_m = nan"),
    ("inf stiffness", _set("plant", "stiffness_n_per_m", math.inf), "stiffness_n_per_m"),
    ("zeta zero", _set("plant", "damping_ratio", 0.0), "damping_ratio = 0.0: must be > 0"),
    ("zeta negative", _set("plant", "damping_ratio", -0.05), "damping_ratio"),
    ("negative uncertainty", _set("plant", "mass_u_kg", -1e-3), "mass_u_kg"),
    ("unknown key", _set("plant", "mas_kg", 0.4), "did you mean 'mass_kg'"),
    ("unknown table", _set(None, "plantt", {"mass_kg": 1.0}), "did you mean 'plant'"),
    ("string for number", _set("plant", "mass_kg", "0.4"), "[plant] mass_kg"),
    ("bool for number", _set("observer", "gate_sigma", True), "[observer] gate_sigma"),
    ("float for integer", _set("acquisition", "baudrate", 921600.0), "baudrate"),
    ("number for string", _set("acquisition", "port", 3), "[acquisition] port"),
    ("wrong format", _set(None, "format", "some-other-format"), "format"),
    ("missing format", _delete(None, "format"), "format"),
    ("future version", _set(None, "version", 2), "reads profile version 1"),
    ("string version", _set(None, "version", "1"), "version"),
    ("bad month", _set("cell", "calibration_date", "2024-13-01"), "calibration_date"),
    ("not ISO", _set("cell", "calibration_date", "01/02/2024"), "calibration_date"),
    ("no leap day", _set("cell", "calibration_date", "2023-02-29"), "calibration_date"),
    ("min equals max", _set("limits", "force_min_n", 120.0), "force_min_n"),
    ("min above max", _set("limits", "force_min_n", 500.0), "force_max_n"),
    ("zero travel", _set("limits", "travel_m", 0.0), "travel_m"),
    ("zero volts per count", _set("transducer", "volts_per_count", 0.0), "volts_per_count"),
    ("zero sensitivity", _set("transducer", "metres_per_volt", 0.0), "metres_per_volt"),
    ("negative noise", _set("transducer", "noise_m", -1e-9), "noise_m"),
    ("zero sample rate", _set("acquisition", "sample_rate_hz", 0.0), "sample_rate_hz"),
    ("other framing", _set("acquisition", "framing", "binary"), '"binary-24"'),
    ("parity", _set("acquisition", "parity", "N"), '[acquisition] parity = "N"'),
    ("stop bits", _set("acquisition", "stop_bits", 3), "stop_bits = 3: must be 1, 1.5 or 2"),
    ("data bits", _set("acquisition", "data_bits", 9), "data_bits = 9"),
    ("digit delimiter", _set("acquisition", "line_delimiter", "1"), "line_delimiter"),
    ("long delimiter", _set("acquisition", "line_delimiter", ";;"), "line_delimiter"),
    ("column kind", _set("acquisition", "line_columns", "seq,time_s,counts"), "'time_s'"),
    ("no counts", _set("acquisition", "line_columns", "seq,time_us"), "must contain 'counts'"),
    ("twice", _set("acquisition", "line_columns", "seq,seq,counts"), "'seq' appears twice"),
    ("two clocks", _set("acquisition", "line_columns", "time_ms,time_us,counts"), "not both"),
    ("gate of one sigma", _set("observer", "gate_sigma", 1.0), "gate_sigma"),
    ("rate scale zero", _set("observer", "rate_scale", 0.0), "rate_scale"),
    ("zero process noise", _set("observer", "process_noise_n2_per_s", 0.0), "process_noise"),
    ("bandwidth past Nyquist", _set("observer", "force_bandwidth_hz", 1000.0), "Nyquist"),
    # issue 15's values: ωn overflows to infinity; both were called valid
    # found by the long fuzz run: a TOML integer of 400 digits overflowed float()
    ("mass of 400 digits", _set("plant", "mass_kg", 10**400), "must be a finite number"),
    ("noise of a metre", _set("transducer", "noise_m", 1e308), "noise_m = 1e+308 m"),
    ("count of a metre", _set("transducer", "metres_per_volt", 1e300), "one count"),
    ("stiffness 1.7e308", _set("plant", "stiffness_n_per_m", 1.7e308), "natural frequency of inf"),
    ("mass 1e-320", _set("plant", "mass_kg", 1e-320), "natural frequency of inf"),
    # found by the long fuzz run: the observer's σ carries these (u(m)·ẍ, u(c)·ẋ) and
    # overflowed; an uncertainty as large as a positive value says nothing of it
    ("mass u as large as the mass", _set("plant", "mass_u_kg", 0.4), "mass_u_kg = 0.4"),
    ("stiffness u 1e308", _set("plant", "stiffness_u_n_per_m", 1e308), "must be below"),
    ("damping ratio u 1e308", _set("plant", "damping_ratio_u", 1e308), "infinite uncertainty"),
    ("cell past Nyquist", _set("plant", "stiffness_n_per_m", 4.0e8), "below the Nyquist"),
    ("cell slower than 1 mHz", _set("plant", "stiffness_n_per_m", 1e-8), "from 0.001 Hz"),
    ("missing key", _delete("plant", "stiffness_n_per_m"), "stiffness_n_per_m is missing"),
    ("missing table", _delete(None, "limits"), "[limits] is missing"),
    ("empty name", _set("cell", "name", "  "), "[cell] name"),
    ("table as value", _set(None, "plant", 3), "plant"),
]


@pytest.mark.parametrize(
    ("mutate", "expected"),
    [case[1:] for case in INVALID_CASES],
    ids=[case[0] for case in INVALID_CASES],
)
def test_each_invalid_value_is_refused_naming_the_key(mutate: Any, expected: str) -> None:
    data = demo_mapping()
    mutate(data)
    with pytest.raises(ProfileError) as info:
        profile_from_mapping(data, origin="profile.toml")
    message = str(info.value)
    assert message.startswith("profile.toml: ")
    assert expected in message


def test_serial_and_line_settings_round_trip() -> None:
    data = demo_mapping()
    data["acquisition"].update(
        framing="ascii-lines",
        parity="even",
        stop_bits=1.5,
        data_bits=7,
        line_delimiter=";",
        line_columns="time_ms, counts, ignore",
    )
    profile = profile_from_mapping(data)
    acq = profile.acquisition
    assert (acq.parity, acq.stop_bits, acq.data_bits) == ("even", 1.5, 7)
    assert acq.columns == ("time_ms", "counts", "ignore")
    assert profile_from_mapping(tomllib.loads(profile_to_toml(profile))) == profile


def test_unchanged_demo_mapping_is_accepted() -> None:
    # Guards the table above: its failures come from the mutation, not the base data.
    assert profile_from_mapping(demo_mapping()) == default_demo_profile()


def test_file_errors_name_the_file_and_key(tmp_path: Path) -> None:
    path = tmp_path / "profile.toml"
    text = DEMO_FILE.read_text(encoding="utf-8").replace("mass_kg = 0.4 ", "mass_kg = -1 ")
    assert text != DEMO_FILE.read_text(encoding="utf-8")
    path.write_text(text, encoding="utf-8")
    with pytest.raises(ProfileError) as info:
        load_profile(path)
    assert str(info.value).startswith(f"{path}: [plant] mass_kg = -1: must be > 0 (moving mass")


def test_broken_toml_syntax_names_the_file(tmp_path: Path) -> None:
    path = tmp_path / "broken.toml"
    path.write_text("format = \n[plant\n", encoding="utf-8")
    with pytest.raises(ProfileError, match=r"broken\.toml: not valid TOML"):
        load_profile(path)


def test_unquoted_toml_date_and_omitted_observer_table_are_accepted() -> None:
    data = tomllib.loads(
        DEMO_FILE.read_text(encoding="utf-8").replace(
            'calibration_date = ""', "calibration_date = 2024-05-17"
        )
    )
    del data["observer"]
    profile = profile_from_mapping(data)
    assert profile.cell.calibration_date == "2024-05-17"
    assert profile.observer == ObserverSection()


def test_sections_validate_when_built_in_code() -> None:
    with pytest.raises(ProfileError, match=r"\[plant\] damping_ratio"):
        PlantSection(mass_kg=1.0, stiffness_n_per_m=1.0, damping_ratio=-0.1)
    with pytest.raises(ProfileError, match=r"\[cell\] calibration_date"):
        CellInfo(name="x", calibration_date="2024-1-5")
    with pytest.raises(ProfileError, match="plant"):
        dataclasses.replace(default_demo_profile(), plant="not a section")


# ---------------------------------------------------------------------- derived values


def test_resolution_is_one_count_in_metres_whatever_the_sign() -> None:
    plus = TransducerSection(volts_per_count=2.0**-20, metres_per_volt=3.0e-5)
    minus = TransducerSection(volts_per_count=2.0**-20, metres_per_volt=-3.0e-5)
    # 2**-20 is a power of two, so the product is exact: compare with ==.
    assert plus.resolution_m == minus.resolution_m == 3.0e-5 * 2.0**-20


def test_plant_section_gives_the_handbook_plant() -> None:
    pytest.importorskip("estimator.plant")
    section = default_demo_profile().plant
    m, k, zeta = section.mass_kg, section.stiffness_n_per_m, section.damping_ratio
    plant = section.plant()
    assert plant.mass_kg == m
    assert plant.stiffness_n_per_m == k
    # Handbook: c = 2ζ·sqrt(k·m), ωn = sqrt(k/m). rel 1e-12: a few roundings in sqrt/products.
    assert plant.damping_n_s_per_m == pytest.approx(2 * zeta * math.sqrt(k * m), rel=1e-12)
    assert plant.damping_ratio == pytest.approx(zeta, rel=1e-12)
    assert plant.natural_freq_rad_s == pytest.approx(math.sqrt(k / m), rel=1e-12)
    assert section.natural_freq_hz == pytest.approx(math.sqrt(k / m) / (2 * math.pi), rel=1e-12)
    # Independent check: the poles of m·s² + c·s + k (NumPy roots) have |p| = ωn and
    # −Re(p)/|p| = ζ (handbook second-order relations). rel 1e-9: eigenvalue-based roots
    # of a badly scaled polynomial (coefficients 0.4 … 4e5) lose a few digits.
    poles = np.roots([plant.mass_kg, plant.damping_n_s_per_m, plant.stiffness_n_per_m])
    assert np.abs(poles) == pytest.approx([section.natural_freq_rad_s] * 2, rel=1e-9)
    assert -poles.real / np.abs(poles) == pytest.approx([zeta] * 2, rel=1e-9)


def test_with_updates_replaces_and_revalidates() -> None:
    demo = default_demo_profile()
    faster = demo.with_updates(acquisition=AcquisitionSection(sample_rate_hz=10_000.0))
    assert faster.acquisition.sample_rate_hz == 10_000.0
    assert faster.plant is demo.plant
    assert demo.acquisition.sample_rate_hz == 2000.0  # original untouched
    with pytest.raises(ProfileError, match="did you mean 'plant'"):
        demo.with_updates(plants=demo.plant)
    with pytest.raises(ProfileError, match=r"natural frequency of 159\.155 Hz.*Nyquist"):
        demo.with_updates(acquisition=AcquisitionSection(sample_rate_hz=1.5))  # Nyquist 0.75 Hz


@pytest.mark.parametrize(
    ("key", "value", "words"),
    [
        # Issue 15: each was accepted. Ranges are common practice for the trade (no
        # displacement transducer near 10 MHz, no UART near 20 Mbit/s).
        ("sample_rate_hz", 1e300, "at most 1e+07 Hz"),
        ("baudrate", 10**26, "at most 20000000 bit/s"),
        ("data_bits", 7, "must be 8 with the binary framing 'binary-24'"),
    ],
)
def test_implausible_acquisition_values_are_refused_with_the_key(
    key: str, value: object, words: str
) -> None:
    base = default_demo_profile()
    fields = {"framing": "binary-24"} if key == "data_bits" else {}
    with pytest.raises(ProfileError, match=re.escape(words)) as err:
        dataclasses.replace(base.acquisition, **fields, **{key: value})
    assert key in str(err.value)


def test_a_missing_profile_is_named_without_the_errno(tmp_path: Path) -> None:
    # `profile show nothere.toml` printed "[Errno 2] No such file or directory: ..."
    missing = tmp_path / "nothere.toml"
    with pytest.raises(FileNotFoundError) as caught:
        load_profile(missing)
    assert str(caught.value) == (
        f"{missing}: no such file (a profile is a TOML file; `forcelens profile new` makes one)"
    )
