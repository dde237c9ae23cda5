"""Load programmes: the force applied to a cell as a function of time (N vs s).

A programme is a sequence of segments played one after the other from t = 0. Before
t = 0 the force is 0 N (an unloaded cell); each segment starts from the level the
previous one ended at (its *base*, 0 N for the first segment); after the end the last
level is held.

Segments (all frozen values; durations in s, forces in N, frequencies in Hz):

* ``Hold(duration_s, force_n)``: step from the base to ``force_n`` and hold it.
* ``Ramp(duration_s, to_force_n)``: straight line from the base to ``to_force_n``.
* ``Sine(duration_s, mean_n, amplitude_n, frequency_hz)``:
  ``mean_n + amplitude_n·sin(2π·frequency_hz·τ)``, τ the time since the segment start
  (a step from the base to ``mean_n`` if they differ).
* ``HalfSine(duration_s, peak_n, width_s)``: an impact, ``base + peak_n·sin(π·τ/width_s)``
  for τ < width_s, then the base for the rest of the segment.
* ``Table(time_s, force_n)``: linear interpolation through points; ``time_s`` starts at 0
  (relative to the segment start), strictly increasing; its duration is ``time_s[-1]``.

Compact text spec (`parse_programme`): segments separated by ``;`` or new lines, each a
keyword and its numbers separated by spaces; ``#`` starts a comment to the end of line::

    hold DURATION_S FORCE_N
    ramp DURATION_S TO_FORCE_N
    sine DURATION_S MEAN_N AMPLITUDE_N FREQUENCY_HZ
    halfsine DURATION_S PEAK_N WIDTH_S

for example ``"hold 0.3 0; hold 0.5 20; ramp 0.4 60; hold 0.5 60; sine 1 30 5 8;
halfsine 0.3 40 0.005; hold 0.4 0"``.

CSV programmes (`load_programme_csv`): a header naming ``time_s`` and ``force_n`` (units in
brackets allowed, other columns ignored) then one point a line; lines starting with ``#``
and blank lines are ignored; the first time must be 0.
"""

from __future__ import annotations

import csv
import math
from dataclasses import dataclass
from pathlib import Path
from typing import Literal

import numpy as np
from numpy.typing import ArrayLike

from daq.errors import FramingError

__all__ = [
    "HalfSine",
    "Hold",
    "LoadProgramme",
    "Ramp",
    "Segment",
    "Sine",
    "Table",
    "demo_programme",
    "load_programme_csv",
    "parse_programme",
]


def _number(owner: str, name: str, value: object) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float, np.integer, np.floating)):
        raise FramingError(f"{owner}: {name}={value!r} is not a number; give a real number")
    v = float(value)
    if not math.isfinite(v):
        raise FramingError(f"{owner}: {name}={value!r} is not finite; give a finite number")
    return v


def _positive(owner: str, name: str, value: object) -> float:
    v = _number(owner, name, value)
    if v <= 0.0:
        raise FramingError(f"{owner}: {name}={value!r} must be > 0")
    return v


@dataclass(frozen=True)
class Hold:
    """Step from the base to `force_n`, N, held for `duration_s`, s."""

    duration_s: float
    force_n: float

    def __post_init__(self) -> None:
        _positive("Hold", "duration_s", self.duration_s)
        _number("Hold", "force_n", self.force_n)

    def _force(self, tau: np.ndarray, base: float) -> np.ndarray:
        return np.full(tau.shape, float(self.force_n))


@dataclass(frozen=True)
class Ramp:
    """Straight line from the base to `to_force_n`, N, over `duration_s`, s."""

    duration_s: float
    to_force_n: float

    def __post_init__(self) -> None:
        _positive("Ramp", "duration_s", self.duration_s)
        _number("Ramp", "to_force_n", self.to_force_n)

    def _force(self, tau: np.ndarray, base: float) -> np.ndarray:
        return base + (float(self.to_force_n) - base) * (tau / float(self.duration_s))


