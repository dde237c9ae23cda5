"""Dashboard pieces without Qt: the trace ring buffer and the min/max envelopes."""

from __future__ import annotations

import os
from typing import Any

import numpy as np
import pytest

from ui.dashboard.buffer import PROCESS_CONTEXT, TRACE_FIELDS, TraceBuffer
from ui.dashboard.envelope import band_envelope, bin_edges, line_envelope
from ui.dashboard.worker import StatusBox, WorkerStatus


def _cols(t: np.ndarray) -> np.ndarray:
    return np.vstack([t, 2 * t, 3 * t, 0.1 + 0 * t, 4 * t])


def test_ring_buffer_keeps_the_latest_samples_in_order_across_wraps() -> None:
    buf = TraceBuffer(1000)
    t = np.arange(3500) * 1e-3
    rng = np.random.default_rng(2)
    i = 0
    while i < t.size:  # random block sizes, some larger than the capacity
        n = int(rng.integers(1, 1400))
        buf.append(_cols(t[i : i + n]))
        i += n
    assert buf.total == 3500
    last = buf.latest(1000)
    np.testing.assert_array_equal(last, _cols(t[-1000:]))
    np.testing.assert_array_equal(buf.latest(10), _cols(t[-10:]))
    win = buf.window(0.2)  # [3.299, 3.499] s
    np.testing.assert_array_equal(win[0], t[(t >= 3.499 - 0.2 - 1e-12)])
    assert win.shape[0] == len(TRACE_FIELDS)
    np.testing.assert_array_equal(buf.window(0.05, end_s=2.6)[0], t[(t >= 2.55) & (t <= 2.6)])


def _write_blocks(buffer: TraceBuffer, start: int, stop: int) -> None:
    """Run in a spawned process: append samples start..stop-1 in blocks of 700."""
    t = np.arange(start, stop) * 1e-3
    for i in range(0, t.size, 700):
        buffer.append(_cols(t[i : i + 700]))


def test_ring_buffer_written_by_another_process_is_seen_here() -> None:
    # The dashboard's worker is a separate process: what it appends must land in this
    # process's buffer (shared memory), not in a copy.
    buf = TraceBuffer(2000)
    buf.append(_cols(np.arange(0, 100) * 1e-3))
    proc = PROCESS_CONTEXT.Process(target=_write_blocks, args=(buf, 100, 5000))
    proc.start()
    proc.join(60)
    assert proc.exitcode == 0
    assert buf.total == 5000
    np.testing.assert_array_equal(buf.latest(2000), _cols(np.arange(3000, 5000) * 1e-3))


def _die_holding(lock: Any) -> None:
    """Run in a spawned process: take the lock and end without releasing it."""
    lock.acquire()
    os._exit(0)


def test_a_lock_left_held_by_a_dead_process_blocks_nobody() -> None:
    # A worker that dies while appending leaves the shared lock held. The window must
    # not hang on it: reads return no samples, appends are skipped, the box says nothing new.
    buf = TraceBuffer(100)
    buf.append(_cols(np.arange(10) * 1e-3))
    box = StatusBox()
    box.put(WorkerStatus(state="connected"))
    for lock in (buf._lock, box._lock):
        proc = PROCESS_CONTEXT.Process(target=_die_holding, args=(lock,))
        proc.start()
        proc.join(60)
        assert proc.exitcode == 0
    assert buf.window(1.0).shape == (len(TRACE_FIELDS), 0)
    assert buf.latest(5).shape == (len(TRACE_FIELDS), 0)
    assert buf.append(_cols(np.arange(10, 20) * 1e-3)) is False
    assert box.get() == (1, None)
    box.put(WorkerStatus(state="stopped"))  # dropped, not hanging


def test_status_box_hands_over_the_latest_status_only() -> None:
    box = StatusBox()
    version, status = box.get()
    assert status is None  # nothing put yet
    box.put(WorkerStatus(state="connecting"))
    latest = WorkerStatus(
        state="connected", samples=7, force_n=1.5, alarms=(("a", "b", "c", False),)
    )
    box.put(latest)
    version, status = box.get(version)
    assert repr(status) == repr(latest)  # repr: the NaN fields compare equal
    assert box.get(version) == (version, None)  # nothing newer


def test_status_box_sheds_oldest_messages_when_full_and_refuses_what_cannot_fit() -> None:
    box = StatusBox(size_bytes=4096)
    messages = tuple(f"message {i:03d} " + "x" * 80 for i in range(100))  # ~9 kB
    box.put(WorkerStatus(messages=messages, message_total=100))
    _, status = box.get()
    assert status is not None and 0 < len(status.messages) < 100
    assert status.messages == messages[-len(status.messages) :]  # the newest kept, in order
    assert status.message_total == 100
    with pytest.raises(ValueError, match="does not fit"):
        StatusBox(size_bytes=64).put(WorkerStatus(error="e" * 200))


