"""Dynamic identification of the cell: ωn and ζ from a ring-down or a step, then the scale.

Numbers in, numbers out: every function takes sampled records as arrays (time in s,
displacement in m, shape (n,)) and returns frozen dataclasses. Method, formulas and
sources are in docs/method-identify.md. One method per module: `ringdown`, `step`,
`scale`; what they share in `common`.

* `identify_ringdown`: free decay after a release or a tap. With enough usable cycles,
  the logarithmic decrement regressed over all of them and the damped frequency from
  the spacing of the extrema; otherwise the two-exponential free-decay model fitted by
  nonlinear least squares.
* `identify_step`: nonlinear least squares of the closed-form step response
  (`estimator.plant.Plant.step_response`, all three regimes) for gain, ωn, ζ, start
  time and offset, with Jacobian confidence intervals and a residual check.
* `scale_from`: stiffness and mass from a known moving mass, a known stiffness or a
  known step force, uncertainties propagated to first order (GUM, JCGM 100:2008).

Uncertainties are standard uncertainties (coverage factor 1) unless the name says
``ci95``; 95 % intervals use the Student t quantile of the stated degrees of freedom.
"""

from estimator.identify.common import MIN_SAMPLES, Estimate
from estimator.identify.ringdown import (
    RingdownResult,
    damping_ratio_from_decrement,
    identify_ringdown,
    log_decrement,
)
from estimator.identify.scale import IdentifiedPlant, scale_from
from estimator.identify.step import STEP_PARAMETERS, StepFitResult, identify_step

__all__ = [
    "MIN_SAMPLES",
    "STEP_PARAMETERS",
    "Estimate",
    "IdentifiedPlant",
    "RingdownResult",
    "StepFitResult",
    "damping_ratio_from_decrement",
    "identify_ringdown",
    "identify_step",
    "log_decrement",
    "scale_from",
]
