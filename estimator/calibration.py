"""Static calibration of the force cell with known loads: forces, fit, error table, limits.

The numbers only; reading the calibration sheet is `daq.calsheet`, the command is in `ui`.
Formulas and sources are in docs/method-calibration.md. In short:

* Deadweight force from conventional mass (OIML R 111-1:2004 convention, reference air
  density ``ρ0 = 1.2 kg/m³``, reference density ``ρc = 8000 kg/m³``)::

      F = m_c·g·(1 − ρ0/ρc)·(1 − ρa/ρ)/(1 − ρ0/ρ)

* Least-squares polynomial of the deflection as a function of the force, degree 1..3,
  with or without a constant term, with the coefficient covariance
  ``s²·(XᵀX)⁻¹`` (``s²`` the residual variance on ``ν = n − p`` degrees of freedom).
* ISO 376:2011-style relative errors per force step (reproducibility ``b``,
  repeatability ``b′``, interpolation ``fc``, zero ``f0``, reversibility ``v``) and the
  class each step meets; the class limits are quoted from memory (`ISO376_CLASS_LIMITS`).
* ASTM E74-style standard deviation of the fit in force units, lower limit factor
  ``LLF = 2.4·s`` (not below the resolution) and the class A / AA lower force limits
  ``400·LLF`` / ``2000·LLF`` (factors from memory).
* Stiffness ``k = 1/c1`` of a straight-line fit with ``u(k) = u(c1)/c1²`` (GUM,
  JCGM 100:2008, first-order propagation, 5.1.2).

Units: forces N, masses kg, densities kg/m³, g m/s², readings and deflections m.
Relative errors are fractions (0.001 is 0.1 %); `StaticCalibration.text` shows them in %.
A *deflection* is a reading under load minus the zero reading taken before the series.
"""

from __future__ import annotations

import itertools
import math
import re
from collections.abc import Iterable, Sequence
from dataclasses import dataclass

import numpy as np
import scipy.linalg
from numpy.typing import ArrayLike

from estimator.errors import ParameterError
from estimator.validation import finite_float as _finite

__all__ = [
    "CONVENTIONAL_AIR_DENSITY_KG_M3",
    "CONVENTIONAL_WEIGHT_DENSITY_KG_M3",
    "E74_CLASS_AA_FACTOR",
    "E74_CLASS_A_FACTOR",
    "E74_LLF_FACTOR",
    "ISO376_CLASS_LIMITS",
    "CalibrationPoint",
    "CalibrationSet",
    "E74Limits",
    "Iso376Limits",
    "Iso376Result",
    "Iso376Step",
    "StaticCalibration",
    "StaticFit",
    "calibrate_static",
    "deadweight_force_n",
    "e74_limits",
    "evaluate_iso376",
    "fit_static",
    "forces_from_sheet",
]

#: Reference air density ρ0 of the conventional mass, kg/m³ (OIML R 111-1:2004).
CONVENTIONAL_AIR_DENSITY_KG_M3 = 1.2
#: Reference density ρc of the conventional mass, kg/m³ (OIML R 111-1:2004).
CONVENTIONAL_WEIGHT_DENSITY_KG_M3 = 8000.0

#: ASTM E74 (from memory): lower limit factor = 2.4 × standard deviation of the fit.
E74_LLF_FACTOR = 2.4
#: ASTM E74 (from memory): class A lower force limit = 400 × LLF.
E74_CLASS_A_FACTOR = 400.0
#: ASTM E74 (from memory): class AA lower force limit = 2000 × LLF.
E74_CLASS_AA_FACTOR = 2000.0

# Local gravity accepted, m/s²: Earth's surface spans about 9.76..9.84 (common practice);
# a value far outside is a unit slip (e.g. 980 Gal), refused.
_G_RANGE_M_S2 = (9.7, 9.9)
# Air density accepted, kg/m³: 0 (vacuum) to well above any laboratory air (~1.2).
_AIR_RANGE_KG_M3 = (0.0, 2.0)
# Weight densities accepted, kg/m³: from light alloys and plastics to tungsten alloys.
_WEIGHT_RANGE_KG_M3 = (500.0, 25000.0)
# A relative error counts as within a class limit up to this relative slack, so that a
# value exactly at the limit (as worked by hand) is not failed by rounding.
_LIMIT_SLACK = 1e-9
_DIRECTIONS = ("up", "down")


@dataclass(frozen=True)
class Iso376Limits:
    """Limits of one ISO 376:2011 class, relative errors as fractions (from memory).

    Attributes:
        class_name: "00", "0.5", "1" or "2".
        reproducibility: largest ``b``.
        repeatability: largest ``b′``.
        interpolation: largest ``|fc|``.
        zero: largest ``|f0|``.
        reversibility: largest ``v``.
        min_step_resolutions: the smallest step deflection must be at least this many
            resolutions of the reading (the lower limit of the calibration range).
    """

    class_name: str
    reproducibility: float
    repeatability: float
    interpolation: float
    zero: float
    reversibility: float
    min_step_resolutions: float


