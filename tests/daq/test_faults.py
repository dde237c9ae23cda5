"""Faults of the simulated cell, checked end to end through a real SerialReader.

The cell's own record (`sent_intact`, `fault_log`) is the ground truth: every sample it
says went out intact must arrive exactly once, nothing else may arrive, and every
missing sample must be counted as lost.
"""

from __future__ import annotations

import math
import time

import numpy as np
import pytest

from daq.decoding import make_decoder
from daq.errors import FramingError
from daq.lines import LineDecoder
from daq.programme import Hold, LoadProgramme, Ramp
from daq.samples import FLAG_RECONNECT_BEFORE, concat_blocks
from daq.scaling import Scaling
from daq.serial_source import PortSettings, SerialReader
from daq.simulator import FAULT_KINDS, Fault, PtyCell, SimulatedCell, SimulatedRun

SCALING = Scaling(volts_per_count=20.0 / 2**24, metres_per_volt=5e-5)
FS_HZ = 2000.0
SPEED = 5.0  # 8 s of simulated run in about 1.6 s

FAULTS = (
    Fault("garbage", 0.5, count=40),
    Fault("drop", 1.0, count=7),
    Fault("corrupt", 1.5, count=3),
    Fault("garbage", 1.8, count=1),
    Fault("stall", 2.0, duration_s=0.3),
    Fault("disconnect", 3.0, duration_s=0.05),
    Fault("drop", 5.5, count=1),
    Fault("disconnect", 6.0, duration_s=0.0),
    Fault("corrupt", 7.9, count=1),
)


def make_run(seconds: float, seed: int = 3) -> SimulatedRun:
    cell = SimulatedCell(0.4, 4.0e5, 0.12, 5e-8, SCALING, FS_HZ, seed=seed)
    return cell.generate(LoadProgramme((Hold(seconds / 2, 50.0), Ramp(seconds / 2, 0.0))))


def play(
    run: SimulatedRun, framing: str, faults: tuple[Fault, ...]
) -> tuple[np.ndarray, list, object, PtyCell]:
    """Play `run` with `faults` to a SerialReader; return samples, events, stats, cell."""
    with PtyCell(run, speed=SPEED, framing=framing, faults=faults, fault_seed=9) as pty:
        reader = SerialReader(
            PortSettings(pty.port_name),
            make_decoder(framing, SCALING, FS_HZ),
            # Short waits: the port is back within ~0.04 s of the cell reopening it, so a
            # disconnect costs ~0.2 s of real time (~1 s simulated) and the faults placed
            # 1.9 s (simulated) after one are well clear of its loss.
            backoff_initial_s=0.01,
            backoff_max_s=0.04,
        ).start()
        try:
            deadline = time.monotonic() + 5.0
            while reader.state != "connected":  # the first open must precede the data
                assert time.monotonic() < deadline
                time.sleep(0.002)
            pty.start()
            assert pty.wait(20.0), "the simulated cell did not finish"
            assert pty.error is None
            blocks, quiet = [], time.monotonic()
            while time.monotonic() - quiet < 0.2:  # until nothing more arrives
                b = reader.drain()
                if b.size:
                    blocks.append(b)
                    quiet = time.monotonic()
                time.sleep(0.005)
            events = reader.drain_events()
            stats = reader.stats()
        finally:
            reader.stop()
    return concat_blocks(blocks), events, stats, pty


@pytest.mark.parametrize("framing", ["ascii-lines", "binary-24"])
def test_every_fault_kind_ground_truth_matches_what_arrives(framing: str) -> None:
    run = make_run(8.0)
    got, events, stats, pty = play(run, framing, FAULTS)
    seq = got["seq"]
    intact = pty.sent_intact
    # Exactly the samples sent intact arrive, once each, in order, with their values.
    assert np.all(np.diff(seq) > 0)
    np.testing.assert_array_equal(seq, intact)
    np.testing.assert_array_equal(got["counts"], run.counts[seq])
    # The faults happened where they were put, and cost samples.
    assert seq[0] == 0 and seq[-1] == len(run) - 1  # every fault lies inside the run
    logged = {kind for kind, _, _ in pty.fault_log}
    assert logged == set(FAULT_KINDS)
    at = {(kind, at_seq) for kind, at_seq, _ in pty.fault_log}
    assert ("drop", 2000) in at and ("stall", 4000) in at and ("disconnect", 6000) in at
    assert ("corrupt", 3000) in at and ("corrupt", 3002) in at and ("corrupt", 15800) in at
    missing = np.setdiff1d(np.arange(len(run)), seq)
    assert np.isin(np.arange(2000, 2007), missing).all()  # the dropped samples
    assert np.isin([3000, 3001, 3002, 15800], missing).all()  # the corrupted ones
    assert np.isin(np.arange(4000, 4600), missing).all()  # 0.3 s of stall at 2 kHz
    assert 11000 in missing and not np.isin([10999, 11001], missing).any()  # drop at 5.5 s
    # ... and every missing sample is counted as lost by the decoder.
    assert stats.decoder.samples_lost == (seq[-1] - seq[0] + 1) - seq.size
    assert stats.decoder.samples_lost == missing.size
    assert stats.decoder.rejected >= 4  # 4 corrupted samples, plus the noise
    # Each disconnect: one "disconnected", one "reconnected", and the flag on the first
    # sample after it.
    kinds = [e.kind for e in events]
    assert kinds.count("connected") == 1
    assert kinds.count("disconnected") == 2 and kinds.count("reconnected") == 2
    assert kinds.count("open-failed") <= 2  # at most one per outage
    assert stats.reconnects == 2
    flagged = seq[(got["flags"] & FLAG_RECONNECT_BEFORE) != 0]
    cuts = [at_seq for kind, at_seq, _ in pty.fault_log if kind == "disconnect"]
    expected = [int(seq[np.searchsorted(seq, c)]) for c in cuts]
    np.testing.assert_array_equal(flagged, expected)
    last_seen = [e.last_seq for e in events if e.kind == "disconnected"]
    assert last_seen == [int(seq[np.searchsorted(seq, c) - 1]) for c in cuts]


