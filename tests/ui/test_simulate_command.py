"""``forcelens simulate`` end to end: a separate process, a real serial client."""

from __future__ import annotations

import re
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

from daq.lines import LineDecoder
from daq.samples import concat_blocks
from daq.scaling import Scaling
from daq.serial_source import SerialSource
from estimator.profile import default_demo_profile


def test_simulate_serves_every_sample_to_a_serial_client(tmp_path: Path) -> None:
    truth = tmp_path / "truth.csv"
    proc = subprocess.Popen(
        [sys.executable, "-m", "ui.cli", "simulate", "--programme", "hold 0.1 0; hold 0.2 30",
         "--truth", str(truth), "--start-delay", "1.0", "--speed", "2"],
        stdout=subprocess.PIPE, text=True,
    )  # fmt: skip
    try:
        first = proc.stdout.readline()
        port = re.search(r"on (\S+)", first).group(1)
        tr = default_demo_profile().transducer
        scaling = Scaling(tr.volts_per_count, tr.metres_per_volt, tr.zero_volts)
        blocks = []
        with SerialSource(port, 921600, LineDecoder(scaling)) as src:
            deadline = time.monotonic() + 10.0
            while time.monotonic() < deadline and sum(b.size for b in blocks) < 600:
                blocks.append(src.read_block(0.05))
        assert proc.wait(10.0) == 0
    finally:
        proc.kill()
    got = concat_blocks(blocks)
    # 0.3 s at the demo profile's 2 kHz: 600 samples, all of them, in order.
    np.testing.assert_array_equal(got["seq"], np.arange(600))
    # after the comment; NumPy names 'displacement_m [m]' displacement_m_m
    ref = np.genfromtxt(truth, delimiter=",", names=True, skip_header=1)
    assert ref.size == 600
    # Received displacement = truth + transducer noise (50 nm, 1σ) + quantisation.
    err = got["displacement_m"] - ref["displacement_m_m"]
    assert np.std(err) < 2 * tr.noise_m and abs(np.mean(err)) < tr.noise_m
    assert abs(ref["force_n_N"][-1] - 30.0) < 1e-12  # the programme's last level


def test_simulate_sends_binary_frames_with_the_faults_asked_for() -> None:
    from daq.binary import BinaryDecoder

    proc = subprocess.Popen(
        [sys.executable, "-m", "ui.cli", "simulate", "--programme", "hold 0.3 10",
         "--framing", "binary-24", "--faults", "drop@0.1*7,garbage@0.2*40",
         "--start-delay", "1.0", "--speed", "2"],
        stdout=subprocess.PIPE, text=True,
    )  # fmt: skip
    try:
        first = proc.stdout.readline()
        port = re.search(r"on (\S+)", first).group(1)
        tr = default_demo_profile().transducer
        scaling = Scaling(tr.volts_per_count, tr.metres_per_volt, tr.zero_volts)
        decoder = BinaryDecoder(scaling, 2000.0)
        blocks = []
        with SerialSource(port, 921600, decoder) as src:
            deadline = time.monotonic() + 10.0
            while time.monotonic() < deadline and sum(b.size for b in blocks) < 593:
                blocks.append(src.read_block(0.05))
        assert proc.wait(10.0) == 0
    finally:
        proc.kill()
    got = concat_blocks(blocks)
    # 600 samples sent at 2 kHz, 7 dropped at 0.1 s: 593 arrive, the 7 are counted lost.
    assert got.size == 593 and decoder.stats().samples_lost == 7
    assert np.array_equal(got["seq"], np.setdiff1d(np.arange(600), np.arange(200, 207)))
