"""Tests of estimator.metrics against python-control, closed forms and hand-made waveforms.

Sources:
* python-control 0.10.2, ``control.step_info`` (its source, control/timeresp.py): 10–90 %
  rise time and 2 % settling threshold relative to the final value, all read off the
  sample grid without interpolation.
* IEEE Std 181-2011, "IEEE Standard for Transitions, Pulses, and Related Waveforms"
  (definitions from memory): reference levels as percentages of the state-level
  difference, settling time counted from the 50 % reference level instant, histogram
  mode method for state levels.
* Second-order step responses: the closed forms of estimator.plant (Ogata, "Modern
  Control Engineering", transient response of second-order systems; edition from
  memory: 5th ed., ch. 5) and ``scipy.optimize.brentq`` for exact crossing instants.
"""

from __future__ import annotations

import math

import control  # python-control: reference implementation of step metrics
import numpy as np
import pytest
import scipy.optimize

from estimator.errors import EstimatorError, ParameterError
from estimator.metrics import (
    Change,
    ChangeRow,
    StepMetrics,
    change_table,
    detect_changes,
    format_change_table,
    step_metrics,
)
from estimator.plant import Plant

# ------------------------------------------------------------------------------ helpers

ZETAS = (0.1, 0.2, 0.4, 0.7, 1.0, 1.4, 2.0)
WNS_RAD_S = (2.0 * math.pi * 12.0, 2.0 * math.pi * 90.0)
DT_S = 2e-4  # one grid for both ωn: ωn·dt is 0.015 and 0.11 rad


def _unit_response(wn: float, zeta: float, t: np.ndarray) -> np.ndarray:
    """Unit step response (final value 1) of the closed-form second-order system."""
    plant = Plant.from_modal(wn, zeta, 1.0)
    return plant.step_response(t, 1.0)


def _record(wn: float, zeta: float) -> np.ndarray:
    """Time grid from 0 to three settling times (at least 200 samples)."""
    ts = Plant.from_modal(wn, zeta, 1.0).settling_time_s(0.02)
    return np.arange(0.0, max(3.0 * ts, 200 * DT_S), DT_S)


def _exact_first_crossing(wn: float, zeta: float, level: float, t: np.ndarray) -> float:
    """First instant the continuous unit response reaches ``level`` (brentq on the grid
    bracket; the response is monotone up to its first peak)."""
    y = _unit_response(wn, zeta, t)
    i = int(np.argmax(y >= level))
    return float(
        scipy.optimize.brentq(
            lambda s: float(_unit_response(wn, zeta, np.asarray(s))) - level,
            t[i - 1],
            t[i],
            xtol=1e-15,
        )
    )


def _staircase(
    t: np.ndarray, times: list[float], steps: list[float], plant: Plant, offset: float
) -> np.ndarray:
    """Sum of the plant's closed-form step responses, scaled to force (k·x), plus offset."""
    y = np.full(t.shape, offset)
    for t0, a in zip(times, steps, strict=True):
        y += plant.step_response(t - t0, a) * plant.stiffness_n_per_m
    return y


# ------------------------------------------------------------ python-control step_info


