"""Reading ahead and writing behind on threads (`ui.overlap`): order, errors, early stops."""

from __future__ import annotations

import threading
from collections.abc import Iterator

import pytest

from ui.overlap import WriteBehind, read_ahead


def test_read_ahead_keeps_the_order_and_reads_on_another_thread() -> None:
    seen: list[str] = []

    def source() -> Iterator[int]:
        for i in range(50):
            seen.append(threading.current_thread().name)
            yield i

    assert list(read_ahead(source())) == list(range(50))
    assert set(seen) == {"forcelens-read-ahead"}


def test_read_ahead_raises_a_source_error_where_it_happened() -> None:
    def source() -> Iterator[int]:
        yield 1
        yield 2
        raise ValueError("row 3: not a number")

    got = []
    with pytest.raises(ValueError, match="row 3"):
        for item in read_ahead(source()):
            got.append(item)
    assert got == [1, 2]  # everything before the bad block arrives


def test_read_ahead_stops_reading_when_the_caller_stops() -> None:
    taken = []

    def source() -> Iterator[int]:
        for i in range(10_000):
            taken.append(i)
            yield i

    for item in read_ahead(source(), depth=2):
        if item == 3:
            break
    assert len(taken) <= 3 + 2 + 2  # the items used, the queue, the one in hand


def test_write_behind_writes_everything_in_order_before_it_returns() -> None:
    written: list[int] = []
    with WriteBehind(written.append) as out:
        for i in range(100):
            out.put(i)
    assert written == list(range(100))


def test_write_behind_raises_the_writers_error() -> None:
    def write(item: int) -> None:
        if item == 5:
            raise OSError("disk full")

    with pytest.raises(OSError, match="disk full"), WriteBehind(write) as out:
        for i in range(1000):
            out.put(i)


def test_write_behind_drops_what_waits_when_the_caller_fails() -> None:
    written: list[int] = []
    gate = threading.Event()

    def write(item: int) -> None:
        gate.wait(5.0)
        written.append(item)

    with pytest.raises(KeyError), WriteBehind(write, depth=4) as out:
        for i in range(4):
            out.put(i)
        gate.set()
        raise KeyError("stop")
    # at most the one in hand and the next, taken before the stop was seen; in order
    assert written == list(range(len(written))) and len(written) <= 2
