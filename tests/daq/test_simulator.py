"""SimulatedCell (plant against closed forms and SciPy, noise, quantisation) and PtyCell."""

from __future__ import annotations

import math
import os
import time
from pathlib import Path

import numpy as np
import pytest
import scipy.signal

from daq.binary import BinaryDecoder
from daq.errors import FramingError, SourceError
from daq.lines import LineDecoder
from daq.programme import HalfSine, Hold, LoadProgramme, Ramp, Sine, Table, parse_programme
from daq.samples import concat_blocks, device_status
from daq.scaling import Scaling
from daq.serial_source import SerialSource
from daq.simulator import (
    TRUTH_HEADER,
    Fault,
    PtyCell,
    SimulatedCell,
    lines,
    write_truth_csv,
)

# An invented cell: fn = sqrt(k/m)/2π ≈ 159 Hz, lightly damped.
M_KG, K_N_PER_M, ZETA = 0.4, 4.0e5, 0.12
FS_HZ = 2000.0
SCALING = Scaling(volts_per_count=20.0 / 2**24, metres_per_volt=5e-5)


def make_cell(noise_m: float = 0.0, **kw: float) -> SimulatedCell:
    return SimulatedCell(M_KG, K_N_PER_M, ZETA, noise_m, SCALING, FS_HZ, **kw)


def underdamped_step(t: np.ndarray, force_n: float, m: float, k: float, z: float) -> np.ndarray:
    """Step response of m·x'' + b·x' + k·x = F (handbook formula for ζ < 1):

    x(t) = F/k·(1 − e^{−ζωn t}(cos ωd t + ζ/√(1−ζ²) sin ωd t)).
    """
    wn = math.sqrt(k / m)
    wd = wn * math.sqrt(1 - z * z)
    return (
        force_n
        / k
        * (1 - np.exp(-z * wn * t) * (np.cos(wd * t) + z / math.sqrt(1 - z * z) * np.sin(wd * t)))
    )


def test_a_run_as_the_reader_delivers_it() -> None:
    # The block's fields against the run's own arrays and the scaling's definition
    # (counts × V/count × m/V, no offset here): device time = device µs × 1e-6.
    run = make_cell(noise_m=1e-8, seed=2).generate(parse_programme("hold 0.01 0; hold 0.01 40"))
    block = run.sample_block(SCALING)
    assert block.size == len(run) == 40
    np.testing.assert_array_equal(block["seq"], run.seq)
    np.testing.assert_array_equal(block["counts"], run.counts)
    np.testing.assert_array_equal(block["device_time_s"], run.device_time_us * 1e-6)
    want_m = run.counts * (20.0 / 2**24) * 5e-5
    np.testing.assert_allclose(block["displacement_m"], want_m, rtol=1e-15, atol=0.0)
    assert np.isnan(block["host_time_s"]).all()  # not received by any host
    np.testing.assert_array_equal(
        run.sample_block(SCALING, host_time_s=run.time_s + 5.0)["host_time_s"], run.time_s + 5.0
    )


def test_step_response_matches_closed_form() -> None:
    run = make_cell().generate(LoadProgramme((Hold(0.25, 100.0),)))
    x_ref = underdamped_step(run.time_s, 100.0, M_KG, K_N_PER_M, ZETA)
    # 1e-12 of the static deflection: the ramp-invariant step is exact for a step on the
    # grid, so only float rounding over 4000 sub-steps remains (measured ~8e-14).
    np.testing.assert_allclose(
        run.true_displacement_m, x_ref, rtol=0, atol=1e-12 * 100.0 / K_N_PER_M
    )
    # Noise-free counts are the nearest ADC step (half a count, plus float slack).
    exact_counts = x_ref / SCALING.resolution_m
    assert np.max(np.abs(run.counts - exact_counts)) <= 0.5 + 1e-6


