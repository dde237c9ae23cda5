"""Checking a run and reporting instead of raising: `verify_run`."""

from __future__ import annotations

import os
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from daq.errors import RunFormatError
from daq.runs.layout import CLOSING_FILE, EVENTS_FILE, LOG_FILE
from daq.runs.loss import lost_data_problems
from daq.runs.reader import (
    _closing_problems,
    _load_stream,
    _read_events,
    _stream_path,
    read_run_info,
)
from daq.samples import FLAG_GAP_BEFORE, FLAG_RECONNECT_BEFORE

_BLOCK = 65_536  # sample records read at a time


@dataclass(frozen=True)
class VerifyReport:
    """Result of :func:`verify_run`.

    ``ok`` is True when the run is closed, every file matches ``closing.json`` (counts and
    SHA-256) and the sample sequence numbers are consistent. ``records`` gives whole records
    per stream. ``problems`` make ``ok`` False; ``notes`` are facts worth knowing (flagged
    gaps, reconnections, an aborted or failed status) that do not.
    """

    ok: bool
    closed: bool
    status: str | None
    records: dict[str, int]
    problems: list[str]
    notes: list[str]
    folder: str = ""

    def text(self) -> str:
        """Plain-text report, one fact per line, for the command line."""
        lines = [f"run folder: {self.folder}", f"verdict: {'OK' if self.ok else 'NOT OK'}"]
        lines.append(f"closed: yes, status {self.status}" if self.closed else "closed: no")
        for name, count in self.records.items():
            lines.append(f"records in {name}: {count}")
        lines += [f"problem: {p}" for p in self.problems]
        lines += [f"note: {n}" for n in self.notes]
        return "\n".join(lines)


def _sequence_findings(path: Path, dtype: np.dtype, n: int) -> tuple[list[str], list[str]]:
    """Problems and notes about the sample sequence numbers and flags of the first ``n``
    records of ``path``, read a block at a time."""
    problems: list[str] = []
    notes: list[str] = []
    unflagged = gaps = lost = restarts = reconnects = 0
    first: tuple[int, int, int] | None = None  # record, seq before, seq
    prev_seq: np.ndarray = np.zeros(0, np.int64)
    with open(path, "rb") as handle:
        for start in range(0, n, _BLOCK):
            block = np.fromfile(handle, dtype=dtype, count=min(_BLOCK, n - start))
            flags = block["flags"]
            reconnects += int(np.count_nonzero(flags & FLAG_RECONNECT_BEFORE))
            seq = np.concatenate([prev_seq, block["seq"]])
            step = np.diff(seq)
            flagged = (flags[block.size - step.size :] & FLAG_GAP_BEFORE) != 0
            odd = step != 1
            bad = np.flatnonzero(odd & ~flagged)
            if bad.size and first is None:
                i = int(bad[0]) + 1
                first = (start - prev_seq.size + i, int(seq[i - 1]), int(seq[i]))
            unflagged += int(bad.size)
            gap = odd & flagged & (step > 1)
            gaps += int(np.count_nonzero(gap))
            lost += int(np.sum(step[gap] - 1))
            restarts += int(np.count_nonzero(odd & flagged & (step <= 0)))
            prev_seq = seq[-1:]
    if first is not None:
        i, before, after = first
        problems.append(
            f"samples: {unflagged} unflagged break(s) in seq, first at record {i} "
            f"(seq {before} -> {after}) without FLAG_GAP_BEFORE"
        )
    if gaps:
        notes.append(f"samples: {gaps} flagged gap(s), {lost} sample(s) lost in them")
    if restarts:
        notes.append(f"samples: seq restarted {restarts} time(s) (flagged)")
    if reconnects:
        notes.append(f"samples: {reconnects} reconnection(s) flagged")
    return problems, notes


def verify_run(folder: str | os.PathLike[str]) -> VerifyReport:
    """Check a run folder and report; never raises RunFormatError.

    Checks: the description and closing are valid; the run was closed; record counts and
    SHA-256 of every file match ``closing.json``; no torn record or event line; sample
    ``seq`` increases by 1 except where ``FLAG_GAP_BEFORE`` marks a gap (counted in notes).
    The session's log (``session.log``) is outside the seal: its presence is a note, and
    it is never opened.
    """
    where = str(folder)
    try:
        info = read_run_info(folder)
    except RunFormatError as exc:
        return VerifyReport(False, False, None, {}, [str(exc)], [], where)
    problems: list[str] = []
    notes: list[str] = []
    event_lines: int | None = None
    try:
        # the events themselves only for the loss check of an unclosed run
        log = _read_events(info.folder / EVENTS_FILE, None if info.closing is None else ())
        events, torn_line, torn_line_bytes = log.kept, log.torn, log.torn_bytes
        event_lines = log.lines
        if torn_line:
            problems.append(
                f"{info.folder / EVENTS_FILE}: torn last line ({torn_line_bytes} bytes)"
            )
        kinds = log.kinds
        if kinds:
            notes.append("events: " + ", ".join(f"{k} {n}" for k, n in sorted(kinds.items())))
    except RunFormatError as exc:
        problems.append(str(exc))
    if info.closing is None:
        problems.append(f"{info.folder}: not closed (no {CLOSING_FILE}); the recording stopped")
    else:
        problems += _closing_problems(info, event_lines, check_hash=True)
        if info.status != "complete":
            notes.append(f"closed with status {info.status!r}")
    for name, extra in info.torn_bytes.items():
        if extra:
            problems.append(f"{_stream_path(info, name)}: {extra} bytes of a torn last record")
    if info.closing is None and event_lines is not None:
        streams = {name: _load_stream(info, name, use_memmap=True) for name in info.dtypes}
        problems += lost_data_problems(str(info.folder), info.flush_interval_s, streams, events)
    seq_problems, seq_notes = _sequence_findings(
        _stream_path(info, "samples"), info.dtypes["samples"], info.records["samples"]
    )
    problems += seq_problems
    notes += seq_notes
    if os.path.lexists(info.folder / LOG_FILE):  # not opened: it may be anything
        notes.append(f"{LOG_FILE}: the session's log, outside the seal (not checked)")
    return VerifyReport(
        ok=not problems,
        closed=info.closed,
        status=info.status,
        records=dict(info.records),
        problems=problems,
        notes=notes,
        folder=where,
    )


# --------------------------------------------------------------------------- CSV export
