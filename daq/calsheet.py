"""Calibration sheets: the CSV file of a static calibration (format: docs/calibration-sheet.md).

One header line names the columns, then one row per reading, in the order taken:

* ``series``: series label (free text); the rows of a series are together.
* ``direction``: ``up`` (increasing load) or ``down`` (decreasing load).
* ``position``: mounting position label (free text, e.g. ``0``, ``120``, ``240``); one
  per series.
* exactly one load column: ``mass_kg`` (conventional mass, kg) or ``force_n`` (N);
  ``0`` marks a zero reading.
* exactly one reading column, its name giving the unit: ``reading_m``, ``reading_mm``,
  ``reading_um`` or ``reading_counts`` (counts need ``metres_per_count``).

Other columns are ignored. Lines starting with ``#`` and blank lines are skipped.
Each series starts with a zero reading, rises (``up``), may fall (``down``), and may end
with a zero reading. The reader checks the layout and the numbers; the physics (forces
from masses, the fit) is `estimator.calibration`'s.
"""

from __future__ import annotations

import csv
import hashlib
import itertools
import math
import os
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from daq.errors import FramingError, SourceError

__all__ = [
    "LABEL_COLUMNS",
    "LOAD_COLUMNS",
    "READING_UNITS",
    "CalibrationSheet",
    "CalibrationSheetError",
    "parse_calibration_sheet",
    "read_calibration_sheet",
]

#: The label columns every sheet has.
LABEL_COLUMNS = ("series", "direction", "position")
#: The accepted load columns (exactly one per sheet): unit in the name.
LOAD_COLUMNS = ("mass_kg", "force_n")
#: The accepted reading columns with their factor to metres; counts take the factor
#: from the caller (``metres_per_count``).
READING_UNITS: dict[str, float | None] = {
    "reading_m": 1.0,
    "reading_mm": 1e-3,
    "reading_um": 1e-6,
    "reading_counts": None,
}
_DIRECTIONS = ("up", "down")
# A reading labelled in metres whose magnitude exceeds this (m) is probably in mm: a
# displacement transducer on a force cell rarely spans more than a few centimetres
# (common practice). Only a warning: the reader cannot know.
_SUSPECT_METRES = 0.05
# Refused outright: a reading a metre from zero, a load of 10⁹ kg or N (the largest force
# standard machines are tens of meganewtons). Both are typing or unit errors, and the fit
# would overflow on them.
_READING_MAX_M = 1.0
_LOAD_MAX = 1e9


class CalibrationSheetError(FramingError):
    """A calibration sheet that cannot be used as written.

    Attributes:
        path: the file (or the name given to `parse_calibration_sheet`).
        line: 1-based line number, or None for the file as a whole.
        column: the column concerned, or None.
        value: the offending text, or None.
    """

    def __init__(
        self,
        message: str,
        *,
        path: str,
        line: int | None = None,
        column: str | None = None,
        value: str | None = None,
    ) -> None:
        where = path if line is None else f"{path}:{line}"
        what = (
            ""
            if column is None
            else f"column {column!r}" + ("" if value is None else f" = {value!r}")
        )
        super().__init__(f"{where}: {what + ': ' if what else ''}{message}")
        self.path = path
        self.line = line
        self.column = column
        self.value = value


