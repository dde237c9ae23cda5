"""SerialSource, PortSettings, SerialReader (on fakes and on a real PtyCell), list_ports."""

from __future__ import annotations

import datetime
import errno
import itertools
import math
import os
import re
import subprocess
import sys
import threading
import time
from collections.abc import Callable

import numpy as np
import pytest
import serial
import serial.tools.list_ports
from serial.tools.list_ports_common import ListPortInfo

from daq.decoding import make_decoder
from daq.errors import FramingError, SourceError
from daq.lines import LineDecoder, encode_lines
from daq.ports import PortInfo, list_ports
from daq.programme import Hold, LoadProgramme, Ramp
from daq.samples import FLAG_GAP_BEFORE, FLAG_RECONNECT_BEFORE, concat_blocks
from daq.scaling import Scaling
from daq.serial_source import PortSettings, SerialReader, SerialSource
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
    with pytest.raises(SourceError, match=r"forcelens-no-such-port.*forcelens ports"):
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


# ------------------------------------------------------------------ PortSettings
def test_port_settings_map_to_pyserial_constants() -> None:
    calls: list[tuple[str, dict]] = []

    def open_fn(port: str, **kwargs: object) -> FakePort:
        calls.append((port, kwargs))
        return FakePort([])

    settings = PortSettings("COM7", baudrate=57600, parity="even", stop_bits=1.5, data_bits=7)
    with SerialReader(settings, LineDecoder(SCALING), open_fn=open_fn, read_timeout_s=0.01) as r:
        wait_for(lambda: r.state == "connected")
    assert calls == [
        (
            "COM7",
            {
                "baudrate": 57600,
                "parity": serial.PARITY_EVEN,
                "stopbits": serial.STOPBITS_ONE_POINT_FIVE,
                "bytesize": serial.SEVENBITS,
                "exclusive": True,
                "timeout": 0.01,
            },
        )
    ]
    assert r.state == "stopped"
    default = PortSettings("/dev/ttyUSB0").serial_kwargs()
    assert default == {
        "baudrate": 921600,
        "parity": serial.PARITY_NONE,
        "stopbits": serial.STOPBITS_ONE,
        "bytesize": serial.EIGHTBITS,
        "exclusive": True,  # pyserial: the port locked against a second process (POSIX)
    }
    assert PortSettings("x", stop_bits=2, parity="space").serial_kwargs()["stopbits"] == (
        serial.STOPBITS_TWO
    )


@pytest.mark.parametrize(
    ("kwargs", "field"),
    [
        ({"port": ""}, "port"),
        ({"baudrate": 0}, "baudrate"),
        ({"baudrate": 9600.5}, "baudrate"),
        ({"parity": "None"}, "parity"),
        ({"parity": "n"}, "parity"),
        ({"stop_bits": 3}, "stop_bits"),
        ({"stop_bits": True}, "stop_bits"),
        ({"data_bits": 9}, "data_bits"),
        ({"data_bits": 8.0}, "data_bits"),
    ],
)
def test_port_settings_validation_names_the_field(kwargs: dict, field: str) -> None:
    args = {"port": "/dev/ttyUSB0", **kwargs}
    with pytest.raises(FramingError, match=rf"{field}="):
        PortSettings(**args)


# ---------------------------------------------------------- SerialReader on fakes
class FakePort:
    """A pyserial-like port that plays a script: bytes to hand out, or errors to raise."""

    def __init__(self, script: list[bytes | BaseException], timeout: float = 0.005) -> None:
        self.script = list(script)
        self.timeout = timeout
        self.closed = False

    @property
    def in_waiting(self) -> int:
        if self.script and isinstance(self.script[0], bytes):
            return len(self.script[0])
        return 0

    def read(self, n: int) -> bytes:
        if not self.script:
            time.sleep(self.timeout)
            return b""
        item = self.script.pop(0)
        if isinstance(item, BaseException):
            raise item
        if len(item) > n:
            self.script.insert(0, item[n:])
        return item[:n]

    def close(self) -> None:
        self.closed = True


