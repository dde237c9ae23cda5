"""Auditing one run: recompute every stored figure and name each difference with its cause.

`audit_run` checks, in order: the files against the closing record (a changed sample, a
truncated file, an edited description); the replayed estimates against the ones
computed live; the settling and alarm transitions against those logged live; and, when
a report was made (``figures.json``), every figure of it. It returns an `AuditResult`
(plain values, so an archive job can send it from a worker process); ``forcelens audit``
prints it for one run and ``forcelens audit --all`` tabulates it for many.

Each `Finding` carries a long cause for people reading one audit and a short label
("altered sample", "other software version") for a table over an archive; a finding
that only follows from an earlier one (the estimates differ because a sample was
altered) has no label of its own.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Any

__all__ = ["AuditResult", "Finding", "audit_run"]


@dataclass(frozen=True)
class Finding:
    """One difference between what was stored and what the replay recomputes.

    Attributes:
        what: the difference, in one sentence.
        cause: its likely cause, in one sentence.
        label: a short cause for a summary table, or None when the finding follows from
            an earlier one.
        explained: True when a newer software version alone explains it.
    """

    what: str
    cause: str
    label: str | None
    explained: bool = False


@dataclass(frozen=True)
class AuditResult:
    """The audit of one run.

    Attributes:
        folder: the run folder as given.
        run_id: the run id (None when the run could not be replayed).
        findings: the differences, in the order they were found.
        notes: facts to print before the verdict (not closed, compared with a report).
        identical_text: the line printed when there is no difference.
    """

    folder: str
    run_id: str | None
    findings: tuple[Finding, ...]
    notes: tuple[str, ...]
    identical_text: str

    @property
    def differs(self) -> bool:
        """True when a difference is not explained by the software version alone."""
        return any(not f.explained for f in self.findings)

    def verdict(self) -> str:
        """The table's verdict: identical, "differs: LABEL; LABEL", or "identical except:
        LABEL" when a newer software version explains every difference."""
        if not self.findings:
            return "identical"
        labels = [f.label for f in self.findings if f.label and not f.explained]
        if self.differs:
            return "differs: " + "; ".join(dict.fromkeys(labels or ["see details"]))
        explained = [f.label for f in self.findings if f.label]
        return "identical except: " + "; ".join(dict.fromkeys(explained or ["see details"]))

    def text(self) -> str:
        """What ``forcelens audit RUN`` prints: the notes, then "identical" or each
        difference with its likely cause."""
        lines = list(self.notes)
        if not self.findings:
            lines.append(self.identical_text)
        for f in self.findings:
            lines.append(f"DIFFERENCE: {f.what}\n  likely cause: {f.cause}")
        return "\n".join(lines)


class _Findings:
    def __init__(self) -> None:
        self.items: list[Finding] = []

    def add(self, what: str, cause: str, label: str | None, *, explained: bool = False) -> None:
        self.items.append(Finding(what, cause, label, explained))


