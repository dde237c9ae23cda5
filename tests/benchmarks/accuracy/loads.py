"""Load shapes: force as a function of time, with the breakpoints where it is not smooth.

Every shape is scaled to the cell's rated range and drawn from its own seeded generator
(the levels, times and widths vary a little from record to record). ``force(t)`` takes
times in s (scalar or array) and returns force in N; it is right-continuous at the
breakpoints, the instants where F or one of its derivatives is discontinuous. The
exact simulation restarts its integrator at each breakpoint.

``events`` lists the load changes after which a 2 % settling time is measured:
every step of a staircase and the end of every pulse.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike

SHAPES: tuple[str, ...] = ("staircase", "trapezoid", "sine", "pulse", "random")
#: Shapes whose force is continuous with a continuous slope almost everywhere.
SMOOTH_SHAPES: frozenset[str] = frozenset({"trapezoid", "sine", "random"})


@dataclass(frozen=True)
class SettlingEvent:
    """A load change after which the estimate should settle.

    Attributes:
        time_s: the instant the load reaches its new level (s).
        level_n: the new level (N).
        height_n: size of the change (N); the settling band is 2 % of it.
        until_s: end of the hold that follows (s).
    """

    time_s: float
    level_n: float
    height_n: float
    until_s: float


@dataclass(frozen=True)
class Load:
    """One load history.

    Attributes:
        shape: one of ``SHAPES``.
        force: F(t): times in s → force in N (vectorised, right-continuous).
        breakpoints: times (s) inside (0, duration) where F or a derivative jumps.
        duration_s: length of the record (s).
        events: load changes to measure settling after (may be empty).
        note: a short description with the drawn parameters.
    """

    shape: str
    force: Callable[[ArrayLike], np.ndarray]
    breakpoints: tuple[float, ...]
    duration_s: float
    events: tuple[SettlingEvent, ...]
    note: str


def make_load(shape: str, range_n: float, duration_s: float, rng: np.random.Generator) -> Load:
    """Build the load ``shape`` for a cell of rated range ``range_n`` (N), ``duration_s`` long."""
    builders: dict[str, Callable[[float, float, np.random.Generator], Load]] = {
        "staircase": staircase,
        "trapezoid": trapezoid,
        "sine": offset_sine,
        "pulse": half_sine_pulses,
        "random": band_limited_random,
    }
    if shape not in builders:
        raise ValueError(f"shape = {shape!r}: must be one of {', '.join(SHAPES)}")
    return builders[shape](range_n, duration_s, rng)


def staircase(range_n: float, duration_s: float, rng: np.random.Generator) -> Load:
    """Deadweight-like steps up and down with holds between them (instant steps)."""
    fractions = np.array([0.0, 0.2, 0.45, 0.7, 0.9, 0.6, 0.35, 0.1, 0.0])
    fractions[1:-1] += rng.uniform(-0.03, 0.03, fractions.size - 2)
    levels = fractions * range_n
    holds = rng.uniform(0.85, 1.15, levels.size)
    edges = np.cumsum(holds / holds.sum() * duration_s)[:-1]  # step instants, s
    times = tuple(float(e) for e in edges)

    def force(t: ArrayLike) -> np.ndarray:
        return levels[np.searchsorted(edges, np.asarray(t, dtype=float), side="right")]

    ends = (*times[1:], duration_s)
    events = tuple(
        SettlingEvent(ts, float(levels[i + 1]), abs(float(levels[i + 1] - levels[i])), te)
        for i, (ts, te) in enumerate(zip(times, ends, strict=True))
    )
    note = "steps to " + ", ".join(f"{lv:.0f}" for lv in levels[1:]) + " N"
    return Load("staircase", force, times, duration_s, events, note)


def trapezoid(range_n: float, duration_s: float, rng: np.random.Generator) -> Load:
    """Hold, fast ramp up, hold, slow ramp down (four times longer), hold."""
    top = rng.uniform(0.7, 0.9) * range_n
    base = rng.uniform(0.0, 0.05) * range_n
    T = duration_s
    corners_t = np.array([0.0, 0.12 * T, 0.22 * T, 0.45 * T, 0.85 * T, T])
    corners_f = np.array([base, base, top, top, base, base])

    def force(t: ArrayLike) -> np.ndarray:
        return np.interp(np.asarray(t, dtype=float), corners_t, corners_f)

    up, down = (0.1 * T), (0.4 * T)
    note = f"{base:.0f}→{top:.0f} N in {up * 1e3:.0f} ms, back in {down * 1e3:.0f} ms"
    return Load("trapezoid", force, tuple(float(c) for c in corners_t[1:-1]), T, (), note)


def offset_sine(range_n: float, duration_s: float, rng: np.random.Generator) -> Load:
    """Hold at an offset, then a sine well below the cell's natural frequency."""
    freq_hz = rng.uniform(2.0, 8.0)
    offset = 0.5 * range_n
    amplitude = rng.uniform(0.25, 0.35) * range_n
    t0 = 0.1 * duration_s
    w = 2.0 * math.pi * freq_hz

    def force(t: ArrayLike) -> np.ndarray:
        t = np.asarray(t, dtype=float)
        return np.where(t < t0, offset, offset + amplitude * np.sin(w * (t - t0)))

    note = f"{offset:.0f} N ± {amplitude:.0f} N at {freq_hz:.2f} Hz from {t0 * 1e3:.0f} ms"
    return Load("sine", force, (t0,), duration_s, (), note)


