"""File work beside the estimation: the next block read ahead, the last one written behind.

A replay reads a block, estimates it and writes the estimates, one after the other. The
observer's compiled kernel releases Python's global lock, so the reading and the writing
can run on a second core while it works: `read_ahead` takes the blocks from their source
on a thread, a few ahead of the one being estimated, and `WriteBehind` hands each block of
results to a thread that writes it. The order of blocks and rows is kept, so the files
are the same bytes as without them; an error on either thread is raised in the caller, at
the block where it happened.
"""

from __future__ import annotations

import queue
import threading
from collections.abc import Callable, Iterable, Iterator
from types import TracebackType
from typing import Generic, TypeVar

__all__ = ["WriteBehind", "read_ahead"]

T = TypeVar("T")

_DEPTH = 2  # blocks waiting between the threads (bounded memory)
_POLL_S = 0.1  # how often a waiting thread looks whether the other side has stopped
_END = object()


def _put(q: queue.Queue, item: object, stop: threading.Event) -> bool:
    """Put ``item`` unless ``stop`` is set first; True when it was put."""
    while not stop.is_set():
        try:
            q.put(item, timeout=_POLL_S)
            return True
        except queue.Full:
            continue
    return False


def read_ahead(items: Iterable[T], depth: int = _DEPTH) -> Iterator[T]:
    """The items of ``items``, taken from it on a thread up to ``depth`` ahead.

    An exception raised by ``items`` is raised here when its place is reached. If the
    caller stops early, the thread stops at its next item.
    """
    q: queue.Queue = queue.Queue(maxsize=depth)
    stop = threading.Event()

    def produce() -> None:
        try:
            for item in items:
                if not _put(q, (item, None), stop):
                    return
            _put(q, (_END, None), stop)
        except BaseException as exc:  # handed to the caller's thread
            _put(q, (_END, exc), stop)

    thread = threading.Thread(target=produce, name="forcelens-read-ahead", daemon=True)
    thread.start()
    try:
        while True:
            item, error = q.get()
            if item is _END:
                if error is not None:
                    raise error
                return
            yield item
    finally:
        stop.set()
        thread.join()


class WriteBehind(Generic[T]):
    """Calls ``write(item)`` for each item given to `put`, in order, on a thread.

    Use it as a context manager. On leaving without an error it waits until everything
    is written and raises the first error ``write`` raised, if any (`put` raises it too,
    at the next block); on leaving with an error, what is still waiting is dropped.
    """

    def __init__(self, write: Callable[[T], None], depth: int = _DEPTH) -> None:
        self._write = write
        self._q: queue.Queue = queue.Queue(maxsize=depth)
        self._stop = threading.Event()
        self._error: BaseException | None = None
        self._thread = threading.Thread(target=self._run, name="forcelens-write", daemon=True)
        self._thread.start()

    def _run(self) -> None:
        while True:
            try:
                item = self._q.get(timeout=_POLL_S)
            except queue.Empty:
                if self._stop.is_set():
                    return
                continue
            if item is _END or self._stop.is_set():
                return
            if self._error is None:
                try:
                    self._write(item)
                except BaseException as exc:  # raised in the caller's thread
                    self._error = exc

    def put(self, item: T) -> None:
        """Hand ``item`` over to be written (waits while ``depth`` items are waiting)."""
        if self._error is not None:
            raise self._error
        if not _put(self._q, item, self._stop):
            raise RuntimeError("write-behind: put after the writer stopped")

    def __enter__(self) -> WriteBehind[T]:
        return self

    def __exit__(
        self,
        kind: type[BaseException] | None,
        value: BaseException | None,
        traceback: TracebackType | None,
    ) -> None:
        if kind is None:
            _put(self._q, _END, self._stop)
            self._thread.join()
            if self._error is not None:
                raise self._error
        else:
            self._stop.set()
            self._thread.join()