def test_step_response_matches_closed_form_overdamped_check_via_lsim() -> None:
    # ζ > 1 as well: compare with scipy.signal.lsim, which uses first-order-hold input.
    cell = SimulatedCell(M_KG, K_N_PER_M, 1.7, 0.0, SCALING, FS_HZ, oversample=4)
    prog = LoadProgramme((Ramp(0.05, 30.0), Hold(0.1, 30.0)))
    run = cell.generate(prog)
    sys = scipy.signal.lti(
        [1.0 / M_KG], [1.0, 2 * 1.7 * math.sqrt(K_N_PER_M / M_KG), K_N_PER_M / M_KG]
    )
    _, y, _ = scipy.signal.lsim(sys, prog.force_at(run.time_s), run.time_s)
    # lsim (SciPy) integrates the same piecewise-linear input exactly up to its own
    # matrix-exponential rounding; 1e-9 of the static deflection leaves room for that
    # (measured ~2e-14).
    np.testing.assert_allclose(run.true_displacement_m, y, rtol=0, atol=1e-9 * 30.0 / K_N_PER_M)


def test_continuous_programme_matches_scipy_lsim_on_substep_grid() -> None:
    prog = LoadProgramme(
        (
            Ramp(0.1, 50.0),
            Sine(0.2, 50.0, 10.0, 12.0),
            HalfSine(0.1, 30.0, 0.01),
            Table([0.0, 0.05, 0.1], [50.0 + 10.0 * math.sin(2 * math.pi * 12 * 0.2), 80.0, 0.0]),
        )
    )
    cell = make_cell(oversample=8)
    run = cell.generate(prog)
    t_sub = np.arange((len(run) - 1) * 8 + 1) / (FS_HZ * 8)
    wn2 = K_N_PER_M / M_KG
    sys = scipy.signal.lti([1.0 / M_KG], [1.0, 2 * ZETA * math.sqrt(wn2), wn2])
    _, y, _ = scipy.signal.lsim(sys, prog.force_at(t_sub), t_sub)
    # Same input samples, both first-order hold: agreement to float rounding (1e-9 of
    # the deflection of 80 N leaves a wide margin over the ~4e-14 measured).
    np.testing.assert_allclose(
        run.true_displacement_m, y[::8], rtol=0, atol=1e-9 * 80.0 / K_N_PER_M
    )


def test_ramp_is_exact_even_with_one_substep() -> None:
    # Ramp response of a second-order system (Ogata, Modern Control Engineering; from memory,
    # checked here at t = 0: x = 0 and x' = 0): for F = r·t,
    # x = r/k·(t − 2ζ/ωn + e^{−ζωn t}((2ζ/ωn) cos ωd t + ((2ζ² − 1)/ωd) sin ωd t)).
    r = 400.0  # N/s
    prog = LoadProgramme((Ramp(0.2, r * 0.2),))
    wn = math.sqrt(K_N_PER_M / M_KG)
    wd = wn * math.sqrt(1 - ZETA**2)
    for oversample in (1, 8):
        run = make_cell(oversample=oversample).generate(prog)
        t = run.time_s
        x_ref = (r / K_N_PER_M) * (
            t
            - 2 * ZETA / wn
            + np.exp(-ZETA * wn * t)
            * (2 * ZETA / wn * np.cos(wd * t) + (2 * ZETA**2 - 1) / wd * np.sin(wd * t))
        )
        # Ramp-invariant discretisation is exact for a linear force at any step size;
        # 1e-11 of the final deflection is float rounding only (measured ≤ 4e-14).
        np.testing.assert_allclose(
            run.true_displacement_m, x_ref, rtol=0, atol=1e-11 * r * 0.2 / K_N_PER_M
        )


