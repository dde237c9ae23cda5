"""Run the command line in-process on mutated inputs and check what it must never do.

A case is one command line over inputs copied into a fresh folder. Whatever the input,
the command must (issue 15): exit with 0, 1 or 2 (3 is forcelens's own crash exit, a
traceback is anything else), print no traceback, leave every input byte-identical and
create nothing outside its one output path.
"""

from __future__ import annotations

import contextlib
import hashlib
import io
import os
import shutil
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path

from ui.cli import main

ALLOWED_EXITS = {0, 1, 2}
REPO = Path(__file__).resolve().parents[2]
DEMO_PROFILE = REPO / "estimator" / "data" / "demo-cell.toml"
EXAMPLE_SHEET = REPO / "docs" / "examples" / "invented-calibration-sheet.csv"


def demo_run() -> Path:
    """The recorded demo run (invented data) kept in recordings/."""
    runs = sorted(p for p in (REPO / "recordings").iterdir() if (p / "run.json").is_file())
    assert runs, "recordings/ holds no run"
    return runs[0]


@dataclass(frozen=True)
class Outcome:
    status: int
    stdout: str
    stderr: str


def run_cli(argv: Sequence[str]) -> Outcome:
    """``forcelens ARGV`` in this process; argparse's own exit becomes the status."""
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        try:
            status = main(list(argv))
        except SystemExit as exc:  # argparse: --help (0) or a usage error (2)
            status = exc.code if isinstance(exc.code, int) else 1
    return Outcome(status, out.getvalue(), err.getvalue())


def snapshot(root: Path) -> dict[str, str]:
    """Every path under ``root`` with the SHA-256 of its content ('dir' for folders)."""
    found = {}
    for dirpath, dirnames, filenames in os.walk(root):
        for name in dirnames:
            found[os.path.relpath(os.path.join(dirpath, name), root)] = "dir"
        for name in filenames:
            path = os.path.join(dirpath, name)
            rel = os.path.relpath(path, root)
            if os.path.islink(path) or not os.path.isfile(path):
                found[rel] = "special"
                continue
            with open(path, "rb") as fh:
                found[rel] = hashlib.sha256(fh.read()).hexdigest()
    return found


def check_case(
    work: Path, argv: Sequence[str], output: str | None, prepare: Callable[[Path], None]
) -> Outcome:
    """Prepare ``work`` (a fresh folder), run ``argv`` there and check the rules.

    ``output`` is the one path (relative to ``work``) the command may create or change.
    """
    if work.exists():
        shutil.rmtree(work)
    work.mkdir(parents=True)
    prepare(work)
    before = snapshot(work)
    cwd = os.getcwd()
    os.chdir(work)
    try:
        outcome = run_cli(argv)
    finally:
        os.chdir(cwd)
    after = snapshot(work)
    shown = f"forcelens {' '.join(argv)} -> {outcome.status}\n{outcome.stderr[-2000:]}"
    assert outcome.status in ALLOWED_EXITS, shown
    assert "Traceback" not in outcome.stderr + outcome.stdout, shown
    for rel, digest in before.items():
        assert after.get(rel) == digest, f"input {rel} changed or vanished: {shown}"
    extra = {rel for rel in after if rel not in before}
    if output is not None:
        extra = {rel for rel in extra if rel != output and not rel.startswith(output + os.sep)}
    assert not extra, f"created outside the output: {sorted(extra)}: {shown}"
    return outcome
