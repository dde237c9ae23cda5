"""Response metrics of load changes in a force trace.

Three layers, all plain functions of arrays (no files, no printing except the table),
one module each:

* :func:`step_metrics` (``step.py``) — one change in a window of samples: initial and
  final levels, 10–90 % rise time, overshoot, undershoot and preshoot, peak, and the
  settling time to a band measured from the start of the change and from its 50 %
  crossing (IEEE Std 181);
* :func:`detect_changes` (``changes.py``) — where the load changed in a force-estimate
  trace, one entry per change however much the estimate rings after it;
* :func:`change_table` (``changes.py``) / :func:`format_change_table` (``table_text.py``)
  — the metrics of every detected change, for the observer estimate and, when given, for
  the static conversion ``k·x``.

The reading conventions (sampled, interpolated) are in `estimator.metrics.step`; the
same change table from columns read a block at a time, for records of any length, in
`estimator.metrics.changes_in_blocks`. Definitions, formulas and sources are in
docs/method-metrics.md.
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