@dataclass(frozen=True, eq=False)
class CalibrationSheet:
    """The rows of a calibration sheet, zero readings included, in file order.

    Equality is identity (arrays inside); arrays are read-only.

    Attributes:
        path: the file read (or the name given).
        sha256: SHA-256 of the file's bytes, 64 lower-case hex digits.
        line: 1-based line number of each row, int64, shape (n,).
        series: series label of each row, ``n`` str.
        direction: ``"up"``/``"down"`` of each row, ``n`` str.
        position: mounting position label of each row, ``n`` str.
        load: the load column's values, float64, shape (n,), >= 0 (0: zero reading).
        load_column: ``"mass_kg"`` (conventional mass, kg) or ``"force_n"`` (N).
        reading_m: readings converted to m, float64, shape (n,).
        reading_column: the reading column as named in the file.
        warnings: plain-text notes on suspicious but readable content (e.g. a unit
            mix-up); empty when none.
    """

    path: str
    sha256: str
    line: np.ndarray
    series: tuple[str, ...]
    direction: tuple[str, ...]
    position: tuple[str, ...]
    load: np.ndarray
    load_column: str
    reading_m: np.ndarray
    reading_column: str
    warnings: tuple[str, ...] = ()

    def __post_init__(self) -> None:
        for name, dtype in (("line", np.int64), ("load", np.float64), ("reading_m", np.float64)):
            arr = np.array(getattr(self, name), dtype=dtype)
            arr.setflags(write=False)
            object.__setattr__(self, name, arr)

    @property
    def is_zero(self) -> np.ndarray:
        """Boolean mask, shape (n,): the zero-reading rows (load 0)."""
        return self.load == 0.0

    @property
    def row_labels(self) -> tuple[str, ...]:
        """``"<path>:<line>"`` of each row, for messages about rows."""
        return tuple(f"{self.path}:{int(n)}" for n in self.line)

    @property
    def series_labels(self) -> tuple[str, ...]:
        """The series in file order, each once."""
        return tuple(dict.fromkeys(self.series))


def read_calibration_sheet(
    path: str | os.PathLike[str], *, metres_per_count: float | None = None
) -> CalibrationSheet:
    """Read and check a calibration sheet file.

    Args:
        path: the CSV file.
        metres_per_count: scale of a ``reading_counts`` column in m per count (finite,
            non-zero); must be None for the other reading columns.

    Raises:
        SourceError: the file cannot be read.
        CalibrationSheetError: the content breaks the format; the message names the
            file, the line, the column and the value.
    """
    p = Path(path)
    try:
        data = p.read_bytes()
    except OSError as exc:
        raise SourceError(f"{p}: cannot read ({exc.strerror or exc})") from exc
    return parse_calibration_sheet(data, name=str(p), metres_per_count=metres_per_count)