def test_seeded_determinism_and_noise_level() -> None:
    prog = LoadProgramme((Hold(10.0, 20.0),))
    noise_m = 5e-8
    a = make_cell(noise_m, seed=7).generate(prog)
    b = make_cell(noise_m, seed=7).generate(prog)
    c = make_cell(noise_m, seed=8).generate(prog)
    np.testing.assert_array_equal(a.counts, b.counts)
    assert np.count_nonzero(a.counts != c.counts) > 0.9 * len(a)
    resid_m = SCALING.to_metres(a.counts) - a.true_displacement_m
    # 20 000 samples: the std estimate has relative spread 1/√(2n) ≈ 0.5 %; 3 % is 6 σ.
    # Quantisation adds res²/12, negligible here (res = 6e-11 m vs 5e-8 m).
    assert np.std(resid_m) == pytest.approx(noise_m, rel=0.03)
    assert abs(np.mean(resid_m)) < 6 * noise_m / math.sqrt(len(a))  # 6 σ of the mean


def test_quantisation_offset_and_clipping() -> None:
    coarse = Scaling(volts_per_count=1e-3, metres_per_volt=1e-4, zero_volts=0.002, adc_bits=12)
    # resolution 1e-7 m; counts = (x/1e-4 + 0.002)/1e-3
    counts, clipped = coarse.to_counts_clipped([0.0, 1.24e-7, 1.6e-7, -3e-7, 1.0, np.nan])
    assert counts.tolist() == [2, 3, 4, -1, 2047, 0]
    assert clipped == 2
    np.testing.assert_allclose(coarse.to_metres([2, 3]), [0.0, 1e-7], rtol=0, atol=1e-20)
    assert coarse.resolution_m == pytest.approx(1e-7, rel=1e-15)
    cell = SimulatedCell(M_KG, K_N_PER_M, ZETA, 0.0, coarse, FS_HZ, zero_offset_m=2e-7)
    run = cell.generate(LoadProgramme((Hold(0.2, 100.0),)))
    assert run.n_clipped > 0 and run.counts.max() == 2047  # 100 N → 2.5e-4 m ≫ 12-bit range
    still = cell.generate(LoadProgramme((Hold(0.05, 0.0),)))
    assert np.all(still.counts == 4)  # offset 2e-7 m = 2 counts, plus zero_volts = 2 counts


def test_run_fields_times_and_lines_decode_back() -> None:
    cell = SimulatedCell(M_KG, K_N_PER_M, ZETA, 5e-8, SCALING, 3000.0, seed=1)
    run = cell.generate(LoadProgramme((Hold(0.1, 10.0), Ramp(0.1, 0.0))))
    assert len(run) == 600
    np.testing.assert_array_equal(run.seq, np.arange(600))
    np.testing.assert_array_equal(run.device_time_us, np.rint(np.arange(600) * 1e6 / 3000.0))
    assert run.true_force_n[0] == 10.0 and run.true_force_n[-1] == pytest.approx(10.0 / 300.0)
    dec = LineDecoder(SCALING)
    out = dec.feed(lines(run, 0, 300) + lines(run, 300))
    np.testing.assert_array_equal(out["counts"], run.counts)
    np.testing.assert_array_equal(out["seq"], run.seq)
    assert dec.lines_malformed == 0 and dec.samples_lost == 0
    with pytest.raises(ValueError):
        run.counts[0] = 1  # read-only arrays


def test_truth_csv(tmp_path: Path) -> None:
    run = make_cell(5e-8).generate(LoadProgramme((Hold(0.05, 10.0),)))
    path = tmp_path / "truth.csv"
    write_truth_csv(run, path)
    text = path.read_text().splitlines()
    assert text[0] == TRUTH_HEADER
    assert text[1] == "time_s [s],force_n [N],displacement_m [m]"
    table = np.loadtxt(path, delimiter=",", skiprows=2)
    np.testing.assert_array_equal(table[:, 0], run.time_s)  # repr round-trips exactly
    np.testing.assert_array_equal(table[:, 1], run.true_force_n)
    np.testing.assert_array_equal(table[:, 2], run.true_displacement_m)