def test_line_envelope_keeps_every_extreme() -> None:
    # 100 k samples of noise with one single-sample spike: 500 columns must still show
    # the spike and the overall extremes exactly (peak-preserving decimation).
    rng = np.random.default_rng(4)
    t = np.arange(100_000) * 1e-4
    y = rng.normal(0.0, 1.0, t.size)
    y[54_321] = 25.0
    x, e = line_envelope(t, y, 0.0, t[-1], 500)
    assert x.size <= 1000 and e.max() == 25.0 and e.min() == y.min()
    # Column by column: the envelope's min and max equal those of the raw samples.
    edges = bin_edges(t, 0.0, t[-1], 500)
    for j in (0, 17, 271, 499):
        seg = y[edges[j] : edges[j + 1]]
        assert e[2 * j] == seg.min() and e[2 * j + 1] == seg.max()
    # Sparse windows are drawn as they are.
    _, ys = line_envelope(t[:300], y[:300], 0.0, t[299], 500)
    np.testing.assert_array_equal(ys, y[:300])


def test_band_envelope_bounds_the_band_and_skips_gaps() -> None:
    t = np.concatenate([np.arange(0, 1, 1e-3), np.arange(2, 3, 1e-3)])  # a 1 s gap
    f = np.sin(t * 7)
    u = 0.05 + 0.01 * np.cos(t)
    x, lo, hi = band_envelope(t, f - u, f + u, 0.0, 3.0, 300)
    assert x.size < 300  # the empty columns of the gap are left out
    assert np.all(lo <= hi)
    assert lo.min() == pytest.approx((f - u).min()) and hi.max() == pytest.approx((f + u).max())


def test_since_hands_each_sample_over_once_and_only_what_is_held() -> None:
    buf = TraceBuffer(1000)
    t = np.arange(5000) * 1e-3
    rng = np.random.default_rng(5)
    seen, total, i = [], 0, 0
    while i < t.size:
        n = int(rng.integers(1, 300))
        buf.append(_cols(t[i : i + n]))
        i += n
        got, total = buf.since(total)
        seen.append(got[0])
    np.testing.assert_array_equal(np.concatenate(seen), t)
    assert total == 5000
    # More appended than the buffer holds: only the held (latest) samples come back.
    buf.append(_cols(t[-1] + 1e-3 * np.arange(1, 1501)))
    got, total = buf.since(total)
    np.testing.assert_array_equal(got[0], t[-1] + 1e-3 * np.arange(501, 1501))
    # With a span: only samples within span_s of the newest.
    got, _ = buf.since(0, span_s=0.0995)
    np.testing.assert_allclose(got[0], t[-1] + 1e-3 * np.arange(1401, 1501), rtol=0, atol=1e-12)


def test_running_envelope_equals_a_column_by_column_reduction() -> None:
    # Reference: for each column [j·w, (j+1)·w) with samples, the min and max of its
    # finite values, computed one column at a time (the definition, written plainly).
    from ui.dashboard.envelope import RunningEnvelope

    rng = np.random.default_rng(6)
    t = np.cumsum(rng.uniform(0.5e-4, 1.5e-4, 40_000))
    t = np.concatenate([t[:15_000], t[25_000:] + 0.5])  # a 0.5 s gap in the data
    values = rng.normal(0.0, 1.0, (2, t.size))
    values[0, rng.integers(0, t.size, 200)] = np.nan  # lost values in one trace
    values[1, 5000] = 40.0  # a single-sample spike
    w, span = 1e-3, 1.2
    env = RunningEnvelope(w, span)
    i = 0
    while i < t.size:  # blocks as the worker hands them over
        n = int(rng.integers(1, 900))
        env.add(t[i : i + n], values[:, i : i + n])
        i += n
    mid, lo, hi = env.columns()
    col = np.floor(t / w).astype(np.int64)
    first = int(np.floor((t[-1] - span) / w))
    wanted = np.unique(col[col >= first])
    np.testing.assert_allclose(mid, (wanted + 0.5) * w, rtol=0, atol=1e-12)
    for j, c in enumerate(wanted):
        inside = values[:, col == c]
        for k in range(2):
            finite = inside[k][np.isfinite(inside[k])]
            if finite.size:
                assert lo[k, j] == finite.min() and hi[k, j] == finite.max()
            else:
                assert np.isnan(lo[k, j]) and np.isnan(hi[k, j])
    # The whole history, kept with a long span, still shows the spike and the gap.
    env_all = RunningEnvelope(w, 100.0)
    env_all.add(t, values)
    mid_all, _, hi_all = env_all.columns()
    assert np.nanmax(hi_all[1]) == 40.0
    assert np.max(np.diff(mid_all)) > 0.5  # no columns inside the gap
    with pytest.raises(ValueError, match="time goes back"):
        env_all.add(t[:10], values[:, :10])