@dataclass(frozen=True)
class Sine:
    """`mean_n + amplitude_n·sin(2π·frequency_hz·τ)`, N, for `duration_s`, s."""

    duration_s: float
    mean_n: float
    amplitude_n: float
    frequency_hz: float

    def __post_init__(self) -> None:
        _positive("Sine", "duration_s", self.duration_s)
        _number("Sine", "mean_n", self.mean_n)
        if _number("Sine", "amplitude_n", self.amplitude_n) < 0.0:
            raise FramingError(f"Sine: amplitude_n={self.amplitude_n!r} must be >= 0")
        _positive("Sine", "frequency_hz", self.frequency_hz)

    def _force(self, tau: np.ndarray, base: float) -> np.ndarray:
        w = 2.0 * math.pi * float(self.frequency_hz)
        return float(self.mean_n) + float(self.amplitude_n) * np.sin(w * tau)


@dataclass(frozen=True)
class HalfSine:
    """Impact: `base + peak_n·sin(π·τ/width_s)` for τ < `width_s`, then the base; N, s."""

    duration_s: float
    peak_n: float
    width_s: float

    def __post_init__(self) -> None:
        d = _positive("HalfSine", "duration_s", self.duration_s)
        _number("HalfSine", "peak_n", self.peak_n)
        w = _positive("HalfSine", "width_s", self.width_s)
        if w > d:
            raise FramingError(
                f"HalfSine: width_s={self.width_s!r} is longer than "
                f"duration_s={self.duration_s!r}; make the segment at least as long as the pulse"
            )

    def _force(self, tau: np.ndarray, base: float) -> np.ndarray:
        w = float(self.width_s)
        pulse = float(self.peak_n) * np.sin(math.pi * np.clip(tau, 0.0, w) / w)
        return base + np.where(tau < w, pulse, 0.0)


@dataclass(frozen=True, eq=False)
class Table:
    """Linear interpolation through (`time_s`, `force_n`) points, shapes (n,), n ≥ 2.

    `time_s` is relative to the segment start: it starts at 0 and strictly increases.
    Both arrays are stored as read-only float64 copies.
    """

    time_s: np.ndarray
    force_n: np.ndarray

    def __post_init__(self) -> None:
        t = np.array(self.time_s, dtype=np.float64, copy=True).reshape(-1)
        f = np.array(self.force_n, dtype=np.float64, copy=True).reshape(-1)
        if t.size != f.size:
            raise FramingError(
                f"Table: time_s has {t.size} points but force_n has {f.size}; give equal lengths"
            )
        if t.size < 2:
            raise FramingError(f"Table: {t.size} point(s); give at least 2 (time_s, force_n)")
        if not (np.all(np.isfinite(t)) and np.all(np.isfinite(f))):
            raise FramingError("Table: time_s and force_n must be finite; remove NaN/inf")
        if t[0] != 0.0:
            raise FramingError(f"Table: time_s[0]={t[0]!r} must be 0 (times are relative)")
        bad = np.flatnonzero(np.diff(t) <= 0.0)
        if bad.size:
            i = int(bad[0]) + 1
            raise FramingError(
                f"Table: time_s[{i}]={t[i]!r} does not increase on time_s[{i - 1}]={t[i - 1]!r};"
                " sort the points and remove duplicates"
            )
        t.setflags(write=False)
        f.setflags(write=False)
        object.__setattr__(self, "time_s", t)
        object.__setattr__(self, "force_n", f)

    def __eq__(self, other: object) -> bool:
        if not isinstance(other, Table):
            return NotImplemented
        return bool(
            np.array_equal(self.time_s, other.time_s)
            and np.array_equal(self.force_n, other.force_n)
        )

    def __hash__(self) -> int:
        return hash((self.time_s.tobytes(), self.force_n.tobytes()))

    @property
    def duration_s(self) -> float:
        """Length of the table, s."""
        return float(self.time_s[-1])

    def _force(self, tau: np.ndarray, base: float) -> np.ndarray:
        return np.interp(tau, self.time_s, self.force_n)


