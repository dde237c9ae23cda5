"""BinaryDecoder, encode_frames and the CRC of docs/binary-frame.md.

The vectorised decoder is checked against `reference_decode`, a deliberately plain
byte-by-byte scan written here from the format document with `struct` and
`binascii.crc_hqx` (Python standard library), sharing no code with `daq.binary`.
"""

from __future__ import annotations

import binascii
import itertools
import re
import struct
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from daq.binary import (
    FRAME_SYNC,
    BinaryDecoder,
    crc16_ccitt_false,
    encode_frames,
    frame_length,
)
from daq.decoding import DecoderStats
from daq.errors import FramingError
from daq.samples import FLAG_GAP_BEFORE, SAMPLE_DTYPE, concat_blocks, device_status
from daq.scaling import Scaling

SCALING = Scaling(volts_per_count=20.0 / 2**24, metres_per_volt=5e-5, zero_volts=0.01)
RATE_HZ = 2000.0
DOC = Path(__file__).resolve().parents[2] / "docs" / "binary-frame.md"
WRAP = 2**32


def reference_decode(stream: bytes, bits: int) -> dict:
    """Scan `stream` one position at a time, as the format document describes."""
    length = 2 + 1 + 4 + bits // 8 + 1 + 2
    pos, rows, starts = 0, [], []
    rejected = discarded = lost = restarts = 0
    in_run = False
    last_raw = last_seq = None
    while pos + length <= len(stream):
        fr = stream[pos : pos + length]
        good = (
            fr[0] == 0xA9
            and fr[1] == 0x5C
            and fr[2] == bits
            and binascii.crc_hqx(fr[2:-2], 0xFFFF) == struct.unpack(">H", fr[-2:])[0]
        )
        if not good:
            rejected += not in_run
            in_run = True
            discarded += 1
            pos += 1
            continue
        (raw,) = struct.unpack_from("<I", fr, 3)
        counts = int.from_bytes(fr[7 : 7 + bits // 8], "little", signed=True)
        status = fr[-3]
        flag = 0
        if last_raw is None:
            seq = raw
        else:
            step = (raw - last_raw) % WRAP
            if 0 < step < WRAP // 2:
                seq = last_seq + step
                if step > 1:
                    lost += step - 1
                    flag = FLAG_GAP_BEFORE
            else:
                seq = raw
                restarts += 1
                flag = FLAG_GAP_BEFORE
        rows.append((seq, counts, flag | (status << 8)))
        starts.append(pos)
        last_raw, last_seq = raw, seq
        in_run = False
        pos += length
    return {
        "rows": rows,
        "starts": starts,
        "stats": DecoderStats(len(rows), rejected, discarded, lost, restarts),
        "tail": len(stream) - pos,
    }


def feed_chunks(dec: BinaryDecoder, stream: bytes, cuts: list[int]) -> np.ndarray:
    edges = [0, *cuts, len(stream)]
    return concat_blocks([dec.feed(stream[a:b]) for a, b in itertools.pairwise(edges)])


def rows_of(block: np.ndarray) -> list[tuple[int, int, int]]:
    return list(
        zip(block["seq"].tolist(), block["counts"].tolist(), block["flags"].tolist(), strict=True)
    )


def assert_matches_reference(dec: BinaryDecoder, block: np.ndarray, ref: dict) -> None:
    assert block.dtype == SAMPLE_DTYPE
    assert rows_of(block) == ref["rows"]
    # device_time_s = seq / rate (format document); same float64 division on both sides.
    assert block["device_time_s"].tolist() == [r[0] / RATE_HZ for r in ref["rows"]]
    assert dec.stats() == ref["stats"]
    assert dec.bytes_buffered == ref["tail"]


# ------------------------------------------------------------------------------ CRC
def test_crc_check_value_from_catalogue() -> None:
    # Check value of CRC-16/CCITT-FALSE for "123456789": 0x29B1 (CRC RevEng catalogue).
    assert crc16_ccitt_false(b"123456789") == 0x29B1


def test_crc_equals_binascii_crc_hqx_on_random_data() -> None:
    # binascii.crc_hqx(data, 0xFFFF) is CRC-16/CCITT-FALSE (Python standard library).
    rng = np.random.default_rng(11)
    for size in [0, 1, 2, 3, 9, 11, 12, 100, 1000]:
        data = rng.integers(0, 256, size, dtype=np.uint8).tobytes()
        assert crc16_ccitt_false(data) == binascii.crc_hqx(data, 0xFFFF)
        assert crc16_ccitt_false(bytearray(data)) == crc16_ccitt_false(memoryview(data))
    with pytest.raises(FramingError, match="not bytes"):
        crc16_ccitt_false("123")  # type: ignore[arg-type]


@pytest.mark.parametrize("bits", [24, 32])
def test_every_encoded_frame_has_the_stdlib_crc(bits: int) -> None:
    rng = np.random.default_rng(bits)
    lo, hi = -(2 ** (bits - 1)), 2 ** (bits - 1)
    n = 300
    data = encode_frames(
        rng.integers(0, WRAP, n), rng.integers(lo, hi, n), rng.integers(0, 256, n), adc_bits=bits
    )
    length = frame_length(bits)
    assert len(data) == n * length
    for i in range(n):
        fr = data[i * length : (i + 1) * length]
        assert fr[:2] == FRAME_SYNC and fr[2] == bits
        # CRC over type..status, sent big-endian (format document; binascii.crc_hqx).
        assert binascii.crc_hqx(fr[2:-2], 0xFFFF) == int.from_bytes(fr[-2:], "big")


def test_frame_length() -> None:
    # 2 sync + type + 4 seq + 3 or 4 counts + status + 2 CRC (format document).
    assert frame_length(24) == 13 and frame_length(32) == 14
    with pytest.raises(FramingError, match="adc_bits=16"):
        frame_length(16)


# ------------------------------------------------------------------ encode / decode
@pytest.mark.parametrize("bits", [24, 32])
def test_round_trip_extremes_status_and_scaling(bits: int) -> None:
    lo, hi = -(2 ** (bits - 1)), 2 ** (bits - 1) - 1
    counts = np.array([lo, hi, -1, 0, 1, lo + 1, hi - 1, -123456])
    seq = np.arange(counts.size) + 7
    status = np.array([0, 1, 2, 4, 7, 255, 128, 0])
    dec = BinaryDecoder(SCALING, RATE_HZ, adc_bits=bits)
    out = dec.feed(encode_frames(seq, counts, status, adc_bits=bits), host_time_s=3.25)
    assert out["seq"].tolist() == seq.tolist()
    assert out["counts"].tolist() == counts.tolist()
    assert device_status(out).tolist() == status.tolist()
    assert np.all(out["flags"] & 0xFF == 0)
    assert np.all(out["host_time_s"] == 3.25)
    np.testing.assert_array_equal(out["device_time_s"], seq / RATE_HZ)
    # The transducer chain of the format documents, written out here independently.
    expected_m = (counts * (20.0 / 2**24) - 0.01) * 5e-5
    np.testing.assert_allclose(out["displacement_m"], expected_m, rtol=1e-15, atol=0)
    assert dec.stats() == DecoderStats(samples_ok=counts.size)


def test_24_bit_frames_ignored_by_32_bit_decoder_and_back() -> None:
    f24 = encode_frames([1, 2, 3], [4, 5, 6], adc_bits=24)
    f32 = encode_frames([1, 2, 3], [4, 5, 6], adc_bits=32)
    dec32 = BinaryDecoder(SCALING, RATE_HZ, adc_bits=32)
    assert dec32.feed(f24).size == 0
    assert dec32.stats().rejected == 1 and dec32.stats().bytes_discarded == len(f24) - 13
    dec24 = BinaryDecoder(SCALING, RATE_HZ, adc_bits=24)
    assert dec24.feed(f32 + f24)["seq"].tolist() == [1, 2, 3]
    assert dec24.stats().bytes_discarded == len(f32)


def test_seq_wraps_across_2_to_the_32() -> None:
    raw = np.arange(WRAP - 5, WRAP + 5)
    data = encode_frames(raw, np.zeros(raw.size, dtype=np.int64))
    assert struct.unpack_from("<I", data, 13 * 5 + 3)[0] == 0  # the wire value wrapped
    dec = BinaryDecoder(SCALING, RATE_HZ)
    out = dec.feed(data)
    assert out["seq"].tolist() == raw.tolist()  # unwrapped into int64
    assert np.all(out["flags"] == 0)
    # A gap across the wrap: from 2^32 − 1 straight to 2 (mod 2^32) loses 0, 1.
    dec = BinaryDecoder(SCALING, RATE_HZ)
    out = dec.feed(encode_frames([WRAP - 1, 2], [0, 0]))
    assert out["seq"].tolist() == [WRAP - 1, WRAP + 2]
    assert out["flags"].tolist() == [0, FLAG_GAP_BEFORE]
    assert dec.stats().samples_lost == 2


def test_restart_duplicate_and_gap_across_feeds() -> None:
    dec = BinaryDecoder(SCALING, RATE_HZ)
    a = dec.feed(encode_frames([100, 101, 104], [0, 0, 0]))
    b = dec.feed(encode_frames([105, 3, 4, 4], [0, 0, 0, 0]))
    assert a["flags"].tolist() == [0, 0, FLAG_GAP_BEFORE]
    assert b["flags"].tolist() == [0, FLAG_GAP_BEFORE, 0, FLAG_GAP_BEFORE]
    assert b["seq"].tolist() == [105, 3, 4, 4]  # after a restart seq takes the raw value
    assert dec.stats().samples_lost == 2
    assert dec.stats().seq_restarts == 2  # back to 3, then 4 repeated
    assert dec.last_seq == 4


def test_worked_example_in_the_document_matches_the_encoder() -> None:
    text = DOC.read_text(encoding="utf-8")
    section = text.split("## Worked example", 1)[1]
    blocks = re.findall(r"```text\n(.*?)```", section, flags=re.S)
    frames = [bytes.fromhex(b.strip()) for b in blocks if re.fullmatch(r"[0-9a-f ]+\s*", b)]
    assert len(frames) == 2
    assert frames[0] == encode_frames([1000], [-123456], 0, adc_bits=24)
    assert frames[1] == encode_frames([1000], [-123456], 0, adc_bits=32)
    stated = [int(v, 16) for v in re.findall(r"the CRC is 0x([0-9A-F]{4})", section)]
    assert stated == [int.from_bytes(f[-2:], "big") for f in frames]
    # The stated CRCs, recomputed with the standard library.
    assert stated == [binascii.crc_hqx(f[2:-2], 0xFFFF) for f in frames]
    out = BinaryDecoder(SCALING, 1000.0).feed(frames[0])
    assert (out["seq"][0], out["counts"][0], out["device_time_s"][0]) == (1000, -123456, 1.0)


# ---------------------------------------------------------------- cuts and garbage
def make_stream(n: int, seed: int, bits: int = 24) -> bytes:
    """n frames with garbage, a corrupted and a truncated frame, a gap and a restart."""
    rng = np.random.default_rng(seed)
    seq = np.arange(n, dtype=np.int64) + WRAP - n // 2  # crosses the wrap half way
    seq[n // 3 :] += 4  # a gap
    seq[2 * n // 3 :] -= 10_000  # a restart
    lo, hi = -(2 ** (bits - 1)), 2 ** (bits - 1)
    length = frame_length(bits)
    frames = encode_frames(seq, rng.integers(lo, hi, n), rng.integers(0, 8, n), adc_bits=bits)
    parts = []
    for i in range(n):
        fr = frames[i * length : (i + 1) * length]
        r = rng.random()
        if r < 0.02:
            fr = fr[:5] + bytes([fr[5] ^ 0x10]) + fr[6:]
        elif r < 0.04:
            fr = fr[:8] + fr[9:]
        elif r < 0.08:
            fr = rng.integers(0, 256, rng.integers(1, 30), dtype=np.uint8).tobytes() + fr
        elif r < 0.09:
            fr = FRAME_SYNC + bytes([bits]) + fr
        parts.append(fr)
    return b"".join(parts)


@pytest.mark.parametrize("bits", [24, 32])
def test_whole_byte_by_byte_and_random_cuts_agree_with_reference(bits: int) -> None:
    stream = make_stream(400, seed=5, bits=bits)
    rng = np.random.default_rng(6)
    cut_sets = [
        [],
        list(range(1, len(stream))),
        sorted(rng.choice(np.arange(1, len(stream)), size=60, replace=False).tolist()),
    ]
    ref = reference_decode(stream, bits)
    assert ref["stats"].seq_restarts >= 1 and ref["stats"].samples_lost >= 4
    assert ref["stats"].rejected > 10  # the stream really exercises resynchronisation
    for cuts in cut_sets:
        dec = BinaryDecoder(SCALING, RATE_HZ, adc_bits=bits)
        assert_matches_reference(dec, feed_chunks(dec, stream, cuts), ref)


def test_frame_starting_inside_a_failed_candidate_is_found() -> None:
    good = encode_frames([5, 6], [7, 8])
    # A sync, type and part of a frame, then a real frame starting 4 bytes later:
    # the candidate at 0 fails its CRC and must not swallow the real frame.
    stream = FRAME_SYNC + b"\x18\x00" + good
    dec = BinaryDecoder(SCALING, RATE_HZ)
    out = dec.feed(stream)
    assert out["seq"].tolist() == [5, 6]
    assert dec.stats() == DecoderStats(samples_ok=2, rejected=1, bytes_discarded=4)


def test_discard_partial_keeps_sequence_and_counts_the_gap() -> None:
    data = encode_frames([1, 2, 3, 4], [0, 0, 0, 0])
    dec = BinaryDecoder(SCALING, RATE_HZ)
    assert dec.feed(data[:20])["seq"].tolist() == [1]
    assert dec.bytes_buffered == 7
    assert dec.discard_partial() == 7
    assert dec.bytes_buffered == 0
    out = dec.feed(data[39:])  # frame 4 after a reconnect
    assert out["seq"].tolist() == [4] and out["flags"].tolist() == [FLAG_GAP_BEFORE]
    assert dec.stats() == DecoderStats(samples_ok=2, bytes_discarded=7, samples_lost=2)
    dec.reset()
    assert dec.stats() == DecoderStats() and dec.last_seq is None


intact_piece = st.tuples(st.just("frame"), st.sampled_from([1, 1, 1, 1, 2, 7]))
pieces = st.one_of(
    intact_piece,
    intact_piece,  # listed three times: most of a real stream is intact frames
    intact_piece,
    st.tuples(st.just("flip"), st.integers(0, 13), st.integers(1, 255)),
    st.tuples(st.just("cut"), st.integers(0, 12)),
    st.tuples(st.just("garbage"), st.binary(min_size=1, max_size=30)),
    st.tuples(
        st.just("garbage"),
        st.sampled_from([b"\xa9", b"\xa9\x5c", b"\xa9\x5c\x18", b"\xa9\x5c\x20", b"\x5c"]),
    ),
    st.tuples(st.just("restart"), st.integers(1000, 2**30)),
)


@settings(
    max_examples=200,
    deadline=None,
    derandomize=True,
    suppress_health_check=[HealthCheck.too_slow],
)
@given(
    parts=st.lists(pieces, min_size=8, max_size=40),
    start=st.sampled_from([0, 1000, WRAP - 3]),
    bits=st.sampled_from([24, 32]),
    cut_fracs=st.lists(st.floats(0, 1), max_size=8),
    values=st.randoms(use_true_random=False),
)
def test_fuzz_garbage_between_frames(parts, start, bits, cut_fracs, values) -> None:
    length = frame_length(bits)
    lo, hi = -(2 ** (bits - 1)), 2 ** (bits - 1) - 1
    stream = b""
    intact: list[tuple[int, int, int, int]] = []  # (offset, raw seq, counts, status)
    sent = start - 1
    lost = restarts = 0
    last_intact = None
    restart_pending = False
    for kind, *arg in parts:
        if kind == "garbage":
            stream += arg[0]
            continue
        if kind == "restart":
            if last_intact is not None:
                sent = last_intact - arg[0]  # well behind the last sample that got through
                restart_pending = True
            continue
        sent += arg[0] if kind == "frame" else 1
        raw = sent % WRAP
        counts, status = values.randint(lo, hi), values.randint(0, 255)
        fr = encode_frames([raw], [counts], status, adc_bits=bits)
        if kind == "flip":
            i = arg[0] % length
            fr = fr[:i] + bytes([fr[i] ^ arg[1]]) + fr[i + 1 :]
        elif kind == "cut":
            fr = fr[: arg[0]] + fr[arg[0] + 1 :]
        else:
            if last_intact is not None:
                if restart_pending:
                    restarts += 1
                else:
                    lost += (raw - last_intact) % WRAP - 1
            intact.append((len(stream), raw, counts, status))
            last_intact, restart_pending = raw, False
        stream += fr

    cuts = sorted({int(f * len(stream)) for f in cut_fracs} - {0, len(stream)})
    dec = BinaryDecoder(SCALING, RATE_HZ, adc_bits=bits)
    block = feed_chunks(dec, stream, cuts)  # must never raise
    ref = reference_decode(stream, bits)
    assert_matches_reference(dec, block, ref)

    # Every intact frame is decoded, in order, unless a frame that starts before it
    # and overlaps it was accepted (only possible if garbage or a damaged frame formed
    # a valid frame by chance, i.e. sync, type and CRC all matched).
    accepted = ref["starts"]
    offsets = [o for o, *_ in intact]
    for off in offsets:
        assert off in accepted or any(off - length < p < off for p in accepted)
    by_start = dict(zip(accepted, ref["rows"], strict=True))
    for off, raw, counts, status in intact:
        if off in by_start:
            seq, got_counts, flags = by_start[off]
            assert (seq % WRAP, got_counts, flags >> 8) == (raw, counts, status)
    if accepted == offsets:  # no chance frames: the counters are exactly what we made
        assert dec.stats().samples_lost == lost
        assert dec.stats().seq_restarts == restarts


@settings(max_examples=300, deadline=None, derandomize=True)
@given(
    chunks=st.lists(st.binary(max_size=200), max_size=20),
    bits=st.sampled_from([24, 32]),
)
def test_fuzz_arbitrary_bytes_never_raise(chunks, bits) -> None:
    dec = BinaryDecoder(SCALING, RATE_HZ, adc_bits=bits)
    total = 0
    for chunk in chunks:
        out = dec.feed(chunk, host_time_s=1.0)
        assert out.dtype == SAMPLE_DTYPE
        total += out.size
        assert dec.bytes_buffered < frame_length(bits)
    stats = dec.stats()
    assert stats.samples_ok == total
    # Every byte is in a frame, thrown away, or still buffered.
    assert total * frame_length(bits) + stats.bytes_discarded + dec.bytes_buffered == sum(
        len(c) for c in chunks
    )


# ------------------------------------------------------------------------- misuse
def test_encode_frames_misuse_names_the_argument() -> None:
    with pytest.raises(FramingError, match="counts span"):
        encode_frames([0], [2**23])
    with pytest.raises(FramingError, match="counts span"):
        encode_frames([0], [-(2**31) - 1], adc_bits=32)
    with pytest.raises(FramingError, match="status"):
        encode_frames([0], [0], 256)
    with pytest.raises(FramingError, match="status"):
        encode_frames([0, 1], [0, 0], [1, 2, 3])
    with pytest.raises(FramingError, match="seq"):
        encode_frames([0.5], [0])
    with pytest.raises(FramingError, match="counts"):
        encode_frames([0], [1.5])
    with pytest.raises(FramingError, match="shape"):
        encode_frames([0, 1], [0])
    with pytest.raises(FramingError, match="adc_bits"):
        encode_frames([0], [0], adc_bits=16)
    assert encode_frames([], []) == b""
    # seq is taken mod 2^32, negative values included.
    assert encode_frames([-1], [0]) == encode_frames([WRAP - 1], [0])


def test_decoder_misuse_raises_framing_error() -> None:
    with pytest.raises(FramingError, match="scaling"):
        BinaryDecoder(1.0, RATE_HZ)  # type: ignore[arg-type]
    for bad in [0.0, -5.0, float("nan"), float("inf"), "fast", True]:
        with pytest.raises(FramingError, match="sample_rate_hz"):
            BinaryDecoder(SCALING, bad)  # type: ignore[arg-type]
    with pytest.raises(FramingError, match="adc_bits"):
        BinaryDecoder(SCALING, RATE_HZ, adc_bits=20)
    dec = BinaryDecoder(SCALING, RATE_HZ)
    with pytest.raises(FramingError, match="not bytes"):
        dec.feed("abc")  # type: ignore[arg-type]
    with pytest.raises(FramingError, match="host_time_s"):
        dec.feed(b"", host_time_s="now")  # type: ignore[arg-type]
    data = encode_frames([1, 2], [3, 4])
    assert dec.feed(bytearray(data[:13]))["seq"].tolist() == [1]
    assert dec.feed(memoryview(data)[13:])["seq"].tolist() == [2]


def test_overlapping_valid_frames_earliest_wins() -> None:
    # F1's seq bytes hold "A9 5C 18 ..", so a second valid frame F2 starts 3 bytes into
    # F1; F3 starts inside F2 (at 15) but after F1. The scan of the format document
    # takes F1, skips F2 (overlaps F1) and must still take F3 (overlaps only F2).
    seq1 = int.from_bytes(b"\xa9\x5c\x18\x07", "little")
    found = None
    for counts1 in range(-50, 50):
        f1 = encode_frames([seq1], [counts1])
        for status2 in range(256):
            crc2 = binascii.crc_hqx(f1[5:13] + bytes([status2]), 0xFFFF).to_bytes(2, "big")
            if crc2[1] == 0xA9:
                found = (counts1, f1, status2, crc2)
                break
        if found:
            break
    assert found is not None, "no overlapping layout found"
    counts1, f1, status2, crc2 = found
    f3 = encode_frames([seq1 + 5], [77])
    stream = f1 + bytes([status2]) + crc2 + f3[1:]
    ref = reference_decode(stream, 24)
    assert ref["starts"] == [0, 15]
    assert reference_decode(stream[3:16], 24)["starts"] == [0]  # F2 is a valid frame
    dec = BinaryDecoder(SCALING, RATE_HZ)
    out = dec.feed(stream)
    assert_matches_reference(dec, out, ref)
    assert out["counts"].tolist() == [counts1, 77]
    assert dec.stats().bytes_discarded == 2 and dec.stats().rejected == 1