#: ISO 376:2011 Table 3 class limits, quoted from memory (not checked against the
#: published table): percent values b 0.05/0.10/0.20/0.40, b′ 0.025/0.05/0.10/0.20,
#: fc ±0.025/±0.05/±0.10/±0.20, f0 ±0.012/±0.025/±0.050/±0.10, v 0.07/0.15/0.30/0.50,
#: lowest force 4000/2000/1000/500 × resolution, for classes 00/0.5/1/2. Best first.
ISO376_CLASS_LIMITS: tuple[Iso376Limits, ...] = (
    Iso376Limits("00", 0.05e-2, 0.025e-2, 0.025e-2, 0.012e-2, 0.07e-2, 4000.0),
    Iso376Limits("0.5", 0.10e-2, 0.05e-2, 0.05e-2, 0.025e-2, 0.15e-2, 2000.0),
    Iso376Limits("1", 0.20e-2, 0.10e-2, 0.10e-2, 0.050e-2, 0.30e-2, 1000.0),
    Iso376Limits("2", 0.40e-2, 0.20e-2, 0.20e-2, 0.10e-2, 0.50e-2, 500.0),
)
_CLASS_RANK = {lim.class_name: i for i, lim in enumerate(ISO376_CLASS_LIMITS)}


# --------------------------------------------------------------------------- validation


def _in_range(name: str, value: object, lo: float, hi: float, unit: str, what: str) -> float:
    fix = f"give {what} in {unit}, {lo:g} to {hi:g}"
    number = _finite(name, value, fix)
    if not lo <= number <= hi:
        raise ParameterError(f"{name} = {number!r} is outside {lo:g}..{hi:g} {unit}; {fix}")
    return number


def _finite_array(name: str, values: ArrayLike, unit: str) -> np.ndarray:
    try:
        arr = np.array(values, dtype=np.float64)
    except (TypeError, ValueError):
        raise ParameterError(f"{name} is not an array of numbers in {unit}") from None
    if arr.ndim != 1:
        raise ParameterError(f"{name} has shape {arr.shape}; give a 1-D sequence in {unit}")
    bad = np.nonzero(~np.isfinite(arr))[0]
    if bad.size:
        raise ParameterError(
            f"{name}[{int(bad[0])}] = {float(arr[bad[0]])!r} is not finite; give finite values in "
            f"{unit} ({bad.size} non-finite in all)"
        )
    return arr


def _frozen(arr: np.ndarray) -> np.ndarray:
    out = np.array(arr, dtype=np.float64)
    out.setflags(write=False)
    return out


def _labels(name: str, values: Sequence[object], n: int | None = None) -> tuple[str, ...]:
    if isinstance(values, str):
        raise ParameterError(f"{name} is one string; give one label per row")
    out = tuple(str(v) for v in values)
    if n is not None and len(out) != n:
        raise ParameterError(f"{name} has {len(out)} entries; it must have {n}, one per row")
    return out


# ------------------------------------------------------------------------ deadweights


def _buoyancy_factor(air: float, weight: np.ndarray | float) -> np.ndarray | float:
    rho0, rhoc = CONVENTIONAL_AIR_DENSITY_KG_M3, CONVENTIONAL_WEIGHT_DENSITY_KG_M3
    return (1.0 - rho0 / rhoc) * (1.0 - air / weight) / (1.0 - rho0 / weight)


def deadweight_force_n(
    conventional_mass_kg: float,
    g_m_s2: float,
    *,
    air_density_kg_m3: float = CONVENTIONAL_AIR_DENSITY_KG_M3,
    weight_density_kg_m3: float = CONVENTIONAL_WEIGHT_DENSITY_KG_M3,
) -> float:
    """Force in N of a weight of conventional mass ``m_c`` hanging in air of density ``ρa``.

    ``F = m_c·g·(1 − ρ0/ρc)·(1 − ρa/ρ)/(1 − ρ0/ρ)`` with ``ρ0 = 1.2 kg/m³`` and
    ``ρc = 8000 kg/m³`` (the conventional-mass definition of OIML R 111-1:2004, which
    gives the true mass ``m = m_c·(1 − ρ0/ρc)/(1 − ρ0/ρ)``; the air lifts ``m·g·ρa/ρ``).

    Args:
        conventional_mass_kg: ``m_c`` in kg, finite and >= 0.
        g_m_s2: local gravity in m/s², 9.7 to 9.9.
        air_density_kg_m3: ``ρa`` in kg/m³, 0 to 2 (default the reference 1.2).
        weight_density_kg_m3: ``ρ`` of the weight's material in kg/m³, 500 to 25000.

    Raises:
        ParameterError: a value that is not finite or out of range, named.
    """
    fix = "give the conventional mass in kg, finite and >= 0"
    mass = _finite("conventional_mass_kg", conventional_mass_kg, fix)
    if mass < 0.0:
        raise ParameterError(f"conventional_mass_kg = {mass!r} is negative; {fix}")
    g = _in_range("g_m_s2", g_m_s2, *_G_RANGE_M_S2, "m/s²", "the local gravity")
    air = _in_range(
        "air_density_kg_m3", air_density_kg_m3, *_AIR_RANGE_KG_M3, "kg/m³", "the air density"
    )
    rho = _in_range(
        "weight_density_kg_m3",
        weight_density_kg_m3,
        *_WEIGHT_RANGE_KG_M3,
        "kg/m³",
        "the density of the weights' material",
    )
    return float(mass * g * _buoyancy_factor(air, rho))


