"""Fuzzing suite (issue 15, item 7): valid profiles, calibration sheets, CSV records, run
folders and command lines, damaged by hypothesis, through the real command line.

Whatever the damage: exit status 0, 1 or 2, no traceback, inputs byte-identical, nothing
created outside the output path (see `harness.check_case`). Seeded (derandomised), so a
failure repeats. The default run is short; ``-m slow`` runs the long one (
``FORCELENS_FUZZ_EXAMPLES`` cases per target, default 4000).
"""

from __future__ import annotations

import os
import shutil
from collections.abc import Callable
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from tests.fuzz.harness import DEMO_PROFILE, EXAMPLE_SHEET, check_case, demo_run
from tests.fuzz.mutations import EXTREME_NUMBERS, mutated_bytes

SHORT = 25
LONG = int(os.environ.get("FORCELENS_FUZZ_EXAMPLES", "4000"))


def _settings(n: int) -> settings:
    return settings(
        max_examples=n,
        deadline=None,
        derandomize=True,
        database=None,
        suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow],
    )


def _valid_csv() -> bytes:
    """A plain record: 0.5 s of an invented held load on the demo cell, 2 kHz."""
    t = np.arange(1000) * 5e-4
    x = 2.5e-5 + 1e-8 * np.sin(2 * np.pi * 7 * t)
    rows = "\n".join(f"{a:.6f},{b:.9e}" for a, b in zip(t, x, strict=True))
    return ("time_s,displacement_m\n" + rows + "\n").encode()


PROFILE = DEMO_PROFILE.read_bytes()
SHEET = EXAMPLE_SHEET.read_bytes()
CSV = _valid_csv()
RUN = demo_run()
RUN_FILES = sorted(p.name for p in RUN.iterdir() if p.is_file())


def _writer(name: str, data: bytes) -> Callable[[Path], None]:
    def prepare(work: Path) -> None:
        (work / name).write_bytes(data)
        (work / "good.toml").write_bytes(PROFILE)
        (work / "good.csv").write_bytes(CSV)

    return prepare


# ------------------------------------------------------------------ the targets

PROFILE_COMMANDS = (
    (["profile", "show", "p.toml"], None),
    (["replay", "good.csv", "--profile", "p.toml", "--out", "out.csv"], "out.csv"),
    (["tune", "good.csv", "--profile", "p.toml"], None),
)
SHEET_COMMANDS = (
    (["calibrate", "s.csv", "--g", "9.81", "--out", "cal"], "cal"),
    (["calibrate", "s.csv", "--latitude", "45", "--profile", "good.toml", "--out", "cal"], "cal"),
)
CSV_COMMANDS = (
    (["replay", "r.csv", "--profile", "good.toml", "--out", "out.csv"], "out.csv"),
    (["replay", "r.csv", "--profile", "good.toml", "--smooth", "--out", "out.csv"], "out.csv"),
    (["identify", "r.csv", "--test", "ringdown", "--profile", "good.toml"], None),
    (["identify", "r.csv", "--test", "step", "--profile", "good.toml"], None),
)
RUN_COMMANDS = (
    (["verify", "run"], None),
    (["replay", "run", "--out", "out.csv"], "out.csv"),
    (["export", "run", "--out", "out.csv"], "out.csv"),
    (["export", "run", "--stream", "estimates", "--out", "out.csv"], "out.csv"),
    (["audit", "run"], None),
)


def _file_case(name: str, data: bytes, commands: tuple, pick: int, tmp: Path) -> None:
    argv, output = commands[pick % len(commands)]
    check_case(tmp / "case", argv, output, _writer(name, data))


def _profile_cases(n: int) -> Callable:
    @_settings(n)
    @given(data=mutated_bytes(PROFILE), pick=st.integers(0, 99))
    def case(tmp_path_factory, data: bytes, pick: int) -> None:
        _file_case("p.toml", data, PROFILE_COMMANDS, pick, tmp_path_factory.getbasetemp())

    return case