def test_corrupt_ascii_line_is_malformed_and_garbage_never_decodes() -> None:
    run = make_run(1.0)
    faults = (Fault("garbage", 0.1, count=2000), Fault("corrupt", 0.2, count=50))
    got, _events, stats, pty = play(run, "ascii-lines", faults)
    np.testing.assert_array_equal(got["seq"], pty.sent_intact)
    np.testing.assert_array_equal(pty.sent_intact, np.setdiff1d(run.seq, np.arange(400, 450)))
    # 2000 noise bytes end in LF and hold no delimiter: only malformed lines come of them.
    assert stats.decoder.rejected >= 50 + 1
    flips = [d for kind, _, d in pty.fault_log if kind == "corrupt"]
    assert len(flips) == 50 and all(d.startswith("bit 6 of byte") for d in flips)


def test_faults_are_deterministic_for_a_seed() -> None:
    run = make_run(0.5)
    faults = (Fault("garbage", 0.1, count=30), Fault("corrupt", 0.2, count=20))
    logs = []
    for _ in range(2):
        *_, pty = play(run, "binary-24", faults)
        logs.append(pty.fault_log)
    assert logs[0] == logs[1]
    assert len({d for kind, _, d in logs[0] if kind == "corrupt"}) > 1  # not one fixed bit


@pytest.mark.parametrize(
    ("args", "kwargs", "field"),
    [
        (("jam", 1.0), {}, "kind"),
        (("drop", -0.1), {}, "at_s"),
        (("drop", math.nan), {}, "at_s"),
        (("disconnect", 1.0), {"duration_s": -1.0}, "duration_s"),
        (("stall", 1.0), {"duration_s": 0.0}, "duration_s"),
        (("garbage", 1.0), {"count": 0}, "count"),
        (("garbage", 1.0), {"count": 2.0}, "count"),
        (("corrupt", "1"), {}, "at_s"),
    ],
)
def test_fault_validation_names_the_field(args: tuple, kwargs: dict, field: str) -> None:
    with pytest.raises(FramingError, match=rf"{field}="):
        Fault(*args, **kwargs)


def test_pty_cell_checks_its_faults_and_framing() -> None:
    run = make_run(0.5)  # 1000 samples, the last at 0.4995 s
    with pytest.raises(FramingError, match=r"faults\[1\]="):
        PtyCell(run, faults=[Fault("drop", 0.1), ("drop", 0.2)])  # type: ignore[list-item]
    with pytest.raises(FramingError, match=r"faults\[0\]\.at_s=0\.5"):
        PtyCell(run, faults=[Fault("drop", 0.5)])
    with pytest.raises(FramingError, match="faults="):
        PtyCell(run, faults=Fault("drop", 0.1))  # type: ignore[arg-type]
    with pytest.raises(FramingError, match="framing="):
        PtyCell(run, framing="binary-16")
    # In a loop the run never ends, so a late fault is fine.
    PtyCell(run, loop=True, faults=[Fault("drop", 3.0)]).stop()


def test_fault_at_a_time_between_samples_hits_the_next_sample() -> None:
    run = make_run(0.5)
    got, _events, _stats, pty = play(run, "binary-32", (Fault("drop", 0.10001, count=2),))
    # 0.10001 s × 2000 Hz = 200.02: the first sample at or after it is 201.
    assert pty.fault_log == [("drop", 201, "seq 201..202 never sent")]
    np.testing.assert_array_equal(pty.sent_intact, np.setdiff1d(run.seq, [201, 202]))
    np.testing.assert_array_equal(got["seq"], pty.sent_intact)


def test_reader_without_faults_sees_lines_decoded_by_a_plain_line_decoder() -> None:
    # The default framing is unchanged: plain ASCII lines (docs/ascii-line-format.md).
    run = make_run(0.3)
    got, events, stats, pty = play(run, "ascii-lines", ())
    np.testing.assert_array_equal(got["seq"], run.seq)
    assert pty.fault_log == [] and [e.kind for e in events] == ["connected"]
    assert isinstance(make_decoder("ascii-lines", SCALING, FS_HZ), LineDecoder)
    assert stats.decoder.rejected == 0