def parse_calibration_sheet(
    data: bytes, *, name: str = "<sheet>", metres_per_count: float | None = None
) -> CalibrationSheet:
    """Parse the bytes of a calibration sheet; ``name`` stands for the file in messages.

    See `read_calibration_sheet`.
    """
    sha = hashlib.sha256(data).hexdigest()
    try:
        text = data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise CalibrationSheetError(
            f"not UTF-8 text (byte {exc.start}); save the sheet as UTF-8 CSV", path=name
        ) from None
    numbered = [
        (i, line)
        for i, line in enumerate(text.splitlines(), start=1)
        if line.strip() and not line.lstrip().startswith("#")
    ]
    if not numbered:
        raise CalibrationSheetError(
            "no header line; expected e.g. 'series,direction,position,mass_kg,reading_mm'",
            path=name,
        )
    header_line, header_text = numbered[0]
    header = [c.strip().lower() for c in next(csv.reader([header_text]))]
    cols = _columns(header, name, header_line)
    scale = _reading_scale(cols["reading"][0], metres_per_count, name, header_line)

    lines: list[int] = []
    series: list[str] = []
    direction: list[str] = []
    position: list[str] = []
    load: list[float] = []
    reading: list[float] = []
    for lineno, line in numbered[1:]:
        fields = next(csv.reader([line]))
        if len(fields) != len(header):
            raise CalibrationSheetError(
                f"{len(fields)} fields, the header has {len(header)}; give one value per column",
                path=name,
                line=lineno,
            )
        values = {key: fields[idx].strip() for key, (_, idx) in cols.items()}
        for key in LABEL_COLUMNS:
            if not values[key]:
                raise CalibrationSheetError(
                    "empty; every row needs a series, a direction and a position",
                    path=name,
                    line=lineno,
                    column=key,
                    value=values[key],
                )
        d = values["direction"].lower()
        if d not in _DIRECTIONS:
            raise CalibrationSheetError(
                "must be 'up' (increasing load) or 'down' (decreasing load)",
                path=name,
                line=lineno,
                column="direction",
                value=values["direction"],
            )
        load_name = cols["load"][0]
        w = _number(values["load"], name, lineno, load_name)
        if w < 0.0:
            raise CalibrationSheetError(
                "is negative; loads are >= 0 (0 for a zero reading), give tension and "
                "compression as separate sheets",
                path=name,
                line=lineno,
                column=load_name,
                value=values["load"],
            )
        r = _number(values["reading"], name, lineno, cols["reading"][0])
        if not abs(r * scale) < _READING_MAX_M:
            raise CalibrationSheetError(
                f"is {abs(r * scale):g} m from zero: beyond any displacement transducer on a "
                f"force cell (less than {_READING_MAX_M:g} m); check the value and the unit",
                path=name,
                line=lineno,
                column=cols["reading"][0],
                value=values["reading"],
            )
        if not w < _LOAD_MAX:
            raise CalibrationSheetError(
                f"is beyond {_LOAD_MAX:g} ({load_name}): no deadweight or force standard is "
                "that large; check the value and the unit",
                path=name,
                line=lineno,
                column=load_name,
                value=values["load"],
            )
        lines.append(lineno)
        series.append(values["series"])
        direction.append(d)
        position.append(values["position"])
        load.append(w)
        reading.append(r * scale)
    if not lines:
        raise CalibrationSheetError("no rows after the header", path=name, line=header_line)
    _check_layout(name, lines, series, direction, position, load, cols["load"][0])

    warnings: list[str] = []
    biggest = max(abs(x) for x in reading)
    if cols["reading"][0] == "reading_m" and biggest > _SUSPECT_METRES:
        warnings.append(
            f"{name}: the largest reading is {biggest:g} m in column 'reading_m'; if the "
            "values are millimetres, name the column 'reading_mm'"
        )
    return CalibrationSheet(
        path=name,
        sha256=sha,
        line=np.array(lines),
        series=tuple(series),
        direction=tuple(direction),
        position=tuple(position),
        load=np.array(load),
        load_column=cols["load"][0],
        reading_m=np.array(reading),
        reading_column=cols["reading"][0],
        warnings=tuple(warnings),
    )


def _columns(header: list[str], name: str, line: int) -> dict[str, tuple[str, int]]:
    """Map role (series, direction, position, load, reading) → (column name, index)."""
    seen: set[str] = set()
    for col in header:
        if col in seen and (col in LABEL_COLUMNS or col in LOAD_COLUMNS or col in READING_UNITS):
            raise CalibrationSheetError(
                "appears twice in the header; keep one", path=name, line=line, column=col
            )
        seen.add(col)
    cols: dict[str, tuple[str, int]] = {}
    for key in LABEL_COLUMNS:
        if key not in header:
            raise CalibrationSheetError(
                f"missing from the header {','.join(header)!r}; the sheet needs "
                f"{', '.join(LABEL_COLUMNS)}, one load and one reading column",
                path=name,
                line=line,
                column=key,
            )
        cols[key] = (key, header.index(key))
    for role, allowed in (("load", LOAD_COLUMNS), ("reading", tuple(READING_UNITS))):
        found = [c for c in header if c in allowed]
        if len(found) != 1:
            problem = f"no {role} column" if not found else f"{role} columns {', '.join(found)}"
            raise CalibrationSheetError(
                f"the header has {problem}; give exactly one of {', '.join(allowed)}",
                path=name,
                line=line,
            )
        cols[role] = (found[0], header.index(found[0]))
    return cols


