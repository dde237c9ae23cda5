"""The calibration data: points and the set of them, checked."""

from __future__ import annotations

import itertools
import math
from collections.abc import Iterable, Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike

from estimator.calibration.checks import _DIRECTIONS, _finite_array, _frozen, _labels
from estimator.errors import ParameterError
from estimator.validation import finite_float as _finite

# ------------------------------------------------------------------------- data model


@dataclass(frozen=True)
class CalibrationPoint:
    """One row of a calibration sheet, load already converted to force.

    Attributes:
        series: series label (free text).
        direction: ``"up"`` (increasing force) or ``"down"`` (decreasing force).
        position: mounting position label (free text, e.g. "0", "120", "240").
        force_n: applied force in N, finite and >= 0; 0 marks a zero reading.
        reading_m: the transducer's reading in m, finite.
    """

    series: str
    direction: str
    position: str
    force_n: float
    reading_m: float

    def __post_init__(self) -> None:
        if self.direction not in _DIRECTIONS:
            raise ParameterError(f"direction = {self.direction!r}; it must be 'up' or 'down'")
        force = _finite("force_n", self.force_n, "give the applied force in N, >= 0")
        if force < 0.0:
            raise ParameterError(f"force_n = {force!r} is negative; give a force >= 0 N")
        object.__setattr__(self, "series", str(self.series))
        object.__setattr__(self, "position", str(self.position))
        object.__setattr__(self, "force_n", force)
        object.__setattr__(
            self, "reading_m", _finite("reading_m", self.reading_m, "give the reading in m")
        )