def forces_from_sheet(
    load: ArrayLike,
    load_column: str,
    g_m_s2: float | None = None,
    *,
    air_density_kg_m3: float = CONVENTIONAL_AIR_DENSITY_KG_M3,
    weight_density_kg_m3: float | ArrayLike = CONVENTIONAL_WEIGHT_DENSITY_KG_M3,
) -> np.ndarray:
    """Applied forces in N from the load column of a calibration sheet.

    Args:
        load: shape (n,), the sheet's load column: conventional masses in kg when
            ``load_column == "mass_kg"``, forces in N when ``"force_n"``; >= 0 (0 marks
            a zero reading).
        load_column: ``"mass_kg"`` or ``"force_n"``.
        g_m_s2: local gravity in m/s² (9.7 to 9.9); needed for masses, unused for forces.
        air_density_kg_m3: ``ρa`` in kg/m³ for masses.
        weight_density_kg_m3: ``ρ`` of the weights in kg/m³, one value or shape (n,).

    Returns:
        float64 array of shape (n,) in N; rows with load 0 give exactly 0.

    Raises:
        ParameterError: an unknown column, a negative or non-finite load, a bad site value.
    """
    values = _finite_array("load", load, "kg or N")
    neg = np.nonzero(values < 0.0)[0]
    if neg.size:
        raise ParameterError(
            f"load[{int(neg[0])}] = {float(values[neg[0]])!r} is negative; loads are >= 0 "
            "(0 for a zero reading); give tension and compression as separate sheets"
        )
    if load_column == "force_n":
        return values
    if load_column != "mass_kg":
        raise ParameterError(
            f"load_column = {load_column!r} is unknown; it must be 'mass_kg' or 'force_n'"
        )
    if g_m_s2 is None:
        raise ParameterError(
            "g_m_s2 = None with loads in kg; give the local gravity in m/s² (measured, or "
            "estimator.gravity.normal_gravity_m_s2 for the site)"
        )
    g = _in_range("g_m_s2", g_m_s2, *_G_RANGE_M_S2, "m/s²", "the local gravity")
    air = _in_range(
        "air_density_kg_m3", air_density_kg_m3, *_AIR_RANGE_KG_M3, "kg/m³", "the air density"
    )
    try:
        rho = np.array(weight_density_kg_m3, dtype=np.float64)
    except (TypeError, ValueError):
        raise ParameterError(
            f"weight_density_kg_m3 = {weight_density_kg_m3!r} is not a number or an array "
            "of numbers in kg/m³"
        ) from None
    if rho.ndim == 0:
        rho = np.full(values.shape, float(rho))
    if rho.shape != values.shape:
        raise ParameterError(
            f"weight_density_kg_m3 has shape {rho.shape}; give one value or one per row "
            f"{values.shape}"
        )
    lo, hi = _WEIGHT_RANGE_KG_M3
    bad = np.nonzero(~((rho >= lo) & (rho <= hi)))[0]  # NaN fails too
    if bad.size:
        raise ParameterError(
            f"weight_density_kg_m3 = {float(rho[bad[0]])!r} is outside {lo:g}..{hi:g} kg/m³; give "
            "the density of the weights' material (8000 for steel)"
        )
    return values * g * _buoyancy_factor(air, rho)


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


# ------------------------------------------------------------------------------- fit