Segment = Hold | Ramp | Sine | HalfSine | Table


@dataclass(frozen=True)
class LoadProgramme:
    """A sequence of segments; see the module docstring for the meaning of each."""

    segments: tuple[Segment, ...]

    def __post_init__(self) -> None:
        segs = tuple(self.segments)
        if not segs:
            raise FramingError("LoadProgramme: segments is empty; give at least one segment")
        for i, s in enumerate(segs):
            if not isinstance(s, (Hold, Ramp, Sine, HalfSine, Table)):
                raise FramingError(
                    f"LoadProgramme: segments[{i}]={s!r} is not a segment; "
                    "use Hold, Ramp, Sine, HalfSine or Table"
                )
        object.__setattr__(self, "segments", segs)
        starts = [0.0]
        for s in segs:
            starts.append(starts[-1] + float(s.duration_s))
        object.__setattr__(self, "_starts", np.array(starts))
        bases = [0.0]
        for i, s in enumerate(segs):
            end = s._force(np.array([float(s.duration_s)]), bases[i])
            bases.append(float(end[0]))
        object.__setattr__(self, "_bases", tuple(bases))

    @property
    def duration_s(self) -> float:
        """Total length, s."""
        return float(self._starts[-1])

    @property
    def boundaries_s(self) -> np.ndarray:
        """Segment start times and the end time, s, shape (n_segments + 1,)."""
        return self._starts.copy()

    def force_at(self, t_s: ArrayLike, side: Literal["right", "left"] = "right") -> np.ndarray:
        """Force, N, at times `t_s`, s (any shape; result has the same shape).

        At a discontinuity (a step at a segment start) ``side="right"`` gives the value
        just after it and ``side="left"`` the value just before. Before 0 the force is
        0 N; after the end the last level is held.
        """
        if side not in ("right", "left"):
            raise FramingError(f"force_at: side={side!r}; use 'right' or 'left'")
        t = np.asarray(t_s, dtype=np.float64)
        out = np.zeros(t.shape)
        flat_t = t.reshape(-1)
        flat = out.reshape(-1)
        # Index of the segment each time falls in (-1 before 0, n after the end).
        k = np.searchsorted(self._starts, flat_t, side=side) - 1
        n = len(self.segments)
        for i, seg in enumerate(self.segments):
            m = k == i
            if np.any(m):
                flat[m] = seg._force(flat_t[m] - self._starts[i], self._bases[i])
        flat[k >= n] = self._bases[n]
        return out

    def step_changes(self) -> list[tuple[float, float, float]]:
        """(time_s, from_n, to_n) for each `Hold` whose level differs from its base."""
        out = []
        for i, s in enumerate(self.segments):
            if isinstance(s, Hold) and float(s.force_n) != self._bases[i]:
                out.append((float(self._starts[i]), self._bases[i], float(s.force_n)))
        return out


_KEYWORDS: dict[str, tuple[type, tuple[str, ...]]] = {
    "hold": (Hold, ("duration_s", "force_n")),
    "ramp": (Ramp, ("duration_s", "to_force_n")),
    "sine": (Sine, ("duration_s", "mean_n", "amplitude_n", "frequency_hz")),
    "halfsine": (HalfSine, ("duration_s", "peak_n", "width_s")),
}


def parse_programme(spec: str) -> LoadProgramme:
    """Parse the compact text spec described in the module docstring."""
    if not isinstance(spec, str):
        raise FramingError(f"programme spec is {type(spec).__name__}; pass a string")
    segments: list[Segment] = []
    lines = [line.split("#", 1)[0] for line in spec.splitlines()]
    items = [item.strip() for line in lines for item in line.split(";")]
    for item in (i for i in items if i):
        words = item.split()
        key = words[0].lower()
        where = f"programme segment {len(segments) + 1} ({item!r})"
        if key not in _KEYWORDS:
            raise FramingError(
                f"{where}: unknown keyword {words[0]!r}; use one of {', '.join(_KEYWORDS)}"
            )
        cls, names = _KEYWORDS[key]
        if len(words) - 1 != len(names):
            raise FramingError(
                f"{where}: {len(words) - 1} number(s) given; {key} takes {len(names)}: "
                + " ".join(n.upper() for n in names)
            )
        values = []
        for name, word in zip(names, words[1:], strict=True):
            try:
                values.append(float(word))
            except ValueError:
                raise FramingError(f"{where}: {name}={word!r} is not a number") from None
        try:
            segments.append(cls(*values))
        except FramingError as exc:
            raise FramingError(f"{where}: {exc}") from None
    if not segments:
        raise FramingError("programme spec is empty; give at least one segment, e.g. 'hold 1 10'")
    return LoadProgramme(tuple(segments))