@pytest.mark.parametrize("amplitude", [1.0, -3.7])
@pytest.mark.parametrize("wn", WNS_RAD_S)
@pytest.mark.parametrize("zeta", ZETAS)
def test_sampled_convention_matches_step_info(zeta: float, wn: float, amplitude: float) -> None:
    # Reference: control.step_info on the same samples, with the known final value
    # (python-control 0.10.2 takes rise levels and the 2 % threshold relative to the final
    # value, with the initial level taken as 0, which is what this response starts from).
    t = _record(wn, zeta)
    y = amplitude * _unit_response(wn, zeta, t)
    ref = control.step_info(y, timepts=t, final_output=amplitude)
    got = step_metrics(t, y, initial=0.0, final=amplitude, convention="sampled")
    # Tolerance: one sample period on every instant, as the issue asks; both read the
    # same grid, so in practice they agree exactly.
    assert got.rise_time_s == pytest.approx(ref["RiseTime"], abs=DT_S)
    assert got.settling_time_s == pytest.approx(ref["SettlingTime"], abs=DT_S)
    assert got.peak_time_s == pytest.approx(ref["PeakTime"], abs=DT_S)
    # Same samples, same arithmetic: overshoot to 1e-9 % and peak to rounding.
    assert got.overshoot_pct == pytest.approx(ref["Overshoot"], abs=1e-9)
    assert abs(got.peak_value) == pytest.approx(ref["Peak"], rel=1e-12)
    # And the overshoot is the handbook one, exp(−ζπ/√(1−ζ²)) (Ogata), to the error of
    # reading the peak off the grid: (ωd·dt)²/2 relative at most, below 0.7 % here.
    expected_os = Plant.from_modal(wn, zeta, 1.0).peak_overshoot() * 100.0
    assert got.overshoot_pct == pytest.approx(expected_os, abs=0.7 * max(expected_os, 1e-3))


def test_preshoot_is_step_info_undershoot_on_a_non_minimum_phase_response() -> None:
    # (1 − s)/(s² + s + 1) first moves the wrong way: python-control calls that excursion
    # "Undershoot" (beyond the initial level 0, against the final value); here it is the
    # preshoot (before the 50 % crossing) and must agree to rounding.
    sys = control.tf([-1.0, 1.0], [1.0, 1.0, 1.0])
    t = np.arange(0.0, 20.0, 1e-3)
    resp = control.step_response(sys, timepts=t)
    y = np.asarray(resp.outputs, dtype=float)
    ref = control.step_info(y, timepts=t, final_output=1.0)
    got = step_metrics(t, y, initial=0.0, final=1.0, convention="sampled")
    assert ref["Undershoot"] > 10.0  # the reference really has a wrong-way excursion
    assert got.preshoot_pct == pytest.approx(ref["Undershoot"], abs=1e-9)
    assert got.overshoot_pct == pytest.approx(ref["Overshoot"], abs=1e-9)
    assert got.rise_time_s == pytest.approx(ref["RiseTime"], abs=1e-3)  # one sample
    assert got.settling_time_s == pytest.approx(ref["SettlingTime"], abs=1e-3)  # one sample


@pytest.mark.parametrize("zeta", [0.1, 0.4, 0.7, 1.0, 2.0])
def test_interpolated_convention_against_exact_closed_form(zeta: float) -> None:
    # Exact instants: brentq on the closed form (rise) and Plant.settling_time_s (settling).
    wn = WNS_RAD_S[1]
    t = _record(wn, zeta)
    y = _unit_response(wn, zeta, t)
    exact_rise = _exact_first_crossing(wn, zeta, 0.9, t) - _exact_first_crossing(wn, zeta, 0.1, t)
    exact_settle = Plant.from_modal(wn, zeta, 1.0).settling_time_s(0.02)
    inter = step_metrics(t, y, initial=0.0, final=1.0)
    sampled = step_metrics(t, y, initial=0.0, final=1.0, convention="sampled")
    # Linear interpolation errs by about y''·dt²/(8·y') in time; at ωn·dt = 0.11 this is
    # a few percent of a sample at most, so 0.1·dt is a deliberate but safe bound.
    assert inter.rise_time_s == pytest.approx(exact_rise, abs=0.1 * DT_S)
    assert inter.settling_time_s == pytest.approx(exact_settle, abs=0.1 * DT_S)
    # The sampled settling instant is the first sample inside the band for good: never
    # before the exact instant and less than one period after it.
    assert 0.0 <= sampled.settling_time_s - exact_settle < DT_S


# ---------------------------------------------------- IEEE Std 181 hand-made waveforms