@dataclass(frozen=True, eq=False)
class StaticFit:
    """Least-squares polynomial ``deflection = Σ c_j·F^j`` (j = 0..degree).

    Equality is identity (arrays inside). Arrays are read-only.

    Attributes:
        degree: 1, 2 or 3.
        intercept: whether ``c0`` was fitted (otherwise it is fixed at 0).
        coefficients: ``c_j`` ascending, shape (degree + 1,), units m/N^j.
        covariance: covariance of ``c``, shape (degree + 1, degree + 1); row and column
            0 are zero without an intercept.
        force_n: the fitted forces, N, shape (n,).
        deflection_m: the fitted deflections, m, shape (n,).
        residuals_m: deflection minus fitted value, m, shape (n,).
        residual_std_m: ``s = sqrt(Σ r²/ν)``, m.
        dof: ``ν = n − p``, ``p`` the number of fitted coefficients.
    """

    degree: int
    intercept: bool
    coefficients: np.ndarray
    covariance: np.ndarray
    force_n: np.ndarray
    deflection_m: np.ndarray
    residuals_m: np.ndarray
    residual_std_m: float
    dof: int

    def __post_init__(self) -> None:
        for name in ("coefficients", "covariance", "force_n", "deflection_m", "residuals_m"):
            object.__setattr__(self, name, _frozen(getattr(self, name)))

    @property
    def standard_errors(self) -> np.ndarray:
        """Standard uncertainties of ``c_j``, shape (degree + 1,) (0 for a fixed ``c0``)."""
        return np.sqrt(np.diag(self.covariance))

    @property
    def force_range_n(self) -> tuple[float, float]:
        """The calibrated range: smallest and largest fitted force in N."""
        return float(self.force_n.min()), float(self.force_n.max())

    @property
    def stiffness_n_per_m(self) -> float | None:
        """``k = 1/c1`` in N/m for a straight line; None for degree 2 and 3."""
        if self.degree != 1:
            return None
        return 1.0 / float(self.coefficients[1])

    @property
    def stiffness_u_n_per_m(self) -> float | None:
        """Standard uncertainty ``u(k) = u(c1)/c1²`` in N/m (GUM 5.1.2); None if degree > 1."""
        if self.degree != 1:
            return None
        c1 = float(self.coefficients[1])
        return float(self.standard_errors[1]) / (c1 * c1)

    def deflection_at(self, force_n: ArrayLike) -> np.ndarray:
        """Fitted deflection in m at ``force_n`` (N, any shape; 0-d array for a scalar)."""
        f = np.asarray(force_n, dtype=np.float64)
        return np.polynomial.polynomial.polyval(f, self.coefficients)

    def sensitivity_m_per_n(self, force_n: ArrayLike) -> np.ndarray:
        """Slope ``dX/dF`` of the fit in m/N at ``force_n`` (N, any shape)."""
        f = np.asarray(force_n, dtype=np.float64)
        return np.polynomial.polynomial.polyval(
            f, np.polynomial.polynomial.polyder(self.coefficients)
        )

    @property
    def residuals_n(self) -> np.ndarray:
        """Residuals converted to force, ``r_i/(dX/dF at F_i)``, N, shape (n,)."""
        return self.residuals_m / self.sensitivity_m_per_n(self.force_n)

    def force_at(
        self, deflection_m: ArrayLike, *, allow_extrapolation: bool = False
    ) -> np.ndarray:
        """Force in N whose fitted deflection is ``deflection_m`` (m, any shape).

        Degree 1 inverts in closed form; degrees 2 and 3 take the real root of the
        polynomial (``numpy.polynomial.polynomial.polyroots`` on the force scaled to the
        range, then two Newton steps) that lies in the calibrated range.

        Raises:
            ParameterError: the force would be outside `force_range_n` (unless
                ``allow_extrapolation``), no real root, or more than one root in range
                (the fit is not monotonic there).
        """
        x = np.asarray(deflection_m, dtype=np.float64)
        if not np.all(np.isfinite(x)):
            raise ParameterError("deflection_m holds NaN or inf; give finite deflections in m")
        flat = x.reshape(-1)
        out = np.array([self._force_one(float(v), allow_extrapolation) for v in flat])
        return out.reshape(x.shape)

    def _force_one(self, x: float, extrapolate: bool) -> float:
        lo, hi = self.force_range_n
        tol = 1e-9 * max(abs(hi), hi - lo)
        fix = (
            f"the calibrated range is {lo:.6g}..{hi:.6g} N (deflections "
            f"{float(self.deflection_at(lo)):.6g}..{float(self.deflection_at(hi)):.6g} m); "
            "pass allow_extrapolation=True to go beyond it"
        )
        c = self.coefficients
        if self.degree == 1:
            if c[1] == 0.0:
                raise ParameterError("the fitted slope is 0; the force cannot be recovered")
            f = (x - c[0]) / c[1]
            if not extrapolate and not lo - tol <= f <= hi + tol:
                raise ParameterError(f"deflection {x!r} m gives {f:.6g} N, outside range; {fix}")
            return float(f)
        scale = max(abs(lo), abs(hi))
        scaled = c * scale ** np.arange(c.size)
        scaled[0] -= x
        roots = np.polynomial.polynomial.polyroots(scaled)
        real = [r.real * scale for r in roots if abs(r.imag) <= 1e-7 * max(1.0, abs(r))]
        real = [self._newton(x, f) for f in real]
        if not real:
            raise ParameterError(f"deflection {x!r} m is never reached by the fit; {fix}")
        inside = [f for f in real if lo - tol <= f <= hi + tol]
        if len(inside) > 1:
            raise ParameterError(
                f"deflection {x!r} m is reached at {len(inside)} forces in range "
                f"({', '.join(f'{f:.6g}' for f in inside)} N): the fit is not monotonic; "
                "use a lower degree or check the data"
            )
        if inside:
            return inside[0]
        if not extrapolate:
            raise ParameterError(f"deflection {x!r} m is outside the calibrated range; {fix}")
        return min(real, key=lambda f: max(lo - f, f - hi))

    def _newton(self, x: float, f: float) -> float:
        for _ in range(2):
            slope = float(self.sensitivity_m_per_n(f))
            if slope == 0.0:
                break
            f -= (float(self.deflection_at(f)) - x) / slope
        return float(f)