def load_programme_csv(path: str | Path) -> LoadProgramme:
    """Read a CSV with ``time_s`` and ``force_n`` columns into a one-`Table` programme.

    Any file in the dialects of docs/csv-files.md: a byte-order mark, ``\\r\\n``, ``;``
    separators, names in any case with a bracketed unit (``force_n [N]``), other columns
    ignored; so a ``truth.csv`` or an estimates CSV forcelens wrote is a programme too.
    Errors name the file, the line and the column.
    """
    from daq.csv_dialect import split_column_header

    p = Path(path)
    try:
        text = p.read_text(encoding="utf-8-sig")
    except (OSError, UnicodeDecodeError) as exc:
        raise FramingError(f"{p}: cannot read programme CSV ({exc}); check the path") from None
    times: list[float] = []
    forces: list[float] = []
    where: tuple[int, int] | None = None  # columns of time_s and force_n
    width = 0
    sep = ","
    for lineno, line in enumerate(text.splitlines(), start=1):
        if not line.strip() or line.lstrip().startswith("#"):
            continue
        if where is None:
            sep = "," if "," in line or ";" not in line else ";"
            names = [split_column_header(c)[0] for c in next(csv.reader([line], delimiter=sep))]
            if "time_s" not in names or "force_n" not in names:
                raise FramingError(
                    f"{p}:{lineno}: header is {line.strip()!r}; it must name the columns "
                    "time_s and force_n (e.g. 'time_s,force_n')"
                )
            where, width = (names.index("time_s"), names.index("force_n")), len(names)
            continue
        cells = [c.strip() for c in next(csv.reader([line], delimiter=sep))]
        if len(cells) != width:
            raise FramingError(
                f"{p}:{lineno}: {len(cells)} column(s); the header has {width} "
                "(each row needs time_s and force_n)"
            )
        for (col, name), dest in zip(
            ((where[0], "time_s"), (where[1], "force_n")), (times, forces), strict=True
        ):
            try:
                v = float(cells[col])
            except ValueError:
                v = math.nan
            if not math.isfinite(v):
                raise FramingError(
                    f"{p}:{lineno}: column {col + 1} ({name}) = {cells[col]!r} is not a "
                    "finite number"
                )
            dest.append(v)
        if len(times) >= 2 and times[-1] <= times[-2]:
            raise FramingError(
                f"{p}:{lineno}: column {where[0] + 1} (time_s) = {times[-1]!r} does not "
                f"increase on the previous row ({times[-2]!r}); sort the rows and remove "
                "duplicates"
            )
    if where is None:
        raise FramingError(f"{p}: no header; the first line must be 'time_s,force_n'")
    try:
        return LoadProgramme((Table(np.array(times), np.array(forces)),))
    except FramingError as exc:
        raise FramingError(f"{p}: {exc}") from None


def demo_programme() -> LoadProgramme:
    """An invented scenario: 0 N, steps up 20 → 50 → 100 N, down to 40 N, back to 0 (5.1 s).

    Each level is held ≥ 0.6 s so that the cell rings out between steps.
    """
    return LoadProgramme(
        (
            Hold(0.6, 0.0),
            Hold(0.8, 20.0),
            Hold(0.8, 50.0),
            Hold(1.0, 100.0),
            Hold(0.9, 40.0),
            Hold(1.0, 0.0),
        )
    )