def test_ieee181_piecewise_waveform_with_preshoot_overshoot_and_undershoot() -> None:
    # Waveform (s, N), linear between the points, initial 0 N, final 10 N, change at t = 0:
    #   (−1, 0) (0, 0) (0.5, −1) (1.5, 12) (2.5, 9) (3.5, 10) (5, 10)
    # By hand, on the segment 0.5 → 1.5 s (slope 13 N/s):
    #   10 % (1 N):  t = 0.5 + 2/13 = 0.6538462 s
    #   50 % (5 N):  t = 0.5 + 6/13 = 0.9615385 s
    #   90 % (9 N):  t = 0.5 + 10/13 = 1.2692308 s      rise = 8/13 = 0.6153846 s
    # preshoot 1/10 = 10 %, overshoot 2/10 = 20 % (peak 12 N at 1.5 s), undershoot after
    # first reaching 10 N: 1/10 = 10 %. Band ±2 % = ±0.2 N: the signal enters 9.8 N for
    # good on 2.5 → 3.5 s (slope 1 N/s) at t = 2.5 + 0.8 = 3.3 s, so the settling time is
    # 3.3 s from the start and 3.3 − 0.9615385 = 2.3384615 s from the 50 % crossing.
    knots_t = [-1.0, 0.0, 0.5, 1.5, 2.5, 3.5, 5.0]
    knots_y = [0.0, 0.0, -1.0, 12.0, 9.0, 10.0, 10.0]
    dt = 7e-4  # not commensurate with the knots
    t = -1.0 + dt * np.arange(int(6.0 / dt) + 1)
    y = np.interp(t, knots_t, knots_y)
    m = step_metrics(t, y, t_change=0.0)
    # Median levels: 0 before; the last half of [0, 5] s is 60 % at exactly 10 N.
    assert (m.initial, m.final) == (0.0, 10.0)
    # Crossings lie on straight segments, so interpolation is exact up to rounding.
    tight = 1e-9
    assert m.low_instant_s == pytest.approx(0.5 + 2 / 13, abs=tight)
    assert m.mid_instant_s == pytest.approx(0.5 + 6 / 13, abs=tight)
    assert m.high_instant_s == pytest.approx(0.5 + 10 / 13, abs=tight)
    assert m.rise_time_s == pytest.approx(8 / 13, abs=tight)
    assert m.settling_time_s == pytest.approx(3.3, abs=tight)
    assert m.settling_time_mid_s == pytest.approx(3.3 - (0.5 + 6 / 13), abs=tight)
    # Extremes fall between samples; the sampled peak is within one slope·dt (13 N/s).
    assert m.preshoot_pct == pytest.approx(10.0, abs=13 * dt / 10 * 100)
    assert m.overshoot_pct == pytest.approx(20.0, abs=13 * dt / 10 * 100)
    assert m.undershoot_pct == pytest.approx(10.0, abs=3 * dt / 10 * 100)
    assert m.peak_time_s == pytest.approx(1.5, abs=dt)

    s = step_metrics(t, y, t_change=0.0, convention="sampled")
    # Sampled: every instant is a grid point at or after the exact one, within dt.
    for got, exact in [
        (s.low_instant_s, 0.5 + 2 / 13),
        (s.mid_instant_s, 0.5 + 6 / 13),
        (s.high_instant_s, 0.5 + 10 / 13),
        (s.settled_instant_s, 3.3),
    ]:
        assert np.any(t == got)
        assert 0.0 <= got - exact < dt


