"""Numbers in, numbers out: plant model, observer, smoother, identification.

`estimator` never imports `daq` or `ui`, and touches no files except its own
parameter files (cell profiles).
"""

from estimator.errors import EstimatorError

__all__ = ["EstimatorError"]