@dataclass(frozen=True, eq=False)
class CalibrationSet:
    """Loaded readings of a static calibration and the zero readings of each series.

    Rows are kept in sheet order. Equality is identity (arrays inside).

    Attributes:
        series: series label of each loaded point, ``n`` str.
        direction: ``"up"``/``"down"`` of each loaded point, ``n`` str.
        position: mounting position of each loaded point, ``n`` str.
        force_n: applied force in N, shape (n,), every value > 0, read-only.
        reading_m: reading under load in m, shape (n,), read-only.
        series_labels: the ``s`` series in sheet order.
        series_positions: mounting position of each series, ``s`` str.
        zero_before_m: zero reading before each series' first load, m, shape (s,).
        zero_after_m: zero reading after each series' last load, m, shape (s,);
            NaN where the series has none (its zero error is then not evaluated).
    """

    series: tuple[str, ...]
    direction: tuple[str, ...]
    position: tuple[str, ...]
    force_n: np.ndarray
    reading_m: np.ndarray
    series_labels: tuple[str, ...]
    series_positions: tuple[str, ...]
    zero_before_m: np.ndarray
    zero_after_m: np.ndarray

    def __post_init__(self) -> None:
        force = _finite_array("force_n", self.force_n, "N")
        n = force.size
        reading = _finite_array("reading_m", self.reading_m, "m")
        if reading.size != n:
            raise ParameterError(
                f"reading_m has {reading.size} values and force_n {n}; give one per point"
            )
        if n == 0:
            raise ParameterError("no loaded points; a calibration needs loads > 0")
        if np.any(force <= 0.0):
            i = int(np.nonzero(force <= 0.0)[0][0])
            raise ParameterError(
                f"force_n[{i}] = {float(force[i])!r}; loaded points need a force > 0 N (zero "
                "readings go in zero_before_m / zero_after_m)"
            )
        series = _labels("series", self.series, n)
        direction = _labels("direction", self.direction, n)
        position = _labels("position", self.position, n)
        for i, d in enumerate(direction):
            if d not in _DIRECTIONS:
                raise ParameterError(f"direction[{i}] = {d!r}; it must be 'up' or 'down'")
        labels = _labels("series_labels", self.series_labels)
        if len(set(labels)) != len(labels):
            raise ParameterError(f"series_labels {labels!r} repeat a label; give each once")
        s = len(labels)
        positions = _labels("series_positions", self.series_positions, s)
        missing = sorted(set(series) - set(labels))
        if missing:
            raise ParameterError(
                f"series {missing[0]!r} of a point is not in series_labels {labels!r}"
            )
        index = {label: i for i, label in enumerate(labels)}
        for i, (label, pos) in enumerate(zip(series, position, strict=True)):
            if positions[index[label]] != pos:
                raise ParameterError(
                    f"point {i} of series {label!r} is at position {pos!r} but the series "
                    f"is at {positions[index[label]]!r}; a series keeps one mounting position"
                )
        before = _finite_array("zero_before_m", self.zero_before_m, "m")
        after = np.array(self.zero_after_m, dtype=np.float64)
        if before.shape != (s,) or after.shape != (s,):
            raise ParameterError(
                f"zero_before_m has shape {before.shape} and zero_after_m {after.shape}; "
                f"both must be ({s},), one per series"
            )
        if np.any(np.isinf(after)):
            raise ParameterError("zero_after_m holds inf; give a reading in m or NaN for none")
        object.__setattr__(self, "series", series)
        object.__setattr__(self, "direction", direction)
        object.__setattr__(self, "position", position)
        object.__setattr__(self, "force_n", _frozen(force))
        object.__setattr__(self, "reading_m", _frozen(reading))
        object.__setattr__(self, "series_labels", labels)
        object.__setattr__(self, "series_positions", positions)
        object.__setattr__(self, "zero_before_m", _frozen(before))
        object.__setattr__(self, "zero_after_m", _frozen(after))

    # ------------------------------------------------------------------ construction

    @classmethod
    def from_rows(
        cls,
        series: Sequence[object],
        direction: Sequence[str],
        position: Sequence[object],
        force_n: ArrayLike,
        reading_m: ArrayLike,
        *,
        row_labels: Sequence[str] | None = None,
    ) -> CalibrationSet:
        """Build a set from sheet rows in sheet order, zero readings included.

        A row with force 0 is a zero reading. Each series is a contiguous block of rows
        at one mounting position: zero reading(s), loaded rows with increasing force
        (``up``) and then decreasing force (``down``), and optionally zero reading(s)
        after the last load. The zero before is the last zero row before the first
        load; the zero after is the first zero row after the last load.

        Args:
            series, direction, position: one label per row (``n`` each).
            force_n: shape (n,), forces in N (>= 0), e.g. from `forces_from_sheet`.
            reading_m: shape (n,), readings in m.
            row_labels: optional name of each row used in messages (e.g. ``"sheet.csv:12"``);
                default ``"row <i>"`` counting from 0.

        Raises:
            ParameterError: a rule above is broken; the message names the row.
        """
        force = _finite_array("force_n", force_n, "N")
        n = force.size
        reading = _finite_array("reading_m", reading_m, "m")
        if reading.size != n:
            raise ParameterError(
                f"reading_m has {reading.size} values and force_n {n}; give one per row"
            )
        ser = _labels("series", series, n)
        dirs = _labels("direction", direction, n)
        pos = _labels("position", position, n)
        names = (
            tuple(f"row {i}" for i in range(n))
            if row_labels is None
            else _labels("row_labels", row_labels, n)
        )
        for i in range(n):
            if dirs[i] not in _DIRECTIONS:
                raise ParameterError(f"{names[i]}: direction {dirs[i]!r} must be 'up' or 'down'")
            if force[i] < 0.0:
                raise ParameterError(
                    f"{names[i]}: force {float(force[i])!r} N is negative; use >= 0"
                )

        labels: list[str] = []
        blocks: dict[str, list[int]] = {}
        for i, label in enumerate(ser):
            if label not in blocks:
                labels.append(label)
                blocks[label] = []
            elif blocks[label][-1] != i - 1:
                raise ParameterError(
                    f"{names[i]}: series {label!r} continues after series {ser[i - 1]!r} "
                    f"began; keep the rows of each series together"
                )
            blocks[label].append(i)

        keep: list[int] = []
        positions: list[str] = []
        before: list[float] = []
        after: list[float] = []
        for label in labels:
            rows = blocks[label]
            loaded = [i for i in rows if force[i] > 0.0]
            if not loaded:
                raise ParameterError(
                    f"{names[rows[0]]}: series {label!r} has no loaded row; give its loads"
                )
            first, last = loaded[0], loaded[-1]
            zeros_before = [i for i in rows if i < first]
            if not zeros_before:
                raise ParameterError(
                    f"{names[first]}: series {label!r} has no zero reading before its first "
                    "load; add a row with load 0 before it"
                )
            inner = [i for i in rows if first < i < last and force[i] == 0.0]
            if inner:
                raise ParameterError(
                    f"{names[inner[0]]}: series {label!r} has a zero reading between loads; "
                    "start a new series after a zero reading"
                )
            series_pos = {pos[i] for i in rows}
            if len(series_pos) != 1:
                raise ParameterError(
                    f"{names[rows[0]]}: series {label!r} has positions {sorted(series_pos)!r}; "
                    "a series keeps one mounting position"
                )
            _check_order(label, loaded, dirs, force, names)
            zeros_after = [i for i in rows if i > last]
            keep.extend(loaded)
            positions.append(pos[rows[0]])
            before.append(float(reading[zeros_before[-1]]))
            after.append(float(reading[zeros_after[0]]) if zeros_after else math.nan)

        idx = np.array(keep, dtype=np.intp)
        return cls(
            series=tuple(ser[i] for i in keep),
            direction=tuple(dirs[i] for i in keep),
            position=tuple(pos[i] for i in keep),
            force_n=force[idx],
            reading_m=reading[idx],
            series_labels=tuple(labels),
            series_positions=tuple(positions),
            zero_before_m=np.array(before),
            zero_after_m=np.array(after),
        )

    @classmethod
    def from_points(cls, points: Iterable[CalibrationPoint]) -> CalibrationSet:
        """Build a set from `CalibrationPoint` rows in sheet order (see `from_rows`)."""
        rows = list(points)
        for i, p in enumerate(rows):
            if not isinstance(p, CalibrationPoint):
                raise ParameterError(
                    f"points[{i}] is a {type(p).__name__}, not a CalibrationPoint"
                )
        return cls.from_rows(
            [p.series for p in rows],
            [p.direction for p in rows],
            [p.position for p in rows],
            [p.force_n for p in rows],
            [p.reading_m for p in rows],
        )

    # --------------------------------------------------------------------- read-outs

    @property
    def deflection_m(self) -> np.ndarray:
        """Reading minus the zero before of its series, m, shape (n,)."""
        index = {label: i for i, label in enumerate(self.series_labels)}
        zeros = self.zero_before_m[[index[s] for s in self.series]]
        return self.reading_m - zeros

    @property
    def up(self) -> np.ndarray:
        """Boolean mask, shape (n,): the increasing-force points."""
        return np.array([d == "up" for d in self.direction], dtype=bool)

    def points(self) -> tuple[CalibrationPoint, ...]:
        """The loaded points as `CalibrationPoint` values (zero readings not included)."""
        return tuple(
            CalibrationPoint(s, d, p, float(f), float(r))
            for s, d, p, f, r in zip(
                self.series,
                self.direction,
                self.position,
                self.force_n,
                self.reading_m,
                strict=True,
            )
        )


def _check_order(
    label: str,
    loaded: list[int],
    dirs: tuple[str, ...],
    force: np.ndarray,
    names: tuple[str, ...],
) -> None:
    """Up rows strictly increasing, then down rows strictly decreasing, within a series."""
    seen_down = False
    for prev, i in itertools.pairwise(loaded):
        if dirs[i] == "up":
            if seen_down:
                raise ParameterError(
                    f"{names[i]}: series {label!r} goes up again after going down; start a "
                    "new series"
                )
            ok = force[i] > force[prev]
        elif dirs[prev] == "down":
            ok = force[i] < force[prev]
        else:  # the turning point: the first decreasing load may repeat the top one
            ok = force[i] <= force[prev]
        seen_down = seen_down or dirs[i] == "down"
        if not ok:
            trend = "rise" if dirs[i] == "up" else "fall"
            raise ParameterError(
                f"{names[i]}: series {label!r} goes from {float(force[prev])!r} N to "
                f"{float(force[i])!r} N; loads must {trend} while '{dirs[i]}'"
            )