def test_ieee181_ramp_then_hold() -> None:
    # 0 N until 1 s, linear to 10 N at 2 s, then 10 N. By hand: 10/50/90 % at 1.1/1.5/1.9 s,
    # rise 0.8 s; the band 10 ± 0.2 N is entered at 9.8 N, t = 1.98 s, for good:
    # settling 0.98 s from the start of the change, 0.48 s from the 50 % crossing (IEEE 181).
    dt = 1e-3
    t = dt * np.arange(4001)
    y = np.clip(10.0 * (t - 1.0), 0.0, 10.0)
    m = step_metrics(t, y, t_change=1.0, band=0.02)
    tight = 1e-9  # straight segments: exact to rounding
    assert m.rise_time_s == pytest.approx(0.8, abs=tight)
    assert m.mid_instant_s == pytest.approx(1.5, abs=tight)
    assert m.settling_time_s == pytest.approx(0.98, abs=tight)
    assert m.settling_time_mid_s == pytest.approx(0.48, abs=tight)
    assert (m.overshoot_pct, m.undershoot_pct, m.preshoot_pct) == (0.0, 0.0, 0.0)
    # A wider band: 5 % enters at 9.5 N, t = 1.95 s → 0.45 s from the 50 % crossing.
    assert step_metrics(t, y, t_change=1.0, band=0.05).settling_time_mid_s == pytest.approx(
        0.45, abs=tight
    )


def test_ieee181_step_with_overshoot_and_exponential_decay() -> None:
    # 0 N before t = 0; linear rise to A(1 + p) at tr, then A(1 + p·e^(−(t − tr)/τ)).
    # A = 5 N, p = 0.25, tr = 10 ms, τ = 20 ms. By hand:
    #   t50 = 0.5·tr/(1 + p) = 4 ms; rise = 0.8·tr/(1 + p) = 6.4 ms; overshoot 25 %
    #   band 2 %: p·e^(−(t − tr)/τ) = 0.02 → ts = tr + τ·ln(12.5) = 60.5146 ms from the
    #   start, ts − t50 = 56.5146 ms from the 50 % crossing (IEEE Std 181).
    A, p, tr, tau = 5.0, 0.25, 0.010, 0.020
    dt = 1e-4
    t = dt * np.arange(-500, 3001)
    ramp = A * (1 + p) * np.clip(t / tr, 0.0, 1.0)
    y = np.where(t <= tr, ramp, A * (1.0 + p * np.exp(-(t - tr) / tau)))
    m = step_metrics(t, y, t_change=0.0, initial=0.0, final=A)
    ts = tr + tau * math.log(p / 0.02)
    # Interpolating an exponential errs by at most dt²/(8τ) ≈ 6e-8 s in time.
    assert m.settling_time_s == pytest.approx(ts, abs=1e-7)
    assert m.settling_time_mid_s == pytest.approx(ts - 0.5 * tr / (1 + p), abs=1e-7)
    assert m.rise_time_s == pytest.approx(0.8 * tr / (1 + p), abs=1e-9)
    assert m.overshoot_pct == pytest.approx(25.0, abs=1e-9)  # the peak is on a grid point
    assert m.peak_value == pytest.approx(A * (1 + p), rel=1e-12)
    assert m.peak_time_s == pytest.approx(tr, abs=dt)


@pytest.mark.parametrize("sign", [1.0, -1.0])
def test_histogram_levels_recover_the_two_states(sign: float) -> None:
    # IEEE Std 181 histogram mode method: a noisy ringing step from 2 N to 12 N (or its
    # mirror). Each level is the centre of a modal bin, so it is within one bin width of
    # the true level (the noise, σ = 0.02 N, spans a few bins around it).
    rng = np.random.default_rng(181)
    dt = 1e-3
    t = dt * np.arange(-500, 1500)
    plant = Plant.from_modal(2 * math.pi * 20, 0.3, 1.0)
    y = sign * (2.0 + 10.0 * plant.step_response(t)) + rng.normal(0.0, 0.02, t.size)
    m = step_metrics(t, y, t_change=0.0, levels="histogram")
    bin_width = (y.max() - y.min()) / 100
    assert m.level_method == "histogram"
    assert m.initial == pytest.approx(sign * 2.0, abs=bin_width)
    assert m.final == pytest.approx(sign * 12.0, abs=bin_width)
    med = step_metrics(t, y, t_change=0.0)  # median levels: noise-limited, tighter
    assert med.initial == pytest.approx(sign * 2.0, abs=0.01)
    assert med.final == pytest.approx(sign * 12.0, abs=0.01)