def wait_for(cond: Callable[[], bool], limit_s: float = 5.0) -> None:
    deadline = time.monotonic() + limit_s
    while not cond():
        assert time.monotonic() < deadline, "condition not met in time"
        time.sleep(0.002)


def drain_until(reader: SerialReader, n: int, limit_s: float = 5.0) -> np.ndarray:
    blocks: list[np.ndarray] = []
    deadline = time.monotonic() + limit_s
    while sum(b.size for b in blocks) < n and time.monotonic() < deadline:
        blocks.append(reader.drain())
        time.sleep(0.002)
    return concat_blocks(blocks)


def ascii(seq: range, counts: int = 7) -> bytes:
    s = np.asarray(seq)
    return encode_lines(s, s * 500, np.full(s.size, counts))


def opener(ports: list[FakePort | BaseException]) -> Callable[..., FakePort]:
    """open_fn that returns (or raises) the next item of `ports` on each call."""

    def open_fn(port: str, **kwargs: object) -> FakePort:
        item = ports.pop(0)
        if isinstance(item, BaseException):
            raise item
        return item

    return open_fn


def test_reader_reconnects_flags_the_first_sample_and_drops_the_partial_line() -> None:
    first = FakePort([ascii(range(10)), b"10,5000,", serial.SerialException("unplugged")])
    second = FakePort([ascii(range(15, 20))])
    sleeps: list[float] = []
    reader = SerialReader(
        PortSettings("/dev/ttyFAKE"),
        LineDecoder(SCALING),
        open_fn=opener([first, OSError(2, "gone"), second]),
        sleep=sleeps.append,
        backoff_initial_s=0.01,
    )
    with reader:
        got = drain_until(reader, 15)
        wait_for(lambda: reader.stats().reconnects == 1)
    # Without discard_partial the leftover "10,5000," would glue onto the next line.
    np.testing.assert_array_equal(got["seq"], [*range(10), *range(15, 20)])
    flags = got["flags"]
    assert flags[10] == FLAG_RECONNECT_BEFORE | FLAG_GAP_BEFORE
    assert np.all(flags[np.arange(15) != 10] == 0)
    assert first.closed and second.closed
    events = reader.drain_events()
    assert [e.kind for e in events] == ["connected", "disconnected", "open-failed", "reconnected"]
    assert events[1].last_seq == 9 and "unplugged" in events[1].message
    assert "gone" in events[2].message
    st = reader.stats()
    assert st.reconnects == 1 and st.decoder.samples_lost == 5
    assert st.decoder.bytes_discarded == len(b"10,5000,")
    assert st.bytes_read == len(ascii(range(10))) + 8 + len(ascii(range(15, 20)))
    assert sleeps == [0.01, 0.02]  # the wait before the retry, then after one failure
    iso = re.compile(r"^\d{4}-\d\d-\d\dT\d\d:\d\d:\d\d\.\d{3}Z$")
    for e in events:
        assert iso.match(e.utc), e.utc
        when = datetime.datetime.fromisoformat(e.utc.replace("Z", "+00:00"))
        age = datetime.datetime.now(datetime.UTC) - when
        assert datetime.timedelta(0) <= age < datetime.timedelta(seconds=30)


def test_backoff_doubles_is_capped_and_logs_one_failure_per_series() -> None:
    sleeps: list[float] = []
    fails = [serial.SerialException(f"busy {i}") for i in range(6)]
    flappy = [FakePort([serial.SerialException("dies at once")]) for _ in range(3)]
    good = FakePort([ascii(range(3))])
    later = FakePort([ascii(range(3, 6))])
    ports: list = [*fails, *flappy, good, serial.SerialException("away"), later]
    good.script.append(serial.SerialException("lost again"))
    reader = SerialReader(
        PortSettings("/dev/ttyFAKE"),
        LineDecoder(SCALING),
        open_fn=opener(ports),
        sleep=sleeps.append,
        backoff_initial_s=0.01,
        backoff_max_s=0.08,
        first_open_attempts=10,
    )
    with reader:
        got = drain_until(reader, 6)
    np.testing.assert_array_equal(got["seq"], np.arange(6))
    # 6 failed opens: waits 0.01, 0.02, 0.04, 0.08 (cap), 0.08, 0.08; the 7th open works.
    # Three ports that fail at once: the wait keeps doubling (0.08, capped) because no
    # byte arrived in between. After data, the wait restarts at 0.01, then doubles.
    assert sleeps == pytest.approx([0.01, 0.02, 0.04, 0.08, 0.08, 0.08, 0.08, 0.08, 0.08,
                                    0.01, 0.02])  # fmt: skip
    kinds = [e.kind for e in reader.drain_events()]
    assert kinds == (
        ["open-failed", "connected"]
        + ["disconnected", "reconnected"] * 3
        + ["disconnected", "open-failed", "reconnected"]
    )
    assert reader.stats().reconnects == 4