def half_sine_pulses(range_n: float, duration_s: float, rng: np.random.Generator) -> Load:
    """Two half-sine pulses (one short, one longer) on a constant preload."""
    base = 0.1 * range_n
    widths = (rng.uniform(5e-3, 12e-3), rng.uniform(15e-3, 30e-3))  # s
    heights = (rng.uniform(0.5, 0.7) * range_n, rng.uniform(0.3, 0.5) * range_n)
    starts = (0.3 * duration_s, 0.65 * duration_s)

    def force(t: ArrayLike) -> np.ndarray:
        t = np.asarray(t, dtype=float)
        out = np.full(t.shape, base)
        for t1, wd, h in zip(starts, widths, heights, strict=True):
            inside = (t >= t1) & (t < t1 + wd)
            out = out + np.where(inside, h * np.sin(math.pi * (t - t1) / wd), 0.0)
        return out

    breaks = tuple(float(b) for t1, wd in zip(starts, widths, strict=True) for b in (t1, t1 + wd))
    ends = (starts[1], duration_s)
    events = tuple(
        SettlingEvent(t1 + wd, base, h, te)
        for t1, wd, h, te in zip(starts, widths, heights, ends, strict=True)
    )
    note = ", ".join(
        f"{h:.0f} N over {wd * 1e3:.1f} ms" for wd, h in zip(widths, heights, strict=True)
    )
    return Load("pulse", force, breaks, duration_s, events, f"on {base:.0f} N: {note}")


def band_limited_random(range_n: float, duration_s: float, rng: np.random.Generator) -> Load:
    """White noise through a 4th-order Butterworth low-pass (15 Hz), as a sum of sinusoids.

    Frequencies are the harmonics of 1/duration up to 5 corner frequencies; each gets
    Gaussian cosine and sine coefficients scaled by the low-pass magnitude
    ``1/√(1 + (f/fc)⁸)``, so F is defined and smooth at every t. Offset 50 % of the
    range, standard deviation 12 % of the range.
    """
    corner_hz = 15.0
    df = 1.0 / duration_s
    freqs = np.arange(1, int(5 * corner_hz / df) + 1) * df
    gain = 1.0 / np.sqrt(1.0 + (freqs / corner_hz) ** 8)
    a = rng.standard_normal(freqs.size) * gain
    b = rng.standard_normal(freqs.size) * gain
    scale = 0.12 * range_n / math.sqrt(0.5 * float(np.sum(a * a + b * b)))
    a, b = a * scale, b * scale
    w = 2.0 * math.pi * freqs
    offset = 0.5 * range_n

    def force(t: ArrayLike) -> np.ndarray:
        t = np.asarray(t, dtype=float)
        flat = t.reshape(-1)
        out = np.empty(flat.size)
        for i in range(0, flat.size, 4096):
            phase = np.outer(flat[i : i + 4096], w)
            out[i : i + 4096] = offset + np.cos(phase) @ a + np.sin(phase) @ b
        return out.reshape(t.shape)

    note = f"{offset:.0f} N ± {0.12 * range_n:.0f} N rms, {corner_hz:g} Hz corner"
    return Load("random", force, (), duration_s, (), note)
