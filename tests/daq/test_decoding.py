"""make_decoder, the Decoder protocol and DecoderStats."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest

from daq.binary import BinaryDecoder, encode_frames
from daq.decoding import FRAMINGS, Decoder, DecoderStats, make_decoder
from daq.errors import FramingError
from daq.lines import LineDecoder, encode_lines
from daq.samples import SAMPLE_DTYPE
from daq.scaling import Scaling

SCALING = Scaling(volts_per_count=20.0 / 2**24, metres_per_volt=5e-5)
RATE_HZ = 1000.0


def sample_bytes(framing: str) -> bytes:
    seq, counts = np.array([10, 11, 13]), np.array([-5, 0, 9])
    if framing == "ascii-lines":
        return encode_lines(seq, seq * 1000, counts)
    return encode_frames(seq, counts, adc_bits=int(framing[-2:]))


@pytest.mark.parametrize("framing", FRAMINGS)
def test_each_framing_builds_a_working_decoder(framing: str) -> None:
    dec = make_decoder(framing, SCALING, RATE_HZ)
    assert isinstance(dec, Decoder)
    expected_type = LineDecoder if framing == "ascii-lines" else BinaryDecoder
    assert type(dec) is expected_type
    data = sample_bytes(framing)
    out = dec.feed(data[:-3], host_time_s=2.0)
    out = np.concatenate([out, dec.feed(data[-3:], host_time_s=2.5)])
    assert out.dtype == SAMPLE_DTYPE
    assert out["seq"].tolist() == [10, 11, 13]
    assert out["counts"].tolist() == [-5, 0, 9]
    # 1 ms per sample either way: µs column of the lines, seq / rate for the frames.
    np.testing.assert_allclose(out["device_time_s"], [0.010, 0.011, 0.013], rtol=1e-15)
    assert dec.stats() == DecoderStats(samples_ok=3, samples_lost=1)
    dec.feed(data[:5])
    assert dec.discard_partial() == 5
    dec.reset()
    assert dec.stats() == DecoderStats()


def test_binary_width_follows_the_framing_name() -> None:
    dec = make_decoder("binary-32", SCALING, RATE_HZ)
    assert isinstance(dec, BinaryDecoder) and dec.adc_bits == 32 and dec.frame_length == 14


def test_line_options_are_passed_through() -> None:
    dec = make_decoder("ascii-lines", SCALING, 200.0, delimiter=b";", columns=("counts", "seq"))
    out = dec.feed(b"-4;7\n5;8\n")
    assert out["seq"].tolist() == [7, 8]
    assert out["device_time_s"].tolist() == [7 / 200.0, 8 / 200.0]  # seq / rate, no clock


def test_unknown_framing_and_bad_settings_raise_framing_error() -> None:
    with pytest.raises(FramingError, match="'binary-16'"):
        make_decoder("binary-16", SCALING, RATE_HZ)
    with pytest.raises(FramingError, match="'ascii'"):
        make_decoder("ascii", SCALING, RATE_HZ)
    with pytest.raises(FramingError, match="sample_rate_hz"):
        make_decoder("binary-24", SCALING, 0.0)
    with pytest.raises(FramingError, match="sample_rate_hz"):
        make_decoder("ascii-lines", SCALING, -1.0)
    with pytest.raises(FramingError, match="columns"):
        make_decoder("ascii-lines", SCALING, RATE_HZ, columns=("seq",))


def test_decoder_stats_is_a_frozen_value() -> None:
    stats = DecoderStats(1, 2, 3, 4, 5)
    assert dataclasses.astuple(stats) == (1, 2, 3, 4, 5)
    with pytest.raises(dataclasses.FrozenInstanceError):
        stats.samples_ok = 9  # type: ignore[misc]