def test_a_port_that_never_opens_stops_with_the_command_that_lists_ports() -> None:
    # Issue 12: a mistyped port retried forever. Six attempts (five waits), then drain
    # raises one error naming the port and `forcelens ports`.
    sleeps: list[float] = []
    reader = SerialReader(
        PortSettings("/dev/ttyTYPO"),
        LineDecoder(SCALING),
        open_fn=opener([serial.SerialException(f"no such port {i}") for i in range(20)]),
        sleep=sleeps.append,
    )
    with reader:
        wait_for(lambda: reader.state == "stopped")
        with pytest.raises(SourceError, match=r"cannot open '/dev/ttyTYPO'.*forcelens ports"):
            reader.drain()
    assert len(sleeps) == 5


def test_the_reason_a_port_did_not_open_is_said_once() -> None:
    # pyserial's own text repeats the errno ("[Errno 2] could not open port X: [Errno 2]
    # No such file or directory: 'X'"); the error says the operating system's words once.
    missing = serial.SerialException(
        errno.ENOENT, "could not open port /dev/ttyX9: [Errno 2] No such file or directory"
    )
    reader = SerialReader(
        PortSettings("/dev/ttyX9"),
        LineDecoder(SCALING),
        open_fn=opener([missing] * 6),
        sleep=lambda s: None,
    )
    with reader:
        wait_for(lambda: reader.state == "stopped")
        with pytest.raises(SourceError) as caught:
            reader.drain()
    assert str(caught.value).startswith(
        f"cannot open '/dev/ttyX9' ({os.strerror(errno.ENOENT)}), 6 attempts;"
    )
    assert str(caught.value).count("Errno") == 0


def test_a_second_process_cannot_open_the_same_port() -> None:
    # pyserial's exclusive open (flock on POSIX), on a real pseudo-terminal.
    master, slave = os.openpty()
    name = os.ttyname(slave)
    first = serial.Serial(name, **PortSettings(name).serial_kwargs())
    try:
        code = (
            "import serial, sys\n"
            "from daq.serial_source import PortSettings\n"
            f"try:\n    serial.Serial({name!r}, **PortSettings({name!r}).serial_kwargs())\n"
            "except serial.SerialException as exc:\n    print(exc); sys.exit(3)\n"
        )
        proc = subprocess.run(
            [sys.executable, "-c", code], capture_output=True, text=True, timeout=60
        )
        assert proc.returncode == 3, proc.stdout + proc.stderr
    finally:
        first.close()
        os.close(master)
        os.close(slave)


