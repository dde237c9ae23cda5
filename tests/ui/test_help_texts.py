"""Every command's ``--help`` runs and says, for each option, what the reader needs.

The commands are discovered from the parser (``ui.cli.build_parser``), not listed here,
so a new command or option is checked as soon as it is registered. What is checked is
the house convention for help texts (DEVELOPERS.md, "Command-line help"):

- ``COMMAND --help`` exits 0 with the usage and no traceback;
- every option and positional has help text; a command has a description that is a
  sentence, not a heading;
- an option that takes a number names its unit (an SI symbol as written in the SI
  Brochure, BIPM, 9th edition 2019, or degrees/bit/s), or says it is dimensionless
  (a count, a fraction, a factor, a ratio, a seed);
- an option with a default says it ("default");
- an uncertainty states its coverage factor (k = 1 or k = 2, JCGM 100:2008 (GUM) 6.2);
- metavars follow one style: set explicitly, short capitals (``S``, ``HZ``, ``FILE.toml``).
"""

from __future__ import annotations

import argparse
import re
from collections.abc import Iterator

import pytest

from ui.cli import build_parser, main

# Unit symbols of the SI and units accepted for use with it (SI Brochure, 9th ed., tables
# 2, 4 and 8, with prefixes), and the few non-SI words the commands use for a unit.
_UNIT = re.compile(
    r"(?<![\w/])("
    r"(m|k|µ|n)?(s|Hz|N|m|g|V)"  # second, hertz, newton, metre, gram, volt (prefixed)
    r"|N/m|m/s²|kg/m³|N²/s|bit/s|seconds?|degrees?|°"
    r")(?![\w/])"
)
_DIMENSIONLESS = re.compile(
    r"\b(dimensionless|a count|number of|fraction|factor|ratio|seed)\b", re.IGNORECASE
)
_COVERAGE = re.compile(r"\bk = [12]\b")
_METAVAR = re.compile(r"^[A-Z][A-Z0-9_]*(\.[a-z0-9]+)?$")
#: Metavars that stand for a number by the convention (DEVELOPERS.md), whatever the type.
_NUMBER_METAVARS = {"S", "HZ", "F", "K", "M", "X", "N", "FRAC", "G", "DEG", "H", "RHO", "Z"}


def _commands() -> Iterator[tuple[list[str], argparse.ArgumentParser]]:
    """(words after ``forcelens``, parser) for the program and every (sub-)sub-command."""

    def walk(
        parser: argparse.ArgumentParser, words: list[str]
    ) -> Iterator[tuple[list[str], argparse.ArgumentParser]]:
        yield words, parser
        for action in parser._actions:
            if isinstance(action, argparse._SubParsersAction):
                for name, sub in action.choices.items():
                    yield from walk(sub, [*words, name])

    yield from walk(build_parser(), [])


COMMANDS = list(_commands())
IDS = [" ".join(["forcelens", *words]) for words, _ in COMMANDS]


def _options(parser: argparse.ArgumentParser) -> Iterator[argparse.Action]:
    for action in parser._actions:
        if isinstance(action, (argparse._HelpAction, argparse._SubParsersAction)):
            continue
        if isinstance(action, argparse._VersionAction):
            continue
        yield action


def _name(action: argparse.Action) -> str:
    return "/".join(action.option_strings) or str(action.metavar or action.dest)


def _help(parser: argparse.ArgumentParser, action: argparse.Action) -> str:
    """The help text as printed (``%(default)s`` and the like filled in)."""
    return parser._get_formatter()._expand_help(action) if action.help else ""


def _takes_number(action: argparse.Action) -> bool:
    if action.nargs == 0:
        return False
    return action.type in (int, float) or action.metavar in _NUMBER_METAVARS


def test_the_commands_are_found() -> None:
    # the discovery walks the real parser: the program, its commands and profile's actions
    assert {"forcelens", "forcelens demo", "forcelens profile new"} <= set(IDS)
    assert len(IDS) >= 18


