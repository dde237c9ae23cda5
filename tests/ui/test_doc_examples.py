"""The command lines shown in README.md, recordings/README.md and docs/*.md work.

Convention (DEVELOPERS.md): a line starting with ``forcelens`` (or ``.venv/bin/forcelens``)
in a fenced block tagged ``sh`` is an example: it is run here as written, in order, one
document at a time, in a fresh folder holding copies of ``docs/`` and ``recordings/``,
with ``recordings/<run>`` standing for the repository's demo run (invented data, the
built-in simulated cell; no hardware). It must exit 0, or with the status its comment
names (``# exit status 1: ...``). A block tagged ``text`` is a synopsis with
placeholders: it is not run, but every option it names must exist, as must those of the
inline ``forcelens ...`` synopses in the prose and the README's table.
"""

from __future__ import annotations

import argparse
import os
import re
import shlex
import shutil
import subprocess
import sys
from dataclasses import dataclass
from pathlib import Path

import pytest

from ui.cli import build_parser

REPO = Path(__file__).resolve().parents[2]
DOCUMENTS = [
    REPO / "README.md",
    REPO / "recordings" / "README.md",
    *sorted((REPO / "docs").glob("*.md")),
]
DEMO_RUNS = sorted(p.parent for p in (REPO / "recordings").glob("*/run.json"))

#: Examples left to the slow suite (``-m slow``), each with its reason (kept short).
SLOW = {
    "forcelens dashboard --screenshot docs/dashboard-live.png --after 11 --force": (
        "keeps the window open 11 s of the demo programme for the picture in docs/"
    ),
    "forcelens impact --profile recalibrated.toml --since 2026-01-01 --out impact-2026": (
        "starts a local Dask cluster (about 10 s on two busy cores); serial impact is tested "
        "in test_archive_impact.py"
    ),
    "forcelens audit --all --root recordings --out audit.csv": (
        "starts a local Dask cluster (about 10 s on two busy cores); serial audit --all is "
        "tested in test_archive_audit.py"
    ),
}

_FENCE = re.compile(r"^```([^\n`]*)\n(.*?)^```", re.S | re.M)
_PREFIX = re.compile(r"^(\.venv/bin/)?forcelens(\s|$)")
_EXIT = re.compile(r"#\s*exit status (\d+)")
_INLINE = re.compile(r"(?<!`)`(forcelens [^`]+)`(?!`)")


@dataclass(frozen=True)
class Example:
    document: str
    line_no: int
    text: str  # as written, without the .venv/bin/ prefix

    @property
    def command(self) -> str:
        """The line without its comment (the key of `SLOW`)."""
        return re.sub(r"\s+#.*$", "", self.text)

    @property
    def expected_status(self) -> int:
        found = _EXIT.search(self.text)
        return int(found.group(1)) if found else 0

    def argv(self, run: str) -> list[str]:
        words = shlex.split(self.text.replace("recordings/<run>", run), comments=True)
        return words[1:]


def _blocks(path: Path) -> list[tuple[str, int, str]]:
    """(info string, line number of the block's first line, body) of each fenced block."""
    text = path.read_text(encoding="utf-8")
    return [
        (m.group(1).strip(), text[: m.start()].count("\n") + 2, m.group(2))
        for m in _FENCE.finditer(text)
    ]


def _forcelens_lines(path: Path, tag: str) -> list[Example]:
    found = []
    for info, first, body in _blocks(path):
        if info != tag:
            continue
        for offset, line in enumerate(body.splitlines()):
            if _PREFIX.match(line.strip()):
                text = line.strip().removeprefix(".venv/bin/")
                found.append(Example(str(path.relative_to(REPO)), first + offset, text))
    return found


def _documents_with_examples() -> list[Path]:
    return [p for p in DOCUMENTS if _forcelens_lines(p, "sh")]


def test_every_forcelens_block_is_tagged() -> None:
    # an untagged block with a forcelens line would silently escape both checks below
    untagged = []
    for path in DOCUMENTS:
        for info, first, body in _blocks(path):
            if info not in ("sh", "text") and any(
                _PREFIX.match(line.strip()) for line in body.splitlines()
            ):
                untagged.append(f"{path.relative_to(REPO)}:{first} (```{info})")
    assert not untagged, "tag these blocks sh (an example) or text (a synopsis): " + str(untagged)


def test_the_documents_hold_examples() -> None:
    names = {p.name for p in _documents_with_examples()}
    assert {"README.md", "dashboard.md"} <= names
    assert DEMO_RUNS, "recordings/ holds no demo run to stand for recordings/<run>"


