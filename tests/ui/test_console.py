"""Typed commands of a headless live run: mark, zero with confirmation, stop."""

from __future__ import annotations

import io
import time

import numpy as np

from daq.samples import empty_block
from estimator.profile import default_demo_profile
from ui.console import HELP, ZERO_QUESTION, Console, start_line_reader
from ui.pipeline import EstimationPipeline, Tare


class _Session:
    """The two calls Console makes on a LiveSession, over a real pipeline."""

    def __init__(self) -> None:
        self.pipeline = EstimationPipeline(default_demo_profile())
        self.marks: list[tuple[str, int | None]] = []

    def mark(self, message: str) -> int | None:
        self.marks.append((message, self.pipeline.last_seq))
        return self.pipeline.last_seq

    def tare(self) -> Tare:
        return self.pipeline.tare()


def _feed(session: _Session, n: int, x_m: float) -> None:
    block = empty_block(n)
    block["seq"] = np.arange(n)
    block["device_time_s"] = np.arange(n) / 2000.0
    block["displacement_m"] = x_m
    session.pipeline.process(block)


def test_zero_needs_a_confirmation_and_is_refused_without_data() -> None:
    session = _Session()
    console = Console(session)
    assert console.handle("z\n") == ZERO_QUESTION
    assert console.handle("y\n").startswith("zero refused: cannot zero yet")
    _feed(session, 400, 3.0e-6)
    assert console.handle("z") == ZERO_QUESTION
    assert console.handle("no") == "zero cancelled"
    assert console.handle("z") == ZERO_QUESTION
    reply = console.handle("y")
    # in the demo cell's unit (µm, its travel is 0.5 mm) with the digits one sample's U
    # supports, placed on the device clock: the last of 400 samples at 2 kHz is at 0.1995 s
    assert reply == (
        "zero set: offset 3.00 µm (mean of 200 samples), applies from the next sample "
        "after t = 0.1995 s (seq 400)"
    )


def test_mark_stop_help_and_unknown() -> None:
    session = _Session()
    console = Console(session)
    assert console.handle("m before load") == "marked (no sample yet)"
    _feed(session, 10, 0.0)
    assert console.handle("m after ten") == "marked at seq 9"
    assert session.marks == [("before load", None), ("after ten", 9)]
    assert console.handle("?") == HELP
    assert console.handle("   ") == ""
    assert console.handle("x").startswith("unknown command 'x'")
    assert not console.stop_requested
    assert console.handle("q") == "stopping" and console.stop_requested


def test_line_reader_delivers_lines() -> None:
    lines = start_line_reader(io.StringIO("m one\nq\n"))
    deadline = time.monotonic() + 5.0
    got = []
    while len(got) < 2 and time.monotonic() < deadline:
        if not lines.empty():
            got.append(lines.get_nowait())
    assert got == ["m one\n", "q\n"]