@pytest.mark.parametrize(
    ("kwargs", "match"),
    [
        ({"mass_kg": 0.0}, "mass_kg"),
        ({"stiffness_n_per_m": -1.0}, "stiffness_n_per_m"),
        ({"damping_ratio": -0.1}, "damping_ratio"),
        ({"noise_m": math.nan}, "noise_m"),
        ({"sample_rate_hz": 0.0}, "sample_rate_hz"),
        ({"oversample": 0}, "oversample"),
        ({"seed": -3}, "seed"),
    ],
)
def test_cell_validation(kwargs: dict, match: str) -> None:
    args = {
        "mass_kg": M_KG,
        "stiffness_n_per_m": K_N_PER_M,
        "damping_ratio": ZETA,
        "noise_m": 0.0,
        "scaling": SCALING,
        "sample_rate_hz": FS_HZ,
    }
    args.update(kwargs)
    with pytest.raises(FramingError, match=match):
        SimulatedCell(**args)


def test_scaling_validation() -> None:
    with pytest.raises(FramingError, match="volts_per_count"):
        Scaling(0.0, 1.0)
    with pytest.raises(FramingError, match="metres_per_volt"):
        Scaling(1.0, math.inf)
    with pytest.raises(FramingError, match="adc_bits"):
        Scaling(1.0, 1.0, adc_bits=64)


# ------------------------------------------------------------------ PtyCell
def _read_all(src: SerialSource, n: int, limit_s: float = 5.0) -> np.ndarray:
    blocks, got = [], 0
    deadline = time.monotonic() + limit_s
    while got < n and time.monotonic() < deadline:
        b = src.read_block(0.02)
        blocks.append(b)
        got += b.size
    return concat_blocks(blocks)


@pytest.mark.parametrize("adc_bits", [24, 32])
def test_pty_cell_binary_frames_decode_back_to_the_run(adc_bits: int) -> None:
    # A coarse transducer so that 100 N overdrives the 24-bit ADC: the cell clips and the
    # frames must say so (status bit 0, ADC over-range).
    coarse = Scaling(volts_per_count=20.0 / 2**24, metres_per_volt=1e-6)
    cell = SimulatedCell(M_KG, K_N_PER_M, ZETA, 5e-8, coarse, FS_HZ, seed=2)
    run = cell.generate(LoadProgramme((Hold(0.1, 0.0), Hold(0.1, 100.0))))
    assert run.n_clipped > 0
    with PtyCell(run, speed=10.0, framing=f"binary-{adc_bits}") as pty:
        decoder = BinaryDecoder(coarse, FS_HZ, adc_bits=adc_bits)
        with SerialSource(pty.port_name, 921600, decoder) as src:
            pty.start()
            out = _read_all(src, len(run))
        assert pty.wait(5.0) and pty.error is None
        # 13 or 14 bytes per frame (interfaces: binary frame version 1).
        assert pty.bytes_written == len(run) * (13 if adc_bits == 24 else 14)
    np.testing.assert_array_equal(out["seq"], run.seq)
    np.testing.assert_array_equal(out["counts"], run.counts)
    np.testing.assert_array_equal(out["device_time_s"], run.seq / FS_HZ)
    lo, hi = coarse.count_range
    at_edge = (run.counts <= lo) | (run.counts >= hi)
    assert at_edge.sum() == run.n_clipped
    np.testing.assert_array_equal(run.over_range, at_edge)
    np.testing.assert_array_equal(device_status(out), at_edge.astype(np.uint8))
    assert src.decoder.stats().rejected == 0


