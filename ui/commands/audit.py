"""``forcelens audit``: recompute every figure of a run and compare with what was stored.

Checks, in order: the files against the closing record (a changed sample, a truncated
file, an edited description); the replayed estimates against the ones computed live; the
settling and alarm transitions against those logged live; and, when a report was made
(``figures.json``), every figure of it. It prints "identical" or each difference with its
likely cause, and exits 1 on any difference that a newer software version alone does not
explain.
"""

from __future__ import annotations

import argparse
import json
from pathlib import Path
from typing import Any

__all__ = ["register"]


def register(subparsers: Any) -> None:
    p = subparsers.add_parser(
        "audit",
        help="replay a run and check every stored figure: 'identical' or what differs and why",
        description=(
            "Replay a recorded run through the same pipeline and recompute its estimates, "
            "settling states, alarms and, when a report was made, every figure of it; "
            "compare with what was stored and name each difference with its likely cause "
            "(altered or truncated data, another profile, another software version). "
            "Exit status 1 on a difference not explained by the software version alone."
        ),
    )
    p.add_argument("run_folder", metavar="RUN", help="run folder")
    p.add_argument("--report", help="report folder (default: RUN-report beside the run)")
    p.add_argument("--profile", help="replay with this profile instead of the run's own")
    p.set_defaults(run=run)


class _Findings:
    def __init__(self) -> None:
        self.items: list[tuple[str, str, bool]] = []  # (what, likely cause, explained)

    def add(self, what: str, cause: str, *, explained: bool = False) -> None:
        self.items.append((what, cause, explained))


def run(args: argparse.Namespace) -> int:
    from daq.runs import verify_run
    from estimator.profile import load_profile
    from ui.commands.report import default_report_folder
    from ui.figures import compute_figures, replay_run
    from ui.pipeline import ESTIMATE_STREAM
    from ui.version import software_version

    folder = Path(args.run_folder)
    found = _Findings()
    report = verify_run(folder)
    for problem in report.problems:
        found.add(problem, _cause(problem))
    if not report.closed:
        print("note: the run was not closed; only what was flushed can be checked")
    profile = load_profile(args.profile) if args.profile else None
    try:
        replayed = replay_run(folder, profile=profile, check_hash=False)
    except ValueError as exc:
        if not found.items:
            raise
        found.add(f"the run cannot be replayed: {exc}", "see the differences above")
        return _print(found, "")
    version = replayed.data.description["software_version"]
    newer = version != software_version()
    if profile is not None and not replayed.own_profile:
        found.add(
            f"replayed with {args.profile} instead of the profile recorded with the run",
            "profile swapped on purpose (--profile)",
        )
    live = replayed.data.streams.get(ESTIMATE_STREAM)
    if live is not None:
        n = min(live.size, replayed.estimates.size)
        a = live[:n].view("u1").reshape(n, -1)
        b = replayed.estimates[:n].view("u1").reshape(n, -1)
        bad = (a != b).any(axis=1)
        if bad.any() or live.size != replayed.estimates.size:
            first = int(bad.argmax()) if bad.any() else n
            found.add(
                f"replayed estimates differ from those computed live: {int(bad.sum())} of "
                f"{n} samples, first at sample {first}"
                + (
                    f"; {live.size} live against {replayed.estimates.size} replayed"
                    if live.size != replayed.estimates.size
                    else ""
                ),
                _likely(newer, version, replayed.own_profile, report.problems),
                explained=newer and replayed.own_profile and not report.problems,
            )
    logged = _strip([e for e in replayed.data.events if e["kind"] in ("settling", "alarm")])
    again = _strip([_as_logged(e) for e in replayed.events])
    if logged != again:
        found.add(
            f"settling and alarm transitions differ from those logged live "
            f"({len(logged)} logged, {len(again)} recomputed; first difference at "
            f"transition {_first_difference(logged, again)})",
            _likely(newer, version, replayed.own_profile, report.problems),
            explained=newer and replayed.own_profile and not report.problems,
        )
    figures = compute_figures(replayed)
    report_folder = Path(args.report) if args.report else default_report_folder(folder)
    stored_path = report_folder / "figures.json"
    if stored_path.exists():
        stored = json.loads(stored_path.read_text(encoding="utf-8"))
        _compare_figures(stored, figures, found)
        print(f"compared with the report in {report_folder}")
    elif args.report:
        raise ValueError(f"{stored_path}: no such file; make the report with forcelens report")
    what = ", report figures" if stored_path.exists() else ""
    return _print(
        found,
        f"identical: run {figures['run_id']} reproduces exactly ({figures['samples']} "
        f"samples, estimates, settling states, alarms{what})",
    )


