"""Bytes in, samples out: frame decoders, sample sources and the simulated cell.

`daq` never imports `estimator` or `ui`.
"""

from daq.errors import DaqError

__all__ = ["DaqError"]