def fit_static(
    force_n: ArrayLike, deflection_m: ArrayLike, *, degree: int = 1, intercept: bool = True
) -> StaticFit:
    """Least-squares fit of the deflection as a polynomial of the force (as ISO 376 does).

    The design matrix holds the powers of ``F/F_max`` (scaled for conditioning) and is
    solved by QR; the coefficient covariance is ``s²·(XᵀX)⁻¹`` mapped back to ``c_j``.

    Args:
        force_n: forces in N, shape (n,), finite.
        deflection_m: deflections in m, shape (n,), finite.
        degree: 1, 2 or 3.
        intercept: fit ``c0`` (True) or force the curve through the origin (False).

    Raises:
        ParameterError: bad shapes or values, a degree outside 1..3, fewer distinct forces
            than coefficients, or no degree of freedom left for the residual variance.
    """
    if (
        isinstance(degree, bool)
        or not isinstance(degree, int | np.integer)
        or not (1 <= degree <= 3)
    ):
        raise ParameterError(f"degree = {degree!r}; it must be 1, 2 or 3")
    degree = int(degree)
    force = _finite_array("force_n", force_n, "N")
    defl = _finite_array("deflection_m", deflection_m, "m")
    if force.size != defl.size:
        raise ParameterError(
            f"force_n has {force.size} values and deflection_m {defl.size}; give one each"
        )
    powers = np.arange(0 if intercept else 1, degree + 1)
    p = powers.size
    distinct = np.unique(force).size
    if distinct < p or (not intercept and distinct == 1 and force[0] == 0.0):
        raise ParameterError(
            f"{distinct} distinct force(s) cannot fix {p} coefficients; give at least {p} "
            "different loads or lower the degree"
        )
    if force.size <= p:
        raise ParameterError(
            f"{force.size} points for {p} coefficients leave no degree of freedom; give at "
            f"least {p + 1} points"
        )
    scale = float(np.max(np.abs(force)))
    if scale == 0.0:
        raise ParameterError("every force is 0; give loaded points")
    X = (force[:, None] / scale) ** powers[None, :]
    Q, R = np.linalg.qr(X)
    if np.min(np.abs(np.diag(R))) <= 1e-12 * np.max(np.abs(np.diag(R))):
        raise ParameterError(
            "the forces do not fix the coefficients (rank-deficient design); give more "
            "different loads or lower the degree"
        )
    a = scipy.linalg.solve_triangular(R, Q.T @ defl)
    residuals = defl - X @ a
    dof = force.size - p
    s2 = float(residuals @ residuals) / dof
    R_inv = scipy.linalg.solve_triangular(R, np.eye(p))
    cov_a = s2 * (R_inv @ R_inv.T)
    unscale = scale ** (-powers.astype(np.float64))
    coefficients = np.zeros(degree + 1)
    coefficients[powers] = a * unscale
    covariance = np.zeros((degree + 1, degree + 1))
    covariance[np.ix_(powers, powers)] = cov_a * np.outer(unscale, unscale)
    return StaticFit(
        degree=degree,
        intercept=bool(intercept),
        coefficients=coefficients,
        covariance=covariance,
        force_n=force,
        deflection_m=defl,
        residuals_m=residuals,
        residual_std_m=math.sqrt(s2),
        dof=dof,
    )


# --------------------------------------------------------------------- ISO 376 errors


@dataclass(frozen=True)
class Iso376Step:
    """ISO 376:2011-style relative errors at one force step (fractions; NaN: not evaluated).

    Attributes:
        force_n: the step's force in N.
        mean_deflection_m: ``X̄r``, mean increasing deflection over the mounting positions
            (first increasing series of each position), m.
        fitted_deflection_m: ``Xa``, the fit at ``force_n``, m.
        reproducibility: ``b = (max − min)/|X̄r|`` over the positions (needs 2 positions).
        repeatability: ``b′ = |X2 − X1|/|X̄wr|``, two increasing series in one position,
            ``X̄wr = (X1 + X2)/2``.
        interpolation: ``fc = (X̄r − Xa)/|Xa|``.
        reversibility: ``v``, mean over series of ``|X′ − X|/|X|`` (decreasing vs
            increasing deflection of the same series).
        class_name: best class whose limits ``b``, ``b′``, ``|fc|``, ``v`` (when
            evaluated) and the resolution (when given) all meet; None if none does or
            ``b``/``b′`` could not be evaluated.
    """

    force_n: float
    mean_deflection_m: float
    fitted_deflection_m: float
    reproducibility: float
    repeatability: float
    interpolation: float
    reversibility: float
    class_name: str | None


@dataclass(frozen=True)
class Iso376Result:
    """ISO 376:2011-style evaluation of a calibration set.

    Attributes:
        steps: one `Iso376Step` per force step, ascending force.
        series_labels: the series, in sheet order.
        zero_errors: ``f0 = (zero after − zero before)/|X_N|`` per series (``X_N`` the
            series' largest deflection); NaN where there is no zero after.
        zero_error: the ``f0`` of largest magnitude (NaN if none evaluated).
        zero_class: best class with ``|f0|`` within its limit; None if none or NaN.
        class_name: the worst of the step classes and ``zero_class``; None if any of
            them is None.
        resolution_m: the reading's resolution used for the lowest-step check, m, or None.
    """

    steps: tuple[Iso376Step, ...]
    series_labels: tuple[str, ...]
    zero_errors: tuple[float, ...]
    zero_error: float
    zero_class: str | None
    class_name: str | None
    resolution_m: float | None