def test_pty_cell_port_is_a_stable_link_that_survives_a_disconnect() -> None:
    run = make_cell(5e-8).generate(LoadProgramme((Hold(1.0, 10.0),)))  # 2000 samples
    pty = PtyCell(run, speed=4.0, faults=[Fault("disconnect", 0.4, duration_s=0.05)])
    folder = os.path.dirname(pty.port_name)
    try:
        assert os.path.islink(pty.port_name)
        first_device = pty.device_name
        assert os.path.realpath(pty.port_name) == first_device
        assert first_device.startswith("/dev/")
        src = SerialSource(pty.port_name, 921600, LineDecoder(SCALING)).open()
        pty.start()
        blocks = []
        with pytest.raises(SourceError, match="cannot read"):
            deadline = time.monotonic() + 5.0
            while time.monotonic() < deadline:
                blocks.append(src.read_block(0.02))
        src.close()
        before = concat_blocks(blocks)
        assert before["seq"][-1] == 799  # the port closed just before sample 800 (0.4 s)
        # Reopen the same name: it now leads to the new pseudo-terminal.
        deadline = time.monotonic() + 5.0
        while True:
            try:
                src.open()
                break
            except SourceError:
                assert time.monotonic() < deadline, "the port did not come back"
                time.sleep(0.01)
        with src:
            after = _read_all(src, 1)
            while not pty.finished or after["seq"][-1] < len(run) - 1:
                after = concat_blocks([after, src.read_block(0.02)])
                assert time.monotonic() < deadline + 5.0
        assert os.path.realpath(pty.port_name) == pty.device_name
    finally:
        pty.stop()
    np.testing.assert_array_equal(np.concatenate([before["seq"], after["seq"]]), pty.sent_intact)
    (kind, at_seq, detail), *rest = pty.fault_log
    assert (kind, at_seq, rest) == ("disconnect", 800, [])
    assert "a client reopened it" in detail
    assert after["seq"][0] > 800 and f"seq 800..{after['seq'][0] - 1} never sent" in detail
    assert not os.path.exists(folder)  # stop() removes the private folder


def test_pty_cell_without_a_client_keeps_sample_boundaries_when_dropping() -> None:
    run = make_cell().generate(LoadProgramme((Hold(10.0, 10.0),)))  # 20 000 lines
    with PtyCell(run, speed=1000.0, stall_timeout_s=0.1) as pty:
        pty.start()
        assert pty.wait(10.0)
        # Read what the pty kept: whole lines only, every one of them intact.
        fd = os.open(pty.device_name, os.O_RDONLY | os.O_NONBLOCK | os.O_NOCTTY)
        chunks = []
        try:
            while True:
                try:
                    chunk = os.read(fd, 1 << 16)
                except BlockingIOError:
                    break
                if not chunk:
                    break
                chunks.append(chunk)
        finally:
            os.close(fd)
    data = b"".join(chunks)
    assert pty.bytes_dropped > 0 and pty.bytes_written == len(data)
    assert pty.bytes_written + pty.bytes_dropped == len(lines(run))
    dec = LineDecoder(SCALING)
    out = dec.feed(data)
    assert dec.lines_malformed == 0 and dec.bytes_buffered == 0  # cut on line ends only
    np.testing.assert_array_equal(out["counts"], run.counts[out["seq"]])
    np.testing.assert_array_equal(out["seq"], pty.sent_intact)


def test_pty_cell_framing_and_settings_validation() -> None:
    run = make_cell().generate(LoadProgramme((Hold(0.05, 1.0),)))
    with pytest.raises(FramingError, match="framing="):
        PtyCell(run, framing="ascii")
    with pytest.raises(FramingError, match="reattach_timeout_s"):
        PtyCell(run, reattach_timeout_s=0.0)
    with pytest.raises(FramingError, match="fault_seed"):
        PtyCell(run, fault_seed=-1)
    pty = PtyCell(run, framing="binary-32")
    folder = os.path.dirname(pty.port_name)
    assert os.path.isdir(folder)
    pty.stop()
    pty.stop()  # idempotent
    assert not os.path.exists(folder)


def test_a_run_too_big_for_memory_is_refused_before_any_allocation() -> None:
    # Issue 15: `simulate --rate 1e12` and a 3·10⁵ s hold ended in MemoryError.
    huge = SimulatedCell(M_KG, K_N_PER_M, ZETA, 0.0, SCALING, 1e12)
    with pytest.raises(FramingError, match="at most 50000000 steps"):
        huge.generate(parse_programme("hold 5 1"))
    with pytest.raises(FramingError, match=r"300000 s at .*shorten the programme"):
        make_cell().generate(parse_programme("hold 3e5 1"))
