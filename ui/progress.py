"""Progress of long jobs on stderr, drawn only when stderr is a terminal (tqdm).

A log file or a pipe gets nothing: no ``\\r`` lines in logs, no bars in ``2>&1 | tee``.

* `bar(total, what)`: a bar over a known amount of work (samples replayed, rows written).
* `busy(what)`: elapsed time while one long call runs that reports nothing (the
  smoother, a likelihood fit, an identification), redrawn by a small thread.
* `progress_wanted()` / `wanted(...)`: shared code (``ui.figures.replay_run``) draws a bar
  only inside `wanted`, which the one-run commands (``report``, ``audit RUN``) open; the
  same code run for an archive job in worker processes stays silent.

tqdm is imported only when a bar is drawn, so ``forcelens --help`` never loads it.
"""

from __future__ import annotations

import contextlib
import sys
import threading
from collections.abc import Callable, Iterator
from contextvars import ContextVar
from typing import Any

__all__ = ["bar", "busy", "progress_wanted", "wanted"]

_WANTED: ContextVar[bool] = ContextVar("forcelens_progress_wanted", default=False)
_REDRAW_S = 0.25


def _on_terminal() -> bool:
    try:
        return sys.stderr.isatty()
    except (AttributeError, ValueError):  # replaced or closed stderr
        return False


class _Silent:
    """Stands in for a bar when nothing is drawn."""

    def update(self, n: int = 1) -> None:
        del n

    def close(self) -> None:
        pass

    def __enter__(self) -> _Silent:
        return self

    def __exit__(self, *exc: object) -> None:
        pass


def bar(total: int, what: str, *, unit: str = "samples", enabled: bool | None = None) -> Any:
    """A progress bar of ``total`` units on stderr (``update(n)``, ``close()``, or use it
    as a context manager); silent unless stderr is a terminal (or ``enabled`` says)."""
    if not (_on_terminal() if enabled is None else enabled):
        return _Silent()
    from tqdm import tqdm

    return tqdm(
        total=total,
        desc=what,
        unit=f" {unit}",
        unit_scale=True,
        file=sys.stderr,
        leave=False,
        mininterval=_REDRAW_S,
        dynamic_ncols=True,
    )


@contextlib.contextmanager
def busy(what: str, *, enabled: bool | None = None) -> Iterator[Callable[[str], None]]:
    """Elapsed time of a long call on stderr while the block runs (terminal only). The
    block gets a function that says what the call is doing now (shown after ``what``)."""
    if not (_on_terminal() if enabled is None else enabled):
        yield lambda _: None
        return
    from tqdm import tqdm

    shown = tqdm(
        total=None, desc=what, bar_format="{desc}: {elapsed}", file=sys.stderr, leave=False
    )
    stop = threading.Event()

    def redraw() -> None:
        while not stop.wait(_REDRAW_S):
            shown.refresh()

    def say(text: str) -> None:
        shown.set_description_str(f"{what}: {text}", refresh=False)

    thread = threading.Thread(target=redraw, name="forcelens-busy", daemon=True)
    thread.start()
    try:
        yield say
    finally:
        stop.set()
        thread.join()
        shown.close()


def progress_wanted() -> bool:
    """True inside `wanted`: shared code may draw its bars (on a terminal)."""
    return _WANTED.get()


@contextlib.contextmanager
def wanted() -> Iterator[None]:
    """Let shared code called in this block draw progress bars (on a terminal)."""
    token = _WANTED.set(True)
    try:
        yield
    finally:
        _WANTED.reset(token)
