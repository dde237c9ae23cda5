"""ISO 376:2011-style relative errors per force step and the class each meets."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from estimator.calibration.checks import _LIMIT_SLACK
from estimator.calibration.data import CalibrationSet
from estimator.calibration.fit import StaticFit
from estimator.errors import ParameterError
from estimator.validation import finite_float as _finite


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