def _print(found: _Findings, identical: str) -> int:
    """Print the verdict; 1 when a difference is not explained by the software version."""
    if not found.items:
        print(identical)
        return 0
    unexplained = 0
    for what, cause, explained in found.items:
        print(f"DIFFERENCE: {what}\n  likely cause: {cause}")
        unexplained += not explained
    return 1 if unexplained else 0


def _as_logged(event: dict[str, Any]) -> dict[str, Any]:
    """A recomputed event as the run writer stores it (JSON round trip, no host time)."""
    return json.loads(json.dumps(event))


def _strip(events: list[dict[str, Any]]) -> list[dict[str, Any]]:
    """Transitions without their wall-clock stamps, in stream order.

    A stall found live by a clock tick during the silence is logged before the
    transitions of the next samples; a replay finds it with those samples. Both carry
    the same stream position, so transitions are compared in the order of position,
    then content.
    """
    kept = [{k: v for k, v in e.items() if k not in ("utc", "host_time_s")} for e in events]
    return sorted(kept, key=lambda e: (e.get("index", -1), json.dumps(e, sort_keys=True)))


def _first_difference(a: list[Any], b: list[Any]) -> int:
    for i, (x, y) in enumerate(zip(a, b, strict=False)):
        if x != y:
            return i
    return min(len(a), len(b))


def _cause(problem: str) -> str:
    if "samples.bin" in problem and "SHA-256" in problem:
        return "a sample was altered after the run was closed (tampering or damage)"
    if "truncated" in problem:
        return "the run was truncated after it was closed (copy or storage error)"
    if "run.json" in problem:
        return "the run description, with its copy of the profile, was edited after closing"
    if "not closed" in problem:
        return "the recording ended without closing (crash, power loss, still recording)"
    if "events.jsonl" in problem:
        return "the event log was edited after the run was closed"
    return "the run's files no longer match their closing record"


def _likely(newer: bool, version: str, own_profile: bool, problems: list[str]) -> str:
    if problems:
        return "the recorded data changed (see the differences above)"
    if not own_profile:
        return "a different profile was used for the replay"
    if newer:
        return f"a different software version (run recorded with {version})"
    return "unexplained: same data, profile and software version"


def _compare_figures(stored: dict[str, Any], now: dict[str, Any], found: _Findings) -> None:
    causes = []
    if stored.get("samples_sha256") != now["samples_sha256"]:
        causes.append("the samples differ from those the report was made from")
    if stored.get("profile_sha256") != now["profile_sha256"]:
        causes.append("the profile differs from the one the report was made with")
    version_only = not causes and stored.get("software_version") != now["software_version"]
    if version_only:
        causes.append(
            f"a different software version (report made with {stored.get('software_version')}"
            f", now {now['software_version']})"
        )
    cause = "; ".join(causes) or "unexplained: same samples, profile and software version"
    for key in ("samples", "estimates_sha256", "changes", "uncertainty", "settling", "alarms"):
        if key in ("settling", "alarms"):
            a, b = _strip(stored.get(key, [])), _strip(now[key])
        else:
            a, b = stored.get(key), now[key]
        if a != b:
            found.add(f"report figure '{key}' differs from the recomputed one", cause,
                      explained=version_only)  # fmt: skip