def _within(value: float, limit: float) -> bool:
    return abs(value) <= limit * (1.0 + _LIMIT_SLACK)


def _step_groups(force: np.ndarray, rtol: float) -> tuple[np.ndarray, np.ndarray]:
    """Group forces into steps: (step index per point, mean force per step)."""
    order = np.argsort(force, kind="stable")
    sorted_f = force[order]
    gap = rtol * float(np.max(np.abs(force)))
    new_step = np.concatenate(([True], np.diff(sorted_f) > gap))
    step_of_sorted = np.cumsum(new_step) - 1
    step = np.empty(force.size, dtype=np.intp)
    step[order] = step_of_sorted
    means = np.array([force[step == j].mean() for j in range(int(step_of_sorted[-1]) + 1)])
    return step, means


def _classify(
    b: float, b_prime: float, fc: float, v: float, defl: float, resolution: float | None
) -> str | None:
    if math.isnan(b) or math.isnan(b_prime):
        return None
    for lim in ISO376_CLASS_LIMITS:
        ok = _within(b, lim.reproducibility) and _within(b_prime, lim.repeatability)
        ok = ok and (math.isnan(fc) or _within(fc, lim.interpolation))
        ok = ok and (math.isnan(v) or _within(v, lim.reversibility))
        if resolution is not None:
            ok = ok and abs(defl) >= lim.min_step_resolutions * resolution * (1 - _LIMIT_SLACK)
        if ok:
            return lim.class_name
    return None


def evaluate_iso376(
    cal: CalibrationSet,
    fit: StaticFit | None = None,
    *,
    resolution_m: float | None = None,
    step_rtol: float = 1e-6,
) -> Iso376Result:
    """ISO 376:2011-style relative errors per force step and the class each step meets.

    Points whose forces differ by at most ``step_rtol × max force`` form one step.
    ``X̄r`` and ``b`` use the first increasing series of each mounting position (in
    sheet order); ``b′`` the first two increasing series of the first position that has
    two at this step; ``v`` every series with both an increasing and a decreasing
    reading at the step; ``fc`` needs ``fit`` (deflection as a function of force).

    Args:
        cal: the calibration set.
        fit: the interpolation curve, or None to leave ``fc`` unevaluated.
        resolution_m: resolution of the reading in m (> 0), or None to skip the
            lowest-force check.
        step_rtol: relative tolerance grouping forces into steps, in (0, 0.01).

    Raises:
        ParameterError: a series with two readings in the same direction at one step,
            or a bad argument.
    """
    rtol = _finite("step_rtol", step_rtol, "give a relative tolerance in (0, 0.01)")
    if not 0.0 < rtol < 0.01:
        raise ParameterError(f"step_rtol = {rtol!r} is outside (0, 0.01)")
    res = None
    if resolution_m is not None:
        res = _finite("resolution_m", resolution_m, "give the reading's resolution in m, > 0")
        if res <= 0.0:
            raise ParameterError(f"resolution_m = {res!r} must be > 0 m")
    defl = cal.deflection_m
    step, step_force = _step_groups(cal.force_n, rtol)
    s_index = {label: i for i, label in enumerate(cal.series_labels)}
    n_steps, n_series = step_force.size, len(cal.series_labels)
    up = np.full((n_steps, n_series), np.nan)
    down = np.full((n_steps, n_series), np.nan)
    for i, (label, d) in enumerate(zip(cal.series, cal.direction, strict=True)):
        table = up if d == "up" else down
        j, k = int(step[i]), s_index[label]
        if not math.isnan(table[j, k]):
            raise ParameterError(
                f"series {label!r} has two {d!r} readings at {step_force[j]:.6g} N; give one "
                "reading per step and direction"
            )
        table[j, k] = defl[i]
    by_position: dict[str, list[int]] = {}
    for k, pos in enumerate(cal.series_positions):
        by_position.setdefault(pos, []).append(k)

    steps = []
    for j in range(n_steps):
        firsts = []
        pair: list[float] = []
        for members in by_position.values():
            have = [up[j, k] for k in members if not math.isnan(up[j, k])]
            if have:
                firsts.append(have[0])
            if len(have) >= 2 and not pair:
                pair = have[:2]
        mean = float(np.mean(firsts)) if firsts else math.nan
        b = (max(firsts) - min(firsts)) / abs(mean) if len(firsts) >= 2 else math.nan
        b_prime = abs(pair[1] - pair[0]) / abs(0.5 * (pair[0] + pair[1])) if pair else math.nan
        xa = float(fit.deflection_at(step_force[j])) if fit is not None else math.nan
        fc = (mean - xa) / abs(xa) if fit is not None else math.nan
        both = ~np.isnan(up[j]) & ~np.isnan(down[j])
        v = (
            float(np.mean(np.abs(down[j, both] - up[j, both]) / np.abs(up[j, both])))
            if np.any(both)
            else math.nan
        )
        steps.append(
            Iso376Step(
                force_n=float(step_force[j]),
                mean_deflection_m=mean,
                fitted_deflection_m=xa,
                reproducibility=b,
                repeatability=b_prime,
                interpolation=fc,
                reversibility=v,
                class_name=_classify(b, b_prime, fc, v, mean, res),
            )
        )

    zero_errors = []
    for k, label in enumerate(cal.series_labels):
        mine = np.array([s == label for s in cal.series])
        x_n = float(np.max(np.abs(defl[mine])))
        zero_errors.append((cal.zero_after_m[k] - cal.zero_before_m[k]) / x_n)
    evaluated = [f for f in zero_errors if not math.isnan(f)]
    zero_error = max(evaluated, key=abs) if evaluated else math.nan
    zero_class = None
    if evaluated:
        zero_class = next(
            (lim.class_name for lim in ISO376_CLASS_LIMITS if _within(zero_error, lim.zero)),
            None,
        )
    classes = [st.class_name for st in steps] + [zero_class]
    overall: str | None = None
    if all(c is not None for c in classes):
        overall = max((c for c in classes if c is not None), key=_CLASS_RANK.__getitem__)
    return Iso376Result(
        steps=tuple(steps),
        series_labels=cal.series_labels,
        zero_errors=tuple(float(f) for f in zero_errors),
        zero_error=float(zero_error),
        zero_class=zero_class,
        class_name=overall,
        resolution_m=res,
    )


