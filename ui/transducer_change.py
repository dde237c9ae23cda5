"""A run replayed with another transducer calibration: displacements again from counts.

A run stores every sample's raw ADC reading (``counts``) beside the displacement its own
profile's ``[transducer]`` table made of it. When the profile a run is replayed with
(``replay RUN --profile``, ``impact``, ``audit --profile``) calibrates the transducer
differently, the displacements are derived again from the counts with the new table,
``x = (counts · volts_per_count − zero_volts) · metres_per_volt`` (`daq.scaling`), and the
run's zero (tare) offsets, which are mean displacements, are carried through the same
change: the mean counts they stand for, read with the new table. A sample recorded
without a displacement (NaN) stays without one.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Sequence
from typing import Any

import numpy as np

__all__ = ["TransducerChange", "transducer_change"]


@dataclasses.dataclass(frozen=True)
class TransducerChange:
    """From the scaling a run was recorded with (``old``) to another (``new``)."""

    old: Any  # daq.scaling.Scaling
    new: Any

    def samples(self, block: np.ndarray) -> np.ndarray:
        """A copy of ``block`` (``SAMPLE_DTYPE``) with displacements from its counts."""
        out = block.copy()
        x = self.new.to_metres(block["counts"])
        out["displacement_m"] = np.where(np.isnan(block["displacement_m"]), np.nan, x)
        return out

    def offset_m(self, offset_m: float) -> float:
        """A zero offset (a mean displacement, m) as the new table reads its counts."""
        o, n = self.old, self.new
        counts = (offset_m / o.metres_per_volt + o.zero_volts) / o.volts_per_count
        return float((counts * n.volts_per_count - n.zero_volts) * n.metres_per_volt)

    def tares(self, tares: Sequence[Any]) -> list[Any]:
        """The run's tares (`ui.pipeline.Tare`) with their offsets carried over."""
        return [dataclasses.replace(t, offset_m=self.offset_m(t.offset_m)) for t in tares]


def transducer_change(recorded: Any, used: Any) -> TransducerChange | None:
    """The change from the recorded profile's transducer table to the used one's, or None
    when they are the same."""
    from ui.wiring import scaling_for

    if recorded.transducer == used.transducer:
        return None
    old, new = scaling_for(recorded), scaling_for(used)
    if old == new:  # only noise or resolution changed: the displacements stand
        return None
    return TransducerChange(old, new)
