"""From ADC counts to metres and back (a linear transducer chain).

displacement_m = (counts · volts_per_count − zero_volts) · metres_per_volt
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike

from daq.errors import FramingError

__all__ = ["Scaling"]


def _check_finite(name: str, value: float, *, nonzero: bool = False) -> None:
    if isinstance(value, bool) or not isinstance(value, (int, float, np.floating, np.integer)):
        raise FramingError(f"Scaling: {name}={value!r} is not a number; give a real number")
    if not math.isfinite(float(value)):
        raise FramingError(f"Scaling: {name}={value!r} is not finite; give a finite number")
    if nonzero and float(value) == 0.0:
        raise FramingError(f"Scaling: {name}={value!r} must not be zero; give a non-zero gain")


@dataclass(frozen=True)
class Scaling:
    """Linear scaling of a transducer read by an ADC.

    Attributes:
        volts_per_count: ADC gain, V per count (non-zero, finite).
        metres_per_volt: transducer sensitivity, m per V (non-zero, finite).
        zero_volts: transducer output at zero displacement, V.
        adc_bits: ADC width; counts are clipped to the signed range
            [−2^(bits−1), 2^(bits−1) − 1] by `to_counts` (2..63).
    """

    volts_per_count: float
    metres_per_volt: float
    zero_volts: float = 0.0
    adc_bits: int = 24

    def __post_init__(self) -> None:
        _check_finite("volts_per_count", self.volts_per_count, nonzero=True)
        _check_finite("metres_per_volt", self.metres_per_volt, nonzero=True)
        _check_finite("zero_volts", self.zero_volts)
        if (
            isinstance(self.adc_bits, bool)
            or not isinstance(self.adc_bits, (int, np.integer))
            or not 2 <= int(self.adc_bits) <= 63
        ):
            raise FramingError(
                f"Scaling: adc_bits={self.adc_bits!r} is out of range; give an integer 2..63"
            )

    @property
    def metres_per_count(self) -> float:
        """Signed displacement of one count, m."""
        return float(self.volts_per_count) * float(self.metres_per_volt)

    @property
    def resolution_m(self) -> float:
        """Size of one ADC step in displacement, m (always positive)."""
        return abs(self.metres_per_count)

    @property
    def count_range(self) -> tuple[int, int]:
        """Smallest and largest count the ADC can report."""
        half = 1 << (int(self.adc_bits) - 1)
        return -half, half - 1

    def to_metres(self, counts: ArrayLike) -> np.ndarray:
        """Counts (any shape) to displacement in m, float64, same shape."""
        c = np.asarray(counts, dtype=np.float64)
        return (c * float(self.volts_per_count) - float(self.zero_volts)) * float(
            self.metres_per_volt
        )

    def to_counts(self, metres: ArrayLike) -> np.ndarray:
        """Displacement in m (any shape) to ADC counts, int64, same shape.

        Rounds to the nearest count (ADC quantisation) and clips to `count_range`.
        Use `to_counts_clipped` to learn how many values were clipped.
        """
        return self.to_counts_clipped(metres)[0]

    def to_counts_clipped(self, metres: ArrayLike) -> tuple[np.ndarray, int]:
        """Like `to_counts`, also returning how many values were clipped.

        A non-finite displacement gives count 0 and is counted as clipped.
        """
        m = np.asarray(metres, dtype=np.float64)
        exact = (m / float(self.metres_per_volt) + float(self.zero_volts)) / float(
            self.volts_per_count
        )
        lo, hi = self.count_range
        bad = ~np.isfinite(exact)
        rounded = np.rint(np.where(bad, 0.0, exact))  # round half to even
        over = (rounded > hi) | (rounded < lo) | bad
        n_clipped = int(np.count_nonzero(over))
        counts = np.clip(rounded, lo, hi).astype(np.int64)
        return counts, n_clipped
