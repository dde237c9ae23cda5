"""Measured sample rate of a stream, from host receive times and sequence numbers.

A device clock and the host clock never agree exactly. `RateMeter` watches the blocks a
reader hands over and estimates how many samples per second of host time actually
arrive, and how far that is from the nominal rate, in parts per million (ppm).

Method: each block is reduced to *arrival points* — for every run of samples that share
one ``host_time_s`` (they arrived in one read), the last sample's ``(host_time_s, seq)``.
The rate is the sequence span divided by the host-time span between the oldest and the
newest point kept in a sliding window. Because only whole reads are compared, a read that
brings many samples at once does not bias the estimate, and lost samples do not either
(``seq`` keeps counting on the device).

How much data it needs: `rate_hz` is None until the kept points span at least
`min_span_s` of host time (default: half the window, 5 s for the default 10 s window).
The error of one estimate is at most (spread of the read latency) / (time span), e.g.
1 ms of latency jitter over a 10 s span gives up to 100 ppm; a longer window gives a
finer drift estimate.
"""

from __future__ import annotations

import math
from collections import deque

import numpy as np

from daq.errors import FramingError

__all__ = ["RateMeter"]


def _positive(name: str, value: object) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float, np.integer, np.floating)):
        raise FramingError(f"RateMeter: {name}={value!r} is not a number; give seconds or Hz > 0")
    v = float(value)
    if not (math.isfinite(v) and v > 0.0):
        raise FramingError(f"RateMeter: {name}={value!r} must be a finite number > 0")
    return v


class RateMeter:
    """Sliding-window estimate of the received sample rate and its drift.

    Args:
        nominal_rate_hz: the rate the device is set to, Hz (> 0), or None to measure the
            rate only (then `drift_ppm` is always None).
        window_s: host time covered by the window, s (> 0).
        min_span_s: host-time span needed before an estimate is given, s
            (0 < min_span_s ≤ window_s; default window_s / 2).

    The meter is not thread-safe; the serial reader guards it with its own lock.
    """

    def __init__(
        self,
        nominal_rate_hz: float | None,
        window_s: float = 10.0,
        *,
        min_span_s: float | None = None,
    ) -> None:
        self.nominal_rate_hz = (
            None if nominal_rate_hz is None else _positive("nominal_rate_hz", nominal_rate_hz)
        )
        self.window_s = _positive("window_s", window_s)
        span = self.window_s / 2.0 if min_span_s is None else _positive("min_span_s", min_span_s)
        if span > self.window_s:
            raise FramingError(
                f"RateMeter: min_span_s={min_span_s!r} exceeds window_s={window_s!r}; "
                "give a span no longer than the window"
            )
        self.min_span_s = span
        self._points: deque[tuple[float, int]] = deque()
        self.restarts = 0

    def reset(self) -> None:
        """Forget every point (the next estimate needs `min_span_s` of new data)."""
        self._points.clear()

    def update(self, block: np.ndarray) -> None:
        """Add a block of samples (`SAMPLE_DTYPE`, shape (n,)); NaN host times are skipped.

        A sequence number that does not increase, or a host time that goes backwards,
        starts the window afresh (device restart or clock change); `restarts` counts it.
        """
        if block.size == 0:
            return
        host = np.asarray(block["host_time_s"], dtype=np.float64)
        seq = np.asarray(block["seq"], dtype=np.int64)
        keep = np.isfinite(host)
        if not keep.all():
            host, seq = host[keep], seq[keep]
        if host.size == 0:
            return
        # Last sample of every run of equal host times: one point per read.
        last = np.flatnonzero(np.append(host[1:] != host[:-1], True))
        for t, s in zip(host[last].tolist(), seq[last].tolist(), strict=True):
            self._add(t, s)

    def _add(self, t: float, s: int) -> None:
        pts = self._points
        if pts:
            t_prev, s_prev = pts[-1]
            if s <= s_prev or t < t_prev:
                self.restarts += 1
                pts.clear()
            elif t == t_prev:
                pts[-1] = (t, s)  # same read split over two blocks: keep the later sample
                return
        pts.append((t, s))
        # Drop the oldest points while the rest still cover the whole window.
        while len(pts) > 2 and t - pts[1][0] >= self.window_s:
            pts.popleft()

    @property
    def span_s(self) -> float:
        """Host time between the oldest and newest kept points, s (0 with < 2 points)."""
        if len(self._points) < 2:
            return 0.0
        return self._points[-1][0] - self._points[0][0]

    @property
    def rate_hz(self) -> float | None:
        """Measured samples per host second, Hz; None until `min_span_s` is covered."""
        span = self.span_s
        if span < self.min_span_s or span <= 0.0:
            return None
        return (self._points[-1][1] - self._points[0][1]) / span

    @property
    def drift_ppm(self) -> float | None:
        """(measured / nominal − 1)·10⁶, ppm; positive when the device runs fast, else None."""
        rate = self.rate_hz
        if rate is None or self.nominal_rate_hz is None:
            return None
        return (rate / self.nominal_rate_hz - 1.0) * 1e6