# ------------------------------------------------------------------- change detection

STAIR_TIMES = [1.0, 2.5, 3.2, 5.0, 7.3, 9.0, 10.4]
STAIR_STEPS = [20.0, -8.0, 5.0, 30.0, -45.0, 2.5, -4.0]
STAIR_OFFSET = 3.0


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_detect_changes_on_a_ringing_noisy_staircase(seed: int) -> None:
    # Each load step rings (ζ = 0.15: 62 % overshoot, about 4 visible cycles at 30 Hz)
    # and carries white noise; the detector must report each step once.
    rng = np.random.default_rng(seed)
    dt = 1e-3
    t = dt * np.arange(12000)
    plant = Plant.from_modal(2 * math.pi * 30, 0.15, 1e4)
    y = _staircase(t, STAIR_TIMES, STAIR_STEPS, plant, STAIR_OFFSET)
    y += rng.normal(0.0, 0.05, t.size)
    found = detect_changes(t, y, min_hold_s=0.5)
    assert len(found) == len(STAIR_TIMES)
    levels = np.cumsum([STAIR_OFFSET, *STAIR_STEPS])
    for j, change in enumerate(found):
        # The last sample at the old level is the step's own sample (the response is 0
        # there); noise and the band of max(4σ, 2 %) allow a few samples' lag.
        assert 0 <= change.index - round(STAIR_TIMES[j] / dt) <= 3
        assert change.t_start_s == t[change.index]
        # Medians of ≥ 350 samples of σ = 0.05 N: σ_median ≈ 0.003 N; 0.02 N ≈ 6σ.
        assert change.level_before_n == pytest.approx(levels[j], abs=0.02)
        assert change.level_after_n == pytest.approx(levels[j + 1], abs=0.02)
        assert change.step_n == pytest.approx(STAIR_STEPS[j], abs=0.04)


@pytest.mark.parametrize("zeta", [0.01, 0.05])
def test_a_long_ringing_transient_is_one_change(zeta: float) -> None:
    # ζ = 0.01 at 30 Hz: 97 % overshoot and ringing for seconds, longer than the hold.
    rng = np.random.default_rng(7)
    dt = 1e-3
    t = dt * np.arange(6000)
    plant = Plant.from_modal(2 * math.pi * 30, zeta, 1e4)
    y = _staircase(t, [2.0], [10.0], plant, 0.0) + rng.normal(0.0, 0.05, t.size)
    found = detect_changes(t, y, min_hold_s=0.5)
    assert [c.index for c in found] in ([2000], [2001], [2002])


def test_changes_closer_than_the_hold_are_merged() -> None:
    dt = 1e-3
    t = dt * np.arange(4000)
    plant = Plant.from_modal(2 * math.pi * 40, 0.5, 1.0)
    y = _staircase(t, [1.5, 1.6], [10.0, 5.0], plant, 0.0)
    found = detect_changes(t, y, min_hold_s=0.5)
    assert len(found) == 1
    assert found[0].index in (1500, 1501, 1502)
    assert found[0].level_before_n == pytest.approx(0.0, abs=1e-9)
    assert found[0].level_after_n == pytest.approx(15.0, abs=1e-6)
    # With a shorter hold the two steps are apart.
    assert len(detect_changes(t, y, min_hold_s=0.08)) == 2


