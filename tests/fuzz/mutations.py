"""Hypothesis strategies that damage valid inputs the way careless hands and hostile
files do: flipped and dropped bytes, cut files, extreme numbers in place of good ones,
lines repeated or lost, fields removed."""

from __future__ import annotations

import re

from hypothesis import strategies as st

#: values a careless or hostile edit puts where a number was
EXTREME_NUMBERS = (
    "0", "-0", "-1", "1e-320", "1e308", "1.7e308", "1e999", "-1e999", "nan", "inf",
    "-inf", "", " ", "abc", "0x10", "1_000", "9" * 400, "1e-5", "-273.15", "true", "[]",
    "{}", '"x"',
)  # fmt: skip

_NUMBER = re.compile(rb"-?\d+(\.\d*)?([eE][-+]?\d+)?")


@st.composite
def mutated_bytes(draw: st.DrawFn, data: bytes) -> bytes:
    """``data`` after one to three damaging edits."""
    for _ in range(draw(st.integers(1, 3))):
        kind = draw(
            st.sampled_from(["flip", "cut", "number", "dup_line", "drop_line", "insert", "empty"])
        )
        if not data:
            data = draw(st.binary(max_size=64))
            continue
        at = draw(st.integers(0, len(data) - 1))
        if kind == "flip":
            data = data[:at] + bytes([data[at] ^ draw(st.integers(1, 255))]) + data[at + 1 :]
        elif kind == "cut":
            data = data[:at]
        elif kind == "number":
            numbers = list(_NUMBER.finditer(data))
            if numbers:
                m = draw(st.sampled_from(numbers))
                new = draw(st.sampled_from(EXTREME_NUMBERS)).encode()
                data = data[: m.start()] + new + data[m.end() :]
        elif kind in ("dup_line", "drop_line"):
            lines = data.split(b"\n")
            i = draw(st.integers(0, len(lines) - 1))
            lines[i : i + 1] = [lines[i], lines[i]] if kind == "dup_line" else []
            data = b"\n".join(lines)
        elif kind == "insert":
            data = data[:at] + draw(st.binary(min_size=1, max_size=16)) + data[at:]
        else:
            data = b""
    return data