def _run(example: Example, folder: Path, run: str) -> str:
    """Run one example in ``folder``; return what went wrong ('' when it worked)."""
    env = dict(os.environ, PYTHONPATH=str(REPO), QT_QPA_PLATFORM="offscreen")
    done = subprocess.run(
        [sys.executable, "-m", "ui.cli", *example.argv(run)],
        cwd=folder,
        env=env,
        capture_output=True,
        text=True,
        timeout=180,
    )
    where = f"{example.document}:{example.line_no}: {example.text}"
    if "Traceback" in done.stderr:
        return f"{where}\n  traceback:\n{done.stderr}"
    if done.returncode != example.expected_status:
        return (
            f"{where}\n  exit status {done.returncode}, expected {example.expected_status}"
            f"\n  {done.stderr.strip() or done.stdout.strip()[-500:]}"
        )
    return ""


def _folder(tmp_path: Path) -> tuple[Path, str]:
    """A folder holding copies of docs/ and of the demo runs; the demo run's path in it."""
    shutil.copytree(REPO / "docs", tmp_path / "docs")
    for run in DEMO_RUNS:
        shutil.copytree(run, tmp_path / "recordings" / run.name)
    return tmp_path, f"recordings/{DEMO_RUNS[0].name}"


@pytest.mark.parametrize(
    "document", _documents_with_examples(), ids=lambda p: str(p.relative_to(REPO))
)
def test_the_examples_of_a_document_run(document: Path, tmp_path: Path) -> None:
    folder, run = _folder(tmp_path)
    problems = []
    for example in _forcelens_lines(document, "sh"):
        if example.command in SLOW:
            continue
        problems.append(_run(example, folder, run))
    problems = [p for p in problems if p]
    assert not problems, "\n".join(problems)


def test_the_slow_examples_are_still_shown() -> None:
    shown = {e.command for p in DOCUMENTS for e in _forcelens_lines(p, "sh")}
    assert not set(SLOW) - shown, "no document shows these any more: drop them from SLOW"


@pytest.mark.slow
@pytest.mark.parametrize(
    "document", _documents_with_examples(), ids=lambda p: str(p.relative_to(REPO))
)
def test_every_example_of_a_document_runs(document: Path, tmp_path: Path) -> None:
    # the slow ones too, in their document's order (impact needs the profile made before)
    folder, run = _folder(tmp_path)
    problems = [_run(e, folder, run) for e in _forcelens_lines(document, "sh")]
    problems = [p for p in problems if p]
    assert not problems, "\n".join(problems)


def _subcommand(words: list[str]) -> tuple[list[str], argparse.ArgumentParser]:
    """The longest run of command words at the start of ``words`` and its parser."""
    parser, used = build_parser(), []
    for word in words:
        subs = [a for a in parser._actions if isinstance(a, argparse._SubParsersAction)]
        if not subs or word not in subs[0].choices:
            break
        parser, used = subs[0].choices[word], [*used, word]
    return used, parser


def _synopses() -> list[tuple[str, str]]:
    """(where, synopsis) for the inline spans and the text blocks naming a command."""
    found = []
    for path in DOCUMENTS:
        name = str(path.relative_to(REPO))
        text = path.read_text(encoding="utf-8")
        prose = _FENCE.sub(lambda m: "\n" * m.group(0).count("\n"), text)
        for m in _INLINE.finditer(prose):
            found.append((f"{name}:{prose[: m.start()].count(chr(10)) + 1}", m.group(1)))
        for info, first, body in _blocks(path):
            if info != "text":
                continue
            # a synopsis starts with forcelens and goes on over the indented lines below it
            for m in re.finditer(r"(?m)^forcelens\b.*(?:\n[ \t]+\S.*)*", body):
                where = f"{name}:{first + body[: m.start()].count(chr(10))}"
                found.append((where, " ".join(m.group(0).split())))
    return found


def test_the_synopses_name_existing_commands_and_options() -> None:
    problems = []
    for where, synopsis in _synopses():
        words = synopsis.replace("\\|", "|").split()[1:]
        used, parser = _subcommand(words)
        if not used and words and words[0] not in ("--help", "--version", "COMMAND"):
            problems.append(f"{where}: {synopsis!r}: no command {words[0]!r}")
            continue
        options = {s for a in parser._actions for s in a.option_strings}
        for option in re.findall(r"(?<![\w-])--[a-z][a-z0-9-]*", " ".join(words)):
            if option not in options:
                problems.append(
                    f"{where}: {synopsis!r}: forcelens {' '.join(used)} has no {option}"
                )
    assert not problems, "\n".join(problems)


def test_the_synopsis_check_catches_a_wrong_option() -> None:
    # the check above is not vacuous: an option the command lacks is found
    used, parser = _subcommand(["calibrate", "SHEET.csv", "--latitude", "45"])
    options = {s for a in parser._actions for s in a.option_strings}
    assert used == ["calibrate"] and "--latitude" in options and "--height" not in options
    assert _subcommand(["profile", "new", "OUT.toml"])[0] == ["profile", "new"]