def test_min_step_and_noise_options() -> None:
    rng = np.random.default_rng(11)
    dt = 1e-3
    t = dt * np.arange(5000)
    plant = Plant.from_modal(2 * math.pi * 40, 0.5, 1.0)
    y = _staircase(t, [1.5, 3.0], [10.0, 0.3], plant, 0.0) + rng.normal(0.0, 0.005, t.size)
    assert len(detect_changes(t, y, min_step_n=1.0)) == 1  # 0.3 N is below 1 N
    assert len(detect_changes(t, y, min_step_n=0.2)) == 2
    # A stated noise of 0.1 N makes the default smallest step 10σ = 1 N.
    assert len(detect_changes(t, y, noise_n=0.1)) == 1
    # The estimated noise (σ = 0.005 N → 0.05 N) or 1 % of the range (0.103 N) allows both.
    assert len(detect_changes(t, y)) == 2


def test_no_change_in_noise_and_an_observer_start_up() -> None:
    rng = np.random.default_rng(3)
    dt = 1e-3
    t = dt * np.arange(60000)
    y = 4.0 + rng.normal(0.0, 0.5, t.size)
    assert detect_changes(t, y) == []
    # An estimate that starts at 0 and converges to the load within 30 ms, then one step:
    # the start-up is not a change (it lies within half a hold of the start).
    z = 4.0 * (1.0 - np.exp(-t / 0.01)) + rng.normal(0.0, 0.01, t.size)
    z[t >= 30.0] += 6.0
    found = detect_changes(t, z)
    assert [c.index for c in found] == [29999]


# ---------------------------------------------------------------- change table and k·x


def test_change_table_shows_the_observer_settling_sooner_than_k_x() -> None:
    # A lightly damped cell (ζ = 0.03, 40 Hz) read statically as k·x, against an
    # observer-like estimate (ζ = 0.7, 150 Hz), with white noise of 2 mN and 10 mN.
    # The static noise is kept small on purpose: the cell's first extremum inside the
    # 2 % band lies only 0.094 % of the step below the band's edge (11 mN for the 12 N
    # step); noise reaching it would move the measured settling by half a ringing period
    # (12.5 ms). At σ = 2 mN the margin is 5.6σ.
    rng = np.random.default_rng(42)
    dt = 1e-4
    t = dt * np.arange(70000)
    times, steps = [1.0, 3.0, 5.0], [20.0, -12.0, 30.0]
    cell = Plant.from_modal(2 * math.pi * 40, 0.03, 5e4)
    fast = Plant.from_modal(2 * math.pi * 150, 0.7, 5e4)
    static = _staircase(t, times, steps, cell, 1.0) + rng.normal(0.0, 0.002, t.size)
    est = _staircase(t, times, steps, fast, 1.0) + rng.normal(0.0, 0.01, t.size)
    rows = change_table(t, est, static, min_hold_s=0.5)
    assert len(rows) == 3
    for row, t0 in zip(rows, times, strict=True):
        # Settling from the detected start vs the exact closed-form settling time
        # (Plant.settling_time_s, brentq): the start lags the true step by up to
        # ~2 samples (detector band of 2 %), so 5 samples of tolerance.
        lag = row.change.t_start_s - t0
        assert 0.0 <= lag <= 3 * dt
        assert row.observer.settling_time_s + lag == pytest.approx(
            fast.settling_time_s(0.02), abs=5 * dt
        )
        assert row.static is not None
        assert row.static.settling_time_s + lag == pytest.approx(
            cell.settling_time_s(0.02), abs=5 * dt
        )
        # Static overshoot: the handbook peak overshoot (Ogata); the noise (0.02 % of the
        # smallest step at 4σ) and the grid ((ωd·dt)²/2 = 3e-4 relative) stay below 0.1 %.
        assert row.static.overshoot_pct == pytest.approx(cell.peak_overshoot() * 100, abs=0.1)
        # Observer levels in the table are the detector's levels: same medians, except
        # that the table's window stops 2 % of the hold before the next change (a
        # difference far below the 1 mN of a few noise σ over thousands of samples).
        assert row.observer.initial == pytest.approx(row.change.level_before_n, abs=1e-3)
        assert row.observer.final == pytest.approx(row.change.level_after_n, abs=1e-3)
        expected_ratio = cell.settling_time_s(0.02) / fast.settling_time_s(0.02)
        assert expected_ratio > 20  # the premise of the comparison
        assert row.settling_ratio == pytest.approx(expected_ratio, rel=0.1)

    text = format_change_table(rows)
    lines = text.splitlines()
    assert len(lines) == 1 + len(rows) + 1  # header, rows, footnote
    for unit in ("t_start s", "before N", "rise ms", "overshoot %", "settle50 ms", "k·x settle"):
        assert unit in lines[0]
    assert lines[1].split()[1] == f"{rows[0].change.t_start_s:.4f}"


