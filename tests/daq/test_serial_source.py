"""SerialSource over pyserial's ``loop://`` and, end to end, over a real PtyCell."""

from __future__ import annotations

import itertools
import time

import numpy as np
import pytest
import serial

from daq.errors import FramingError, SourceError
from daq.lines import LineDecoder, encode_lines
from daq.programme import Hold, LoadProgramme, Ramp
from daq.samples import concat_blocks
from daq.scaling import Scaling
from daq.serial_source import SerialSource
from daq.simulator import PtyCell, SimulatedCell, SimulatedRun, lines

SCALING = Scaling(volts_per_count=20.0 / 2**24, metres_per_volt=5e-5)


def make_run(seconds: float = 1.0, seed: int = 0) -> SimulatedRun:
    cell = SimulatedCell(0.4, 4.0e5, 0.12, 5e-8, SCALING, 2000.0, seed=seed)
    return cell.generate(LoadProgramme((Hold(seconds / 2, 50.0), Ramp(seconds / 2, 0.0))))


def read_until(src: SerialSource, n: int, limit_s: float = 5.0) -> np.ndarray:
    blocks, got = [], 0
    deadline = time.monotonic() + limit_s
    while got < n and time.monotonic() < deadline:
        b = src.read_block(0.02)
        blocks.append(b)
        got += b.size
    return concat_blocks(blocks)


def test_loop_url_every_line_arrives_in_pieces() -> None:
    rng = np.random.default_rng(11)
    counts = rng.integers(-(2**23), 2**23, 400)
    data = encode_lines(np.arange(400), np.arange(400) * 500, counts)
    ticks = itertools.count(100.0, 0.5)
    src = SerialSource("loop://", 115200, LineDecoder(SCALING), clock=lambda: next(ticks))
    with src:
        cuts = [0, *sorted(rng.choice(len(data), 25, replace=False).tolist()), len(data)]
        blocks = []
        for a, b in itertools.pairwise(cuts):
            src.serial.write(data[a:b])
            blocks.append(src.read_block(0.2))
        out = concat_blocks(blocks)
    assert not src.is_open
    np.testing.assert_array_equal(out["counts"], counts)
    np.testing.assert_array_equal(out["seq"], np.arange(400))
    assert src.bytes_read == len(data)
    # host_time_s is the clock value of the read that completed each line.
    assert set(out["host_time_s"].tolist()) <= {100.0 + 0.5 * i for i in range(len(cuts))}
    assert np.all(np.diff(out["host_time_s"]) >= 0)


def test_empty_read_waits_about_the_timeout() -> None:
    with SerialSource("loop://", 115200, LineDecoder(SCALING)) as src:
        t0 = time.monotonic()
        out = src.read_block(0.05)
        elapsed = time.monotonic() - t0
    assert out.size == 0
    # At least most of the timeout (pyserial's loop timer); well under a second.
    assert 0.03 <= elapsed < 1.0


def test_errors_become_source_errors_naming_port_and_fix() -> None:
    src = SerialSource("/dev/forcelens-no-such-port", 9600, LineDecoder(SCALING))
    with pytest.raises(SourceError, match=r"forcelens-no-such-port.*list_ports"):
        src.open()
    with pytest.raises(SourceError, match="not open"):
        src.read_block()

    class Broken:
        in_waiting = 0
        timeout = 0.05

        def read(self, n: int) -> bytes:
            raise serial.SerialException("device went away")

        def close(self) -> None:
            pass

    src = SerialSource("COM9", 9600, LineDecoder(SCALING), open_fn=lambda *a, **k: Broken())
    with src, pytest.raises(SourceError, match=r"'COM9'.*device went away.*plugged in"):
        src.read_block()
    with pytest.raises(FramingError, match="baudrate"):
        SerialSource("loop://", 0, LineDecoder(SCALING))
    with pytest.raises(FramingError, match="decoder"):
        SerialSource("loop://", 9600, None)  # type: ignore[arg-type]


def test_pty_cell_end_to_end_every_line_arrives() -> None:
    run = make_run(1.0)
    pty = PtyCell(run, speed=10.0)  # 1 s of samples in about 0.1 s
    try:
        # Open before the first line is written: opening a port flushes its input queue.
        with SerialSource(pty.port_name, 921600, LineDecoder(SCALING)) as src:
            pty.start()
            out = read_until(src, len(run))
        assert pty.wait(5.0)
        assert pty.finished and pty.error is None
        assert pty.bytes_dropped == 0
        assert pty.bytes_written == len(lines(run))
    finally:
        pty.stop()
    np.testing.assert_array_equal(out["seq"], run.seq)
    np.testing.assert_array_equal(out["counts"], run.counts)
    np.testing.assert_array_equal(out["device_time_s"], run.device_time_us * 1e-6)
    assert src.decoder.lines_malformed == 0 and src.decoder.samples_lost == 0


def test_pty_cell_real_time_pace() -> None:
    run = make_run(0.4)
    with PtyCell(run, speed=1.0) as pty:
        time.sleep(0.1)
        assert pty.lines_written == 0  # entering the block does not start sending
        pty.start()
        t0 = time.monotonic()
        assert pty.wait(5.0)
        elapsed = time.monotonic() - t0
    # The last sample is due at (n − 1)/fs ≈ 0.3995 s; the writer wakes every 5 ms and
    # the machine is shared, so allow 0.39 s .. 0.9 s.
    assert 0.39 <= elapsed < 0.9


def test_pty_cell_loop_continues_seq_and_uses_regenerated_runs() -> None:
    run = make_run(0.1, seed=0)  # 200 samples
    cell = SimulatedCell(0.4, 4.0e5, 0.12, 5e-8, SCALING, 2000.0)
    prog = LoadProgramme((Hold(0.05, 50.0), Ramp(0.05, 0.0)))
    pty = PtyCell(run, speed=20.0, loop=True, regenerate=lambda r: cell.generate(prog, seed=r))
    try:
        with SerialSource(pty.port_name, 921600, LineDecoder(SCALING)) as src:
            pty.start()
            out = read_until(src, 700)
        assert not pty.finished
    finally:
        pty.stop()
    assert out.size >= 700
    np.testing.assert_array_equal(out["seq"][:700], np.arange(700))
    np.testing.assert_array_equal(out["counts"][:200], run.counts)
    np.testing.assert_array_equal(out["counts"][200:400], cell.generate(prog, seed=1).counts)
    np.testing.assert_array_equal(
        out["device_time_s"][:700], np.rint(np.arange(700) * 1e6 / 2000.0) * 1e-6
    )


def test_pty_cell_drops_only_after_the_reader_stalls() -> None:
    run = make_run(20.0)  # 40 000 lines, ~0.6 MB: more than a pty buffers
    total = len(lines(run))
    with PtyCell(run, speed=1000.0, stall_timeout_s=0.2) as pty:
        pty.start()
        assert pty.wait(10.0)
        assert pty.bytes_dropped > 0
        assert pty.bytes_written + pty.bytes_dropped == total
    with pytest.raises(SourceError, match="already stopped"):
        pty.start()
