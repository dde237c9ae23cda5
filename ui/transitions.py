"""Settling and alarm transitions kept as compact JSON text (issue 12, big records).

A long run logs tens of thousands of transitions (the invented 10-million-sample run of
``tests/benchmarks/bench_big_records.py``: 73 534); as Python dicts they take a few
hundred megabytes. `Transitions` keeps them as lines of JSON in a temporary file and parses
an event again only when it is read. `comparable` reduces transitions to
what an audit compares: stream position and a digest of the content without wall-clock
stamps, in a canonical order, 16 bytes an event.
"""

from __future__ import annotations

import hashlib
import itertools
import json
import os
import tempfile
from array import array
from collections.abc import Callable, Iterable, Iterator, Mapping
from pathlib import Path
from typing import Any

import numpy as np

__all__ = [
    "COMPARABLE_DTYPE",
    "Transitions",
    "comparable",
    "first_difference",
    "logged_transitions",
]

_WALL_CLOCK = ("utc", "host_time_s")


def _plain(value: Any) -> Any:
    if hasattr(value, "item"):  # a NumPy scalar
        return value.item()
    raise TypeError(f"{type(value).__name__} is not JSON serialisable")


def _text(event: Mapping[str, Any]) -> str:
    return json.dumps(event, ensure_ascii=False, separators=(",", ":"), default=_plain)


class Transitions:
    """Events (JSON objects) in order, each a line of compact JSON in an anonymous
    temporary file (removed when the object is closed or collected): memory does not
    grow with their number. Read them by iterating (each parsed again) or by slice."""

    def __init__(self, events: Iterable[Mapping[str, Any]] = ()) -> None:
        self._file = tempfile.TemporaryFile()  # noqa: SIM115 (lives as long as the object)
        self._count = 0
        for event in events:
            self.append(event)

    def append(self, event: Mapping[str, Any]) -> None:
        self.append_text(_text(event))

    def append_text(self, text: str) -> None:
        """Add an event given as the compact JSON text of one object (not checked)."""
        self._file.seek(0, os.SEEK_END)
        self._file.write(text.encode("utf-8") + b"\n")
        self._count += 1

    def _texts(self) -> Iterator[bytes]:
        position, end = 0, self._file.seek(0, os.SEEK_END)
        while position < end:
            self._file.seek(position)
            line = self._file.readline()
            position += len(line)
            yield line

    def of_kind(self, kind: str, clean: Callable[[dict[str, Any]], dict[str, Any]]) -> Transitions:
        """The events of ``kind``, each as ``clean`` makes it."""
        kept = Transitions()
        for line in self._texts():
            event = json.loads(line)
            if event["kind"] == kind:
                cleaned = clean(event)
                kept.append_text(line[:-1].decode("utf-8") if cleaned == event else _text(cleaned))
        return kept

    def __len__(self) -> int:
        return self._count

    def __iter__(self) -> Iterator[dict[str, Any]]:
        return (json.loads(line) for line in self._texts())

    def __getitem__(self, part: slice) -> list[dict[str, Any]]:
        """The events of a slice (with a step of one), parsed."""
        start, stop, step = part.indices(self._count)
        if step != 1:
            raise ValueError(f"slice step {step}: only whole stretches of events are read")
        return list(itertools.islice(iter(self), start, stop))

    def close(self) -> None:
        """Remove the file (the object is empty afterwards)."""
        self._file.close()


def logged_transitions(folder: str | Path, kinds: Iterable[str]) -> Iterator[dict[str, Any]]:
    """The events of ``kinds`` in a run's ``events.jsonl``, one at a time (the file was
    checked by ``daq.runs.read_run``; a torn last line is left out, as there)."""
    from daq.runs.layout import EVENTS_FILE

    wanted = set(kinds)
    with open(Path(folder) / EVENTS_FILE, "rb") as handle:
        for line in handle:
            if not line.endswith(b"\n"):
                break
            event = json.loads(line)
            if event["kind"] in wanted:
                yield event


#: What `comparable` gives per event: stream position, then a 64-bit digest of the content.
COMPARABLE_DTYPE = np.dtype([("index", np.int64), ("digest", np.uint64)])


def comparable(events: Iterable[Mapping[str, Any]]) -> np.ndarray:
    """``(stream position, 64 bits of the SHA-256 of the content without wall-clock
    stamps)`` per event (`COMPARABLE_DTYPE`), sorted: equal arrays mean the same
    transitions at the same samples (16 bytes an event, however many there are).

    A stall found live by a clock tick during the silence is logged before the
    transitions of the next samples; a replay finds it with those samples. Both carry the
    same stream position, so transitions are compared in the order of position, then
    content.
    """
    index, digest = array("q"), array("Q")
    for event in events:
        content = {k: v for k, v in event.items() if k not in _WALL_CLOCK}
        canonical = json.dumps(content, sort_keys=True, ensure_ascii=False)
        at = event.get("index", -1)
        index.append(at if isinstance(at, int) and not isinstance(at, bool) else -1)
        sha = hashlib.sha256(canonical.encode("utf-8")).digest()
        digest.append(int.from_bytes(sha[:8], "little"))
    out = np.empty(len(index), COMPARABLE_DTYPE)
    out["index"], out["digest"] = index, digest
    return np.sort(out, order=("index", "digest"))


def first_difference(a: np.ndarray, b: np.ndarray) -> int:
    """The first position where two `comparable` arrays differ (the shorter length when
    one begins the other)."""
    n = min(a.size, b.size)
    differ = np.flatnonzero(a[:n] != b[:n])
    return int(differ[0]) if differ.size else n