def audit_run(
    folder: str | Path, *, profile: Any = None, profile_name: str = "", report: str | None = None
) -> AuditResult:
    """Audit the run in ``folder``.

    Args:
        folder: the run folder.
        profile: a ``CellProfile`` to replay with instead of the run's own (a finding).
        profile_name: how to name that profile in the finding (its file).
        report: the report folder holding ``figures.json``; None looks beside the run
            (``RUN-report``) and skips the comparison when there is none.

    Raises:
        ValueError: the run cannot be replayed and nothing else is wrong with it (the
            message names the problem), or ``report`` names a folder without
            ``figures.json``.
    """
    import numpy as np

    from daq.runs import verify_run
    from ui.commands.report import default_report_folder
    from ui.figures import compute_figures, replay_run
    from ui.figures_file import read_figures
    from ui.transitions import comparable, first_difference, logged_transitions
    from ui.version import library_changes, platform_changes, software_version

    folder = Path(folder)
    found = _Findings()
    notes: list[str] = []
    verified = verify_run(folder)
    for problem in verified.problems:
        found.add(problem, *_cause(problem))
    if not verified.closed:
        notes.append("note: the run was not closed; only what was flushed can be checked")
    try:
        replayed = replay_run(folder, profile=profile, check_hash=False, compare_live=True)
    except ValueError as exc:
        if not found.items:
            raise
        found.add(f"the run cannot be replayed: {exc}", "see the differences above", None)
        return AuditResult(str(folder), None, tuple(found.items), tuple(notes), "")
    try:  # the rest needs no more than the figures, the comparison and the transitions
        figures = compute_figures(replayed)
        again = comparable(replayed.events)
    finally:
        replayed.close()
    version = replayed.data.description["software_version"]
    newer = version != software_version()
    if profile is not None and not replayed.own_profile:
        found.add(
            f"replayed with {profile_name or 'another profile'} instead of the profile "
            "recorded with the run",
            "profile swapped on purpose (--profile)",
            "other profile",
        )
    # a run that only crashed (not closed, maybe a torn last record, nothing lost beyond a
    # flush) has intact data up to its last flush: differences there are not explained by
    # the crash, and nothing after it can be checked
    crashed = bool(verified.problems) and all(_crash_symptom(p) for p in verified.problems)
    problems = [] if crashed else verified.problems
    n_samples = int(replayed.data.samples.size)
    likely = _likely(newer, version, replayed.own_profile, problems)
    libraries = library_changes(replayed.data.description.get("libraries"))
    machine = platform_changes(replayed.data.description.get("platform"))
    if (libraries or machine) and not problems and replayed.own_profile:
        parts = []
        if libraries:
            parts.append(
                "other library versions (a bit-identical replay depends on them): "
                + ", ".join(libraries)
            )
        if machine:
            parts.append(
                "another interpreter or processor (floating-point results may differ): "
                + ", ".join(machine)
            )
        said = "; ".join(parts)
        label = "other library" if libraries else "other platform"
        likely = (f"{likely[0]}; also {said}", likely[1]) if newer else (said, label)
    explained = newer and replayed.own_profile and not problems
    live = replayed.live
    n = live.compared if live is not None else 0
    if live is not None:
        if crashed and live.identical:
            notes.append(
                f"note: data intact up to the last flush: {n} samples replay bit for bit "
                f"({live.live_rows} live estimates on disk)"
            )
        elif not live.identical or live.live_rows != replayed.rows:
            first = live.first_difference if live.first_difference is not None else n
            found.add(
                f"replayed estimates differ from those computed live: {live.differing} of "
                f"{n} samples, first at sample {first}"
                + (
                    f"; {live.live_rows} live against {replayed.rows} replayed"
                    if live.live_rows != replayed.rows
                    else ""
                ),
                *likely,
                explained=explained,
            )
    logged = comparable(logged_transitions(folder, ("settling", "alarm")))
    if crashed:  # what was logged after the last flushed sample cannot be recomputed
        after = logged[logged["index"] >= n_samples]
        logged = logged[logged["index"] < n_samples]
        again = again[again["index"] < n_samples]
        if after.size:
            notes.append(
                f"note: {len(after)} transition(s) logged after the last flushed sample "
                "cannot be checked"
            )
    if not np.array_equal(logged, again):
        found.add(
            f"settling and alarm transitions differ from those logged live "
            f"({len(logged)} logged, {len(again)} recomputed; first difference at "
            f"transition {first_difference(logged, again)})",
            *likely,
            explained=explained,
        )
    report_folder = Path(report) if report else default_report_folder(folder)
    stored_path = report_folder / "figures.json"
    if stored_path.exists():
        stored = read_figures(stored_path)
        _compare_figures(stored, figures, found, data_changed=bool(problems))
        notes.append(f"compared with the report in {report_folder}")
    elif report:
        raise ValueError(f"{stored_path}: no such file; make the report with forcelens report")
    what = ", report figures" if stored_path.exists() else ""
    return AuditResult(
        str(folder),
        str(figures["run_id"]),
        tuple(found.items),
        tuple(notes),
        f"identical: run {figures['run_id']} reproduces exactly ({figures['samples']} "
        f"samples, estimates, settling states, alarms{what})",
    )


def _crash_symptom(problem: str) -> bool:
    """A `verify_run` problem a crash alone leaves: not closed, a torn last record."""
    return ("not closed" in problem or "torn" in problem) and "data lost" not in problem


def _cause(problem: str) -> tuple[str, str]:
    """(likely cause, short label) of a problem `verify_run` found."""
    if "samples.bin" in problem and "SHA-256" in problem:
        return (
            "a sample was altered after the run was closed (tampering or damage)",
            "altered sample",
        )
    if "truncated" in problem:
        return "the run was truncated after it was closed (copy or storage error)", "truncated"
    if "run.json" in problem:
        return (
            "the run description, with its copy of the profile, was edited after closing",
            "edited description",
        )
    if "not closed" in problem:
        return (
            "the recording ended without closing (crash, power loss, still recording)",
            "not closed",
        )
    if "events.jsonl" in problem:
        return "the event log was edited after the run was closed", "edited event log"
    return "the run's files no longer match their closing record", "files changed"


def _likely(
    newer: bool, version: str, own_profile: bool, problems: list[str]
) -> tuple[str, str | None]:
    """(likely cause, short label) of replayed numbers that differ from the stored ones."""
    if problems:
        return "the recorded data changed (see the differences above)", None
    if not own_profile:
        return "a different profile was used for the replay", None
    if newer:
        return f"a different software version (run recorded with {version})", (
            "other software version"
        )
    return "unexplained: same data, profile and software version", "unexplained"


def _compare_figures(
    stored: dict[str, Any], now: dict[str, Any], found: _Findings, *, data_changed: bool
) -> None:
    import numpy as np

    from ui.transitions import comparable

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
    if data_changed:
        label = None  # follows from the altered files found first
    elif version_only:
        label = "other software version"
    elif causes:
        label = "report differs from its run"
    else:
        label = "unexplained"
    for key in ("samples", "estimates_sha256", "changes", "uncertainty", "settling", "alarms"):
        if key in ("settling", "alarms"):
            same = np.array_equal(comparable(stored.get(key, [])), comparable(now[key]))
        else:
            same = stored.get(key) == now[key]
        if not same:
            found.add(
                f"report figure '{key}' differs from the recomputed one",
                cause,
                label,
                explained=version_only,
            )