def test_drain_never_waits_for_a_blocked_read_or_a_slow_decoder() -> None:
    release = threading.Event()

    class BlockingPort(FakePort):
        def read(self, n: int) -> bytes:
            if not self.script:
                release.wait(5.0)  # a driver that blocks far longer than its timeout
                return b""
            return super().read(n)

        def cancel_read(self) -> None:
            release.set()

    class SlowDecoder(LineDecoder):
        def feed(self, data: bytes, host_time_s: float = math.nan) -> np.ndarray:
            time.sleep(0.5)
            return super().feed(data, host_time_s)

    port = BlockingPort([ascii(range(4))])
    reader = SerialReader(
        PortSettings("/dev/ttyFAKE"), SlowDecoder(SCALING), open_fn=opener([port])
    ).start()
    try:
        time.sleep(0.1)  # the thread is now inside the slow decoder
        t0 = time.monotonic()
        assert reader.drain().size == 0
        # A lock taken for a copy, nothing more; 0.1 s leaves room for a busy machine and
        # is still 5 times shorter than the decoder's 0.5 s.
        assert time.monotonic() - t0 < 0.1
        wait_for(lambda: reader.stats().decoder.samples_ok == 4)
        assert reader.drain().size == 4
        time.sleep(0.05)  # the thread now blocks in read()
        t0 = time.monotonic()
        assert reader.drain().size == 0
        assert time.monotonic() - t0 < 0.1  # the read blocks for up to 5 s
    finally:
        t0 = time.monotonic()
        reader.stop(timeout_s=0.2)  # join times out, cancel_read() unblocks the read
    assert time.monotonic() - t0 < 1.0 and reader.state == "stopped" and port.closed


def test_unexpected_thread_error_surfaces_from_drain() -> None:
    class Fragile(LineDecoder):
        calls = 0

        def feed(self, data: bytes, host_time_s: float = math.nan) -> np.ndarray:
            self.calls += 1
            if self.calls == 2:
                raise RuntimeError("decoder bug")
            return super().feed(data, host_time_s)

    port = FakePort([ascii(range(5)), ascii(range(5, 9))])
    reader = SerialReader(PortSettings("/dev/ttyFAKE"), Fragile(SCALING), open_fn=opener([port]))
    with reader:
        wait_for(lambda: reader.error is not None)
        assert reader.state == "stopped"
        assert reader.drain()["seq"].tolist() == [0, 1, 2, 3, 4]  # nothing decoded is lost
        with pytest.raises(SourceError, match=r"RuntimeError: decoder bug"):
            reader.drain()
        with pytest.raises(SourceError, match="decoder bug"):
            reader.drain()  # and it keeps saying so
    assert port.closed


def test_unread_samples_are_bounded_counted_and_logged() -> None:
    port = FakePort([ascii(range(0, 40)), ascii(range(40, 80)), ascii(range(80, 120))])
    reader = SerialReader(
        PortSettings("/dev/ttyFAKE"),
        LineDecoder(SCALING),
        open_fn=opener([port]),
        max_unread_samples=50,
    )
    with reader:
        wait_for(lambda: reader.stats().decoder.samples_ok == 120)
        st = reader.stats()
        assert st.samples_dropped_unread == 70 and st.samples_unread == 50
        got = reader.drain()
    np.testing.assert_array_equal(got["seq"], np.arange(70, 120))  # the newest are kept
    kinds = [e.kind for e in reader.drain_events()]
    assert kinds.count("unread-dropped") == 1  # once per episode, not per sample
    assert reader.stats().samples_unread == 0


def test_stats_seconds_since_data_and_rate_on_a_fake_clock() -> None:
    now = [100.0]
    lines_per_read = 200
    script: list[bytes | BaseException] = [
        ascii(range(i, i + lines_per_read)) for i in range(0, 4000, lines_per_read)
    ]
    port = FakePort(script)
    reads = iter(range(1000))

    def clock() -> float:
        return now[0]

    class TimedPort(FakePort):
        def read(self, n: int) -> bytes:
            data = port.read(n)
            if data:  # each read happens 0.1 s after the previous one: 2000 samples/s
                now[0] = 100.0 + 0.1 * next(reads)
            return data

        @property
        def in_waiting(self) -> int:
            return port.in_waiting

    reader = SerialReader(
        PortSettings("/dev/ttyFAKE"),
        LineDecoder(SCALING),
        open_fn=opener([TimedPort([])]),
        clock=clock,
        nominal_rate_hz=2000.0,
        rate_window_s=1.0,
    )
    assert reader.stats().seconds_since_data is None  # not started
    with reader:
        wait_for(lambda: reader.stats().decoder.samples_ok == 4000)
        now[0] += 3.5
        st = reader.stats()
    assert st.seconds_since_data == pytest.approx(3.5, abs=1e-9)
    # 200 samples every 0.1 s of host time: exactly 2000 Hz, 0 ppm (float rounding only).
    assert st.rate_hz == pytest.approx(2000.0, rel=1e-9)
    assert st.drift_ppm == pytest.approx(0.0, abs=1e-3)