def _reading_scale(column: str, metres_per_count: float | None, name: str, line: int) -> float:
    factor = READING_UNITS[column]
    if factor is not None:
        if metres_per_count is not None:
            raise CalibrationSheetError(
                f"metres_per_count = {metres_per_count!r} was given but the readings are in "
                f"{column!r}; leave it out (it is for 'reading_counts' only)",
                path=name,
                line=line,
                column=column,
            )
        return factor
    if metres_per_count is None:
        raise CalibrationSheetError(
            "counts need a scale; give metres_per_count (m per count), or convert the "
            "column to reading_m / reading_mm / reading_um",
            path=name,
            line=line,
            column=column,
        )
    if isinstance(metres_per_count, bool):
        scale = math.nan
    else:
        try:
            scale = float(metres_per_count)
        except (TypeError, ValueError):
            scale = math.nan
    if not math.isfinite(scale) or scale == 0.0:
        raise CalibrationSheetError(
            f"metres_per_count = {metres_per_count!r} must be a finite, non-zero number of "
            "m per count",
            path=name,
            line=line,
            column=column,
        )
    return scale


def _number(text: str, name: str, line: int, column: str) -> float:
    try:
        value = float(text)
    except ValueError:
        value = math.nan
    if not math.isfinite(value):
        raise CalibrationSheetError(
            "is not a finite number; write a plain decimal number (no unit, no NaN)",
            path=name,
            line=line,
            column=column,
            value=text,
        )
    return value


def _check_layout(
    name: str,
    lines: list[int],
    series: list[str],
    direction: list[str],
    position: list[str],
    load: list[float],
    load_column: str,
) -> None:
    """Each series: contiguous, one position, zero first, loads up then down, no inner zero."""
    blocks: dict[str, list[int]] = {}
    for i, label in enumerate(series):
        if label in blocks and blocks[label][-1] != i - 1:
            raise CalibrationSheetError(
                f"series {label!r} continues after series {series[i - 1]!r} began; keep the "
                "rows of each series together (or give the new series its own label)",
                path=name,
                line=lines[i],
                column="series",
                value=label,
            )
        blocks.setdefault(label, []).append(i)
    if not any(w > 0.0 for w in load):
        raise CalibrationSheetError("every load is 0; the sheet has no loaded row", path=name)
    for label, rows in blocks.items():
        first_pos = position[rows[0]]
        for i in rows:
            if position[i] != first_pos:
                raise CalibrationSheetError(
                    f"series {label!r} began at position {first_pos!r}; a series keeps one "
                    "mounting position (start a new series after remounting)",
                    path=name,
                    line=lines[i],
                    column="position",
                    value=position[i],
                )
        loaded = [i for i in rows if load[i] > 0.0]
        if not loaded:
            raise CalibrationSheetError(
                f"series {label!r} has only zero readings; give its loads",
                path=name,
                line=lines[rows[0]],
                column="series",
                value=label,
            )
        if load[rows[0]] != 0.0:
            raise CalibrationSheetError(
                f"series {label!r} has no zero reading before its first load; add a row with "
                f"{load_column} 0 before it",
                path=name,
                line=lines[rows[0]],
                column=load_column,
                value=f"{load[rows[0]]:g}",
            )
        inner = [i for i in rows if loaded[0] < i < loaded[-1] and load[i] == 0.0]
        if inner:
            raise CalibrationSheetError(
                f"zero reading between loads of series {label!r}; start a new series after "
                "unloading",
                path=name,
                line=lines[inner[0]],
                column=load_column,
                value="0",
            )
        going_down = False
        for prev, i in itertools.pairwise(loaded):
            if direction[i] == "up":
                if going_down:
                    raise CalibrationSheetError(
                        f"series {label!r} goes up again after going down; start a new series",
                        path=name,
                        line=lines[i],
                        column="direction",
                        value="up",
                    )
                ok = load[i] > load[prev]
            elif direction[prev] == "down":
                ok = load[i] < load[prev]
            else:  # the turning point: the first decreasing load may repeat the top one
                ok = load[i] <= load[prev]
            going_down = going_down or direction[i] == "down"
            if not ok:
                trend = "rise" if direction[i] == "up" else "fall"
                raise CalibrationSheetError(
                    f"loads of series {label!r} must {trend} while '{direction[i]}' "
                    f"(previous row {load[prev]:g}); check the order of the rows",
                    path=name,
                    line=lines[i],
                    column=load_column,
                    value=f"{load[i]:g}",
                )