# ------------------------------------------------------------------------ ASTM E74


@dataclass(frozen=True)
class E74Limits:
    """ASTM E74-style limits from the fit (factors from memory).

    Attributes:
        std_dev_n: standard deviation of the fit in force units,
            ``s = sqrt(Σ (r_i/(dX/dF)_i)²/ν)``, N.
        dof: ``ν = n − p``.
        resolution_n: the resolution in N the LLF may not go below.
        llf_n: lower limit factor ``max(2.4·s, resolution)``, N.
        class_a_lower_n: class A lower force limit ``400·LLF``, N.
        class_aa_lower_n: class AA lower force limit ``2000·LLF``, N.
        max_force_n: the largest calibrated force, N; a lower limit above it means the
            class cannot be reached with this calibration.
    """

    std_dev_n: float
    dof: int
    resolution_n: float
    llf_n: float
    class_a_lower_n: float
    class_aa_lower_n: float
    max_force_n: float


def e74_limits(fit: StaticFit, resolution_n: float) -> E74Limits:
    """ASTM E74-style standard deviation, LLF and class A/AA lower force limits.

    The deflection residuals are turned into force through the fit's local slope.

    Args:
        fit: the fitted curve (deflection as a function of force).
        resolution_n: the smallest force step the reading resolves, N, finite and >= 0.

    Raises:
        ParameterError: a bad resolution or a fit whose slope is 0 at a data point.
    """
    fix = "give the resolution in N, finite and >= 0"
    res = _finite("resolution_n", resolution_n, fix)
    if res < 0.0:
        raise ParameterError(f"resolution_n = {res!r} is negative; {fix}")
    if np.any(fit.sensitivity_m_per_n(fit.force_n) == 0.0):
        raise ParameterError("the fit has zero slope at a data point; no force residuals")
    r_f = fit.residuals_n
    s = math.sqrt(float(r_f @ r_f) / fit.dof)
    llf = max(E74_LLF_FACTOR * s, res)
    return E74Limits(
        std_dev_n=s,
        dof=fit.dof,
        resolution_n=res,
        llf_n=llf,
        class_a_lower_n=E74_CLASS_A_FACTOR * llf,
        class_aa_lower_n=E74_CLASS_AA_FACTOR * llf,
        max_force_n=fit.force_range_n[1],
    )


# ------------------------------------------------------------------------- the bundle

_SHA256 = re.compile(r"[0-9a-f]{64}")