@pytest.mark.parametrize("words", [w for w, _ in COMMANDS], ids=IDS)
def test_help_exits_zero_without_a_traceback(
    words: list[str], capsys: pytest.CaptureFixture[str]
) -> None:
    with pytest.raises(SystemExit) as stop:
        main([*words, "--help"])
    out, err = capsys.readouterr()
    assert stop.value.code == 0
    assert out.startswith("usage: forcelens")
    assert "Traceback" not in out + err and err == ""


@pytest.mark.parametrize("parser", [p for _, p in COMMANDS], ids=IDS)
def test_every_option_is_explained(parser: argparse.ArgumentParser) -> None:
    problems = []
    if parser.prog != "forcelens":
        description = parser.description or ""
        # a sentence that says what the command does, not a two-word heading
        if len(description.split()) < 8 or not description.rstrip().endswith("."):
            problems.append(f"description {description!r} is not a sentence saying what it does")
    for action in _options(parser):
        name = _name(action)
        text = _help(parser, action)
        if not text.strip():
            problems.append(f"{name}: no help text")
            continue
        if _takes_number(action) and not (_UNIT.search(text) or _DIMENSIONLESS.search(text)):
            problems.append(f"{name}: takes a number but names no unit: {text!r}")
        default = action.default
        has_default = action.option_strings and default not in (None, False, argparse.SUPPRESS)
        if has_default and "default" not in text:
            problems.append(f"{name}: has the default {default!r} but does not say it")
        if "uncertaint" in text.lower() and not _COVERAGE.search(text):
            problems.append(f"{name}: an uncertainty without its coverage factor: {text!r}")
        if action.nargs != 0:
            metavar = action.metavar
            if metavar is None and action.choices is None:
                problems.append(f"{name}: metavar left to argparse ({action.dest.upper()})")
            elif isinstance(metavar, str) and not (_METAVAR.match(metavar) and len(metavar) <= 10):
                problems.append(f"{name}: metavar {metavar!r} is not short capitals")
    assert not problems, f"{parser.prog}:\n  " + "\n  ".join(problems)


def test_a_check_that_fails_when_a_unit_is_missing() -> None:
    # the checks above are not vacuous: an option without unit, default or metavar fails
    parser = argparse.ArgumentParser(prog="forcelens bad", description="Invented bad one.")
    parser.add_argument("--rate-hz", type=float, default=2.0, help="sample rate")
    parser.add_argument("--spread", type=float, help="its uncertainty, N")
    parser.add_argument("--wait", metavar="S", help="how long to wait")  # a number by metavar
    with pytest.raises(AssertionError) as failed:
        test_every_option_is_explained(parser)
    message = str(failed.value)
    assert "--rate-hz: takes a number but names no unit" in message
    assert "--rate-hz: has the default 2.0 but does not say it" in message
    assert "--spread: an uncertainty without its coverage factor" in message
    assert "--spread: metavar left to argparse (SPREAD)" in message
    assert "--wait: takes a number but names no unit" in message
    assert "is not a sentence" in message


def _help_of(*words: str) -> str:
    parser = dict((" ".join(w), p) for w, p in COMMANDS)[" ".join(words)]
    return " ".join(parser.format_help().split())


def test_the_help_defects_of_issue_14_stay_fixed() -> None:
    # each line is one defect an operator met (issue 14, item 7), checked as printed
    calibrate = _help_of("calibrate")
    assert "one of --g or --latitude is required when the sheet's loads are masses" in calibrate
    assert "required without --profile" in calibrate  # not "defaults to the profile's" alone
    assert "--degree {1,2,3} degree of the polynomial" in calibrate and "(default 1;" in calibrate
    identify = _help_of("identify")
    assert "[--mass-kg M | --stiffness-n-per-m K | --step-force-n F]" in identify
    assert identify.rstrip().count("RUN_OR_CSV") == 2  # usage and positional, as in README
    assert "standard uncertainty (k = 1) of --stiffness-n-per-m, N/m" in identify
    assert "a run's device time" in identify  # --from/--to name their clock
    dashboard = _help_of("dashboard")
    assert "'hold DURATION_S FORCE_N'" in dashboard and "simulated seconds per real" in dashboard
    assert "print it in SI units" in _help_of("profile", "show")