def test_table_without_static_and_unsettled_entries() -> None:
    dt = 1e-3
    t = dt * np.arange(3000)
    cell = Plant.from_modal(2 * math.pi * 5, 0.01, 1.0)  # far from settled after 1.5 s
    y = _staircase(t, [1.5], [10.0], cell, 0.0)
    # The change is given (this ringing outlasts any sensible hold time).
    given = Change(t_start_s=1.5, index=1500, level_before_n=0.0, level_after_n=10.0)
    rows = change_table(t, y, changes=[given])
    assert len(rows) == 1 and rows[0].static is None and rows[0].change is given
    assert math.isnan(rows[0].observer.settling_time_s)
    assert math.isnan(rows[0].settling_ratio)
    text = format_change_table(rows)
    assert "k·x" not in text
    assert text.splitlines()[1].split()[7] == "-"  # the settle column
    assert "no load change found" in format_change_table([])


def test_band_floor_widens_the_band() -> None:
    dt = 1e-3
    t = dt * np.arange(3001)
    y = np.clip(10.0 * (t - 1.0), 0.0, 10.0)
    # Floor 0.5 N beats 2 % of 10 N = 0.2 N: the band is entered at 9.5 N, t = 1.95 s.
    m = step_metrics(t, y, t_change=1.0, band_floor=0.5)
    assert m.band_abs == 0.5
    assert m.settling_time_s == pytest.approx(0.95, abs=1e-9)


# ---------------------------------------------------------------------------- errors


def test_errors_name_the_field() -> None:
    t = np.linspace(0.0, 1.0, 11)
    y = np.where(t > 0.5, 1.0, 0.0)
    with pytest.raises(ParameterError, match="convention"):
        step_metrics(t, y, convention="nearest")
    with pytest.raises(ParameterError, match="levels"):
        step_metrics(t, y, levels="mean")
    with pytest.raises(ParameterError, match="band"):
        step_metrics(t, y, band=0.0)
    with pytest.raises(ParameterError, match="t_change"):
        step_metrics(t, y, t_change=2.0)
    with pytest.raises(ParameterError, match="rise_limits"):
        step_metrics(t, y, rise_limits=(0.9, 0.1))
    with pytest.raises(EstimatorError, match="initial and final"):
        step_metrics(t, np.ones(11))
    with pytest.raises(EstimatorError, match="time_s"):
        step_metrics(t[::-1], y)
    with pytest.raises(EstimatorError, match="non-finite"):
        step_metrics(t, np.where(t > 0.5, np.nan, 0.0))
    with pytest.raises(EstimatorError, match="shape"):
        step_metrics(t, y[:5])
    with pytest.raises(ParameterError, match="min_hold_s"):
        detect_changes(t, y, min_hold_s=0.0)
    with pytest.raises(ParameterError, match="min_step_n"):
        detect_changes(t, y, min_step_n=-1.0)


def test_values_are_frozen() -> None:
    c = Change(t_start_s=1.0, index=10, level_before_n=0.0, level_after_n=2.0)
    with pytest.raises(AttributeError):
        c.index = 3  # type: ignore[misc]
    t = np.linspace(0.0, 1.0, 11)
    m = step_metrics(t, t)
    assert isinstance(m, StepMetrics)
    assert isinstance(ChangeRow(c, m).settling_ratio, float)
