"""Checks shared by the calibration modules: accepted ranges and input validation."""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
from numpy.typing import ArrayLike

from estimator.errors import ParameterError
from estimator.validation import finite_float as _finite

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