def test_reader_validation() -> None:
    dec = LineDecoder(SCALING)
    with pytest.raises(FramingError, match="settings"):
        SerialReader("/dev/ttyUSB0", dec)  # type: ignore[arg-type]
    with pytest.raises(FramingError, match="decoder"):
        SerialReader(PortSettings("x"), object())  # type: ignore[arg-type]
    with pytest.raises(FramingError, match="backoff_initial_s"):
        SerialReader(PortSettings("x"), dec, backoff_initial_s=0.0)
    with pytest.raises(FramingError, match="backoff_max_s"):
        SerialReader(PortSettings("x"), dec, backoff_initial_s=1.0, backoff_max_s=0.5)
    with pytest.raises(FramingError, match="max_unread_samples"):
        SerialReader(PortSettings("x"), dec, max_unread_samples=0)
    reader = SerialReader(PortSettings("x"), dec, open_fn=opener([FakePort([])]))
    reader.start()
    reader.stop()
    with pytest.raises(SourceError, match="already stopped"):
        reader.start()


# ------------------------------------------------------- SerialReader on a PtyCell
@pytest.mark.parametrize("framing", ["ascii-lines", "binary-24", "binary-32"])
def test_reader_on_a_pty_cell_receives_every_sample_in_order(framing: str) -> None:
    run = make_run(1.0)
    with PtyCell(run, speed=10.0, framing=framing) as pty:
        reader = SerialReader(
            PortSettings(pty.port_name), make_decoder(framing, SCALING, 2000.0)
        ).start()
        try:
            wait_for(lambda: reader.state == "connected")  # open before the first byte
            pty.start()
            got = drain_until(reader, len(run))
            assert pty.wait(5.0) and pty.error is None
            st = reader.stats()
        finally:
            reader.stop()
    np.testing.assert_array_equal(got["seq"], run.seq)
    np.testing.assert_array_equal(got["counts"], run.counts)
    assert np.all(got["flags"] == 0)
    assert np.all(np.diff(got["host_time_s"]) >= 0)
    assert st.decoder.samples_ok == len(run) and st.decoder.rejected == 0
    assert st.decoder.samples_lost == 0 and st.reconnects == 0
    np.testing.assert_array_equal(pty.sent_intact, run.seq)


# ---------------------------------------------------------------------- list_ports
def test_list_ports_wraps_comports_sorted_naturally(monkeypatch: pytest.MonkeyPatch) -> None:
    found = []
    for dev, desc, hwid in [
        ("/dev/ttyUSB10", "USB serial", "USB VID:PID=0403:6001"),
        ("/dev/ttyACM0", "", None),
        ("/dev/ttyUSB2", "USB serial", "USB VID:PID=0403:6001 SER=A1"),
    ]:
        info = ListPortInfo(dev)
        info.description = desc
        info.hwid = hwid
        found.append(info)
    monkeypatch.setattr(serial.tools.list_ports, "comports", lambda *a, **k: found)
    ports = list_ports()
    assert [p.device for p in ports] == ["/dev/ttyACM0", "/dev/ttyUSB2", "/dev/ttyUSB10"]
    assert ports[0] == PortInfo("/dev/ttyACM0", "n/a", "n/a")
    assert ports[1].hwid == "USB VID:PID=0403:6001 SER=A1"
    monkeypatch.setattr(serial.tools.list_ports, "comports", lambda *a, **k: [])
    assert list_ports() == []

    def denied(*a: object, **k: object) -> list:
        raise PermissionError(13, "Permission denied")

    monkeypatch.setattr(serial.tools.list_ports, "comports", denied)
    with pytest.raises(SourceError, match="Permission denied"):
        list_ports()
