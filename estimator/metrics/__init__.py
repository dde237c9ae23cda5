"""Response metrics of load changes in a force trace.

Three layers, all plain functions of arrays (no files, no printing except the table):

* :func:`step_metrics` — one change in a window of samples: initial and final levels,
  10–90 % rise time, overshoot, undershoot and preshoot, peak, and the settling time to a
  band measured from the start of the change and from its 50 % crossing (IEEE Std 181);
* :func:`detect_changes` — where the load changed in a force-estimate trace, one entry
  per change however much the estimate rings after it;
* :func:`change_table` / :func:`format_change_table` — the metrics of every detected
  change, for the observer estimate and, when given, for the static conversion ``k·x``.

Two reading conventions (``convention=``):

* ``"sampled"`` reads every instant off the sample grid, without interpolation: a
  crossing is the first sample at or beyond the level, the settling instant is the
  sample after the last one outside the band. This is how python-control's
  ``step_info`` reads a sampled response (see docs/method-metrics.md for the exact
  correspondence and the differences);
* ``"interpolated"`` (default) places each crossing between the two samples that
  straddle the level, by linear interpolation.

The peak is read off the samples in both conventions. Definitions, formulas and sources
are in docs/method-metrics.md.
"""

from estimator.metrics.changes import Change, ChangeRow, change_table, detect_changes
from estimator.metrics.step import (
    CONVENTIONS,
    HISTOGRAM_BINS,
    LEVEL_METHODS,
    StepMetrics,
    step_metrics,
)
from estimator.metrics.table_text import format_change_table

__all__ = [
    "CONVENTIONS",
    "HISTOGRAM_BINS",
    "LEVEL_METHODS",
    "Change",
    "ChangeRow",
    "StepMetrics",
    "change_table",
    "detect_changes",
    "format_change_table",
    "step_metrics",
]