def _sheet_cases(n: int) -> Callable:
    @_settings(n)
    @given(data=mutated_bytes(SHEET), pick=st.integers(0, 99))
    def case(tmp_path_factory, data: bytes, pick: int) -> None:
        _file_case("s.csv", data, SHEET_COMMANDS, pick, tmp_path_factory.getbasetemp())

    return case


def _csv_cases(n: int) -> Callable:
    @_settings(n)
    @given(data=mutated_bytes(CSV), pick=st.integers(0, 99))
    def case(tmp_path_factory, data: bytes, pick: int) -> None:
        _file_case("r.csv", data, CSV_COMMANDS, pick, tmp_path_factory.getbasetemp())

    return case


def _run_cases(n: int) -> Callable:
    @_settings(n)
    @given(
        victim=st.sampled_from(RUN_FILES),
        how=st.sampled_from(["mutate", "delete", "folder", "empty"]),
        data=st.data(),
        pick=st.integers(0, 99),
    )
    def case(tmp_path_factory, victim: str, how: str, data: st.DataObject, pick: int) -> None:
        original = (RUN / victim).read_bytes()
        damaged = data.draw(mutated_bytes(original)) if how == "mutate" else b""

        def prepare(work: Path) -> None:
            shutil.copytree(RUN, work / "run")
            path = work / "run" / victim
            if how == "delete":
                path.unlink()
            elif how == "folder":
                path.unlink()
                path.mkdir()
            else:
                path.write_bytes(damaged)

        argv, output = RUN_COMMANDS[pick % len(RUN_COMMANDS)]
        check_case(tmp_path_factory.getbasetemp() / "case", argv, output, prepare)

    return case


_OPTION_VALUES = (*EXTREME_NUMBERS, "good.toml", "good.csv", "missing.csv", "out.csv", "-")
_COMMANDS = {  # command: its options (what a user might type), paths it reads
    "replay": ["--profile", "--out", "--speed", "--steps", "--smooth", "--force"],
    "identify": ["--test", "--from", "--to", "--mass-kg", "--stiffness-n-per-m", "--profile"],
    "tune": ["--profile", "--quiet-from", "--quiet-to", "--from", "--to"],
    "check": ["--profile", "--settle-ms", "--band", "--max-overshoot"],
    "profile": ["show", "new", "--natural-frequency-hz", "--damping-ratio", "--stiffness"],
    "calibrate": ["--g", "--latitude", "--height-m", "--degree", "--profile", "--out"],
    "runs": ["--root", "--since", "--until", "--cell", "--tag", "--json"],
}


def _arg_cases(n: int) -> Callable:
    @_settings(n)
    @given(
        command=st.sampled_from(sorted(_COMMANDS)),
        words=st.data(),
    )
    def case(tmp_path_factory, command: str, words: st.DataObject) -> None:
        tokens = words.draw(
            st.lists(
                st.one_of(st.sampled_from(_COMMANDS[command]), st.sampled_from(_OPTION_VALUES)),
                max_size=8,
            )
        )

        def prepare(work: Path) -> None:
            (work / "good.toml").write_bytes(PROFILE)
            (work / "good.csv").write_bytes(CSV)

        # any file the command writes lands in out.csv (the only output name offered) or
        # nowhere; runs --root may create a catalogue in the folder it is pointed at
        check_case(tmp_path_factory.getbasetemp() / "case", [command, *tokens], "out.csv", prepare)

    return case


test_damaged_profiles = _profile_cases(SHORT)
test_damaged_calibration_sheets = _sheet_cases(SHORT)
test_damaged_csv_records = _csv_cases(SHORT)
test_damaged_run_folders = _run_cases(2 * SHORT)
test_odd_command_lines = _arg_cases(2 * SHORT)

test_damaged_profiles_long = pytest.mark.slow(_profile_cases(LONG))
test_damaged_calibration_sheets_long = pytest.mark.slow(_sheet_cases(LONG))
test_damaged_csv_records_long = pytest.mark.slow(_csv_cases(LONG))
test_damaged_run_folders_long = pytest.mark.slow(_run_cases(LONG))
test_odd_command_lines_long = pytest.mark.slow(_arg_cases(LONG))