@dataclass(frozen=True, eq=False)
class StaticCalibration:
    """Result of a static calibration.

    Attributes:
        fit: the curve fitted on the increasing-force points.
        iso376: ISO 376:2011-style per-step errors and class.
        e74: ASTM E74-style standard deviation, LLF and lower force limits.
        stiffness_n_per_m: ``1/c1`` for a straight line, N/m; None for degree 2 and 3.
        stiffness_u_n_per_m: its standard uncertainty (k = 1), N/m; None likewise.
        data_sha256: SHA-256 of the calibration data, 64 lower-case hex digits.
    """

    fit: StaticFit
    iso376: Iso376Result
    e74: E74Limits
    stiffness_n_per_m: float | None
    stiffness_u_n_per_m: float | None
    data_sha256: str

    def __post_init__(self) -> None:
        if not isinstance(self.data_sha256, str) or not _SHA256.fullmatch(self.data_sha256):
            raise ParameterError(
                f"data_sha256 = {self.data_sha256!r}; give the SHA-256 of the data as 64 "
                "lower-case hex digits"
            )

    def text(self) -> str:
        """Plain-text summary: fit, stiffness, per-step table (%), class, E74 limits."""
        fit = self.fit
        terms = " + ".join(
            f"c{j}·F^{j}" if j > 1 else ("c1·F" if j == 1 else "c0")
            for j in range(0 if fit.intercept else 1, fit.degree + 1)
        )
        lines = [
            "Static calibration",
            f"data SHA-256: {self.data_sha256}",
            f"fit: deflection = {terms}  (degree {fit.degree}, "
            f"{'with' if fit.intercept else 'without'} constant term, increasing loads)",
            f"  {fit.force_n.size} points, {fit.dof} degrees of freedom, "
            f"residual standard deviation s = {fit.residual_std_m * 1e6:.4g} µm",
        ]
        se = fit.standard_errors
        for j in range(0 if fit.intercept else 1, fit.degree + 1):
            unit = "m" if j == 0 else ("m/N" if j == 1 else f"m/N^{j}")
            lines.append(f"  c{j} = {fit.coefficients[j]:.9g} {unit}  (u = {se[j]:.3g} {unit})")
        if self.stiffness_n_per_m is not None:
            lines.append(
                f"stiffness k = 1/c1 = {self.stiffness_n_per_m:.7g} N/m, standard "
                f"uncertainty u(k) = {self.stiffness_u_n_per_m:.3g} N/m (coverage factor 1)"
            )
        lines.append("")
        lines.append("ISO 376:2011-style relative errors (%; class limits quoted from memory)")
        header = (
            f"{'force/N':>12} {'mean defl/mm':>13} {'b/%':>8} {'b′/%':>8} {'fc/%':>8} "
            f"{'v/%':>8}  class"
        )
        lines.append(header)

        def pct(value: float) -> str:
            return f"{'—':>8}" if math.isnan(value) else f"{value * 100:8.4f}"

        for st in self.iso376.steps:
            lines.append(
                f"{st.force_n:12.6g} {st.mean_deflection_m * 1e3:13.6f} "
                f"{pct(st.reproducibility)} {pct(st.repeatability)} {pct(st.interpolation)} "
                f"{pct(st.reversibility)}  {st.class_name or '—'}"
            )
        zero = ", ".join(
            f"{label}: {'—' if math.isnan(f) else f'{f * 100:.4f}'}"
            for label, f in zip(self.iso376.series_labels, self.iso376.zero_errors, strict=True)
        )
        lines.append(f"zero error f0 per series (%): {zero}")
        lines.append(
            f"class: {self.iso376.class_name or 'none (a step or f0 not met or not evaluated)'}"
        )
        e = self.e74
        lines.append("")
        lines.append("ASTM E74-style limits (factors 2.4, 400, 2000 from memory)")
        lines.append(
            f"  s = {e.std_dev_n:.4g} N ({e.dof} degrees of freedom), resolution "
            f"{e.resolution_n:.4g} N, LLF = {e.llf_n:.4g} N"
        )
        for name, limit in (("A", e.class_a_lower_n), ("AA", e.class_aa_lower_n)):
            note = " (above the largest calibrated force)" if limit > e.max_force_n else ""
            lines.append(f"  class {name} lower force limit: {limit:.6g} N{note}")
        return "\n".join(lines) + "\n"


def calibrate_static(
    cal: CalibrationSet,
    *,
    resolution_m: float,
    data_sha256: str,
    degree: int = 1,
    intercept: bool = True,
    step_rtol: float = 1e-6,
) -> StaticCalibration:
    """Fit the increasing-force points and evaluate ISO 376- and E74-style errors.

    Args:
        cal: the calibration set.
        resolution_m: resolution of the reading in m, > 0. E74 takes it in force units
            as ``resolution_m / min |dX/dF|`` over the calibrated range (the largest force
            step it can hide, evaluated at the fitted points).
        data_sha256: SHA-256 of the calibration data (64 lower-case hex digits).
        degree, intercept: as `fit_static`.
        step_rtol: as `evaluate_iso376`.

    Raises:
        ParameterError: from the steps named above.
    """
    res = _finite("resolution_m", resolution_m, "give the reading's resolution in m, > 0")
    if res <= 0.0:
        raise ParameterError(f"resolution_m = {res!r} must be > 0 m")
    up = cal.up
    if not np.any(up):
        raise ParameterError("the set has no increasing-force ('up') points to fit")
    loaded = up & (cal.force_n != 0.0)
    if not np.any(cal.deflection_m[loaded] != 0.0):
        raise ParameterError(
            "the cell did not deflect: every reading under load equals its zero reading, so "
            "no stiffness can be fitted; check that the transducer reads the cell and that "
            "the sheet holds its readings"
        )
    fit = fit_static(cal.force_n[up], cal.deflection_m[up], degree=degree, intercept=intercept)
    iso = evaluate_iso376(cal, fit, resolution_m=res, step_rtol=step_rtol)
    slope = float(np.min(np.abs(fit.sensitivity_m_per_n(fit.force_n))))
    if slope == 0.0:
        raise ParameterError("the fit has zero slope at a data point; check the readings")
    e74 = e74_limits(fit, res / slope)
    return StaticCalibration(
        fit=fit,
        iso376=iso,
        e74=e74,
        stiffness_n_per_m=fit.stiffness_n_per_m,
        stiffness_u_n_per_m=fit.stiffness_u_n_per_m,
        data_sha256=data_sha256,
    )
