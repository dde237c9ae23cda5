"""Checks of numeric arguments shared by the `estimator` modules."""

from __future__ import annotations

import math

from estimator.errors import ParameterError

__all__ = ["finite_float"]


def finite_float(name: str, value: object, fix: str) -> float:
    """Return ``value`` as a float, or raise ParameterError naming ``name`` and ``fix``.

    Bools, non-numbers, NaN and infinities are refused.
    """
    if isinstance(value, bool):
        raise ParameterError(f"{name} = {value!r} is a bool, not a number; {fix}")
    try:
        number = float(value)  # type: ignore[arg-type]
    except (TypeError, ValueError):
        raise ParameterError(f"{name} = {value!r} is not a number; {fix}") from None
    if not math.isfinite(number):
        raise ParameterError(f"{name} = {number!r} is not finite (NaN or inf refused); {fix}")
    return number
