"""``figures.json`` written and read a part at a time (issue 12, big records).

The text is that of ``json.dumps(figures, indent=2, ensure_ascii=False, allow_nan=False)``
plus a newline, but the transitions (``ui.transitions.Transitions``) are written one event
at a time, so tens of thousands of them never become Python objects all at once; reading
goes a chunk of text and a value at a time, the transitions into `Transitions`.
"""

from __future__ import annotations

import json
from collections.abc import Iterator, Mapping
from pathlib import Path
from typing import Any, TextIO

from ui.transitions import Transitions

__all__ = ["TRANSITION_KEYS", "figures_chunks", "read_figures", "write_figures"]


def _dumps(value: Any) -> str:
    return json.dumps(value, indent=2, ensure_ascii=False, allow_nan=False)


def _indented(text: str, spaces: int) -> str:
    return text.replace("\n", "\n" + " " * spaces)


def figures_chunks(figures: Mapping[str, Any]) -> Iterator[str]:
    """The JSON text of ``figures`` in pieces."""
    yield "{"
    for n, (key, value) in enumerate(figures.items()):
        yield ("," if n else "") + f"\n  {_dumps(key)}: "
        if isinstance(value, Transitions):
            if not len(value):
                yield "[]"
                continue
            for i, event in enumerate(value):
                yield ("[" if i == 0 else ",") + "\n    " + _indented(_dumps(event), 4)
            yield "\n  ]"
        else:
            yield _indented(_dumps(value), 2)
    yield "\n}" if figures else "}"


def write_figures(path: Path, figures: Mapping[str, Any]) -> None:
    """Write ``figures`` to ``path`` atomically (a temporary file, then renamed)."""
    from ui.outputs import replacing

    with replacing(path) as tmp, open(tmp, "w", encoding="utf-8") as out:
        for chunk in figures_chunks(figures):
            out.write(chunk)
        out.write("\n")


#: The figures that are lists of transitions, read one event at a time.
TRANSITION_KEYS = ("settling", "alarms")
_DECODER = json.JSONDecoder()
_CHUNK = 1 << 16  # characters read at least at a time


class _Scanner:
    """JSON text read from a file a chunk at a time, a value at a time."""

    def __init__(self, handle: TextIO, path: Path) -> None:
        self.handle, self.path = handle, path
        self.text, self.at, self.eof = "", 0, False

    def _more(self) -> bool:
        chunk = self.handle.read(max(_CHUNK, len(self.text) - self.at))
        self.text, self.at = self.text[self.at :] + chunk, 0
        self.eof = not chunk
        return bool(chunk)

    def peek(self) -> str:
        """The next character that is not white space ("" at the end)."""
        while True:
            while self.at < len(self.text) and self.text[self.at] in " \t\r\n":
                self.at += 1
            if self.at < len(self.text) or not self._more():
                return self.text[self.at : self.at + 1]

    def take(self, char: str) -> None:
        if self.peek() != char:
            got = self.peek() or "the end"
            raise ValueError(f"{self.path}: expected {char!r}, found {got!r}; not figures JSON")
        self.at += 1

    def value(self) -> Any:
        self.peek()
        while True:
            try:
                value, end = _DECODER.raw_decode(self.text, self.at)
                if end < len(self.text) or self.eof:  # a number may go on in the next chunk
                    self.at = end
                    return value
            except json.JSONDecodeError:
                if self.eof:
                    raise
            self._more()

    def transitions(self) -> Transitions:
        """A JSON array of objects, each kept as a transition."""
        kept = Transitions()
        self.take("[")
        if self.peek() == "]":
            self.at += 1
            return kept
        while True:
            event = self.value()
            if not isinstance(event, dict):
                raise ValueError(f"{self.path}: a transition that is not a JSON object")
            kept.append(event)
            if self.peek() != ",":
                self.take("]")
                return kept
            self.at += 1


def read_figures(path: Path) -> dict[str, Any]:
    """The figures in ``path``, the lists of transitions (`TRANSITION_KEYS`) as
    `Transitions`, read a chunk of text at a time.

    Raises ValueError (``json.JSONDecodeError`` among them) when the file is not a JSON
    object.
    """
    figures: dict[str, Any] = {}
    with open(path, encoding="utf-8") as handle:
        scan = _Scanner(handle, path)
        if scan.peek() != "{":
            raise ValueError(f"{path}: not a JSON object; make the report again")
        scan.take("{")
        while scan.peek() != "}":
            if figures:
                scan.take(",")
            key = scan.value()
            if not isinstance(key, str):
                raise ValueError(f"{path}: a key that is not a string; not figures JSON")
            scan.take(":")
            wanted = key in TRANSITION_KEYS and scan.peek() == "["
            figures[key] = scan.transitions() if wanted else scan.value()
        scan.take("}")
        if scan.peek():
            raise ValueError(f"{path}: text after the figures; not figures JSON")
    return figures
