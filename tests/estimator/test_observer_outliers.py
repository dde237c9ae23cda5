"""Tests of the observer's outliers, bursts and steps: spikes rejected and counted, bursts
rejected as one, spikes of any size, spikes inside a wide prediction taken back in
hindsight, real steps kept and settled sooner than k·x.

References, named again beside each check: the spike-free run of the same record; truth
by ``scipy.signal.lsim`` (SciPy); the 2 % settling band (common practice). Random data are
seeded. The cells are invented.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.signal

from estimator.observer import (
    FLAG_DEFERRED,
    FLAG_OUTLIER_BEFORE,
    FLAG_REJECTED,
    ForceObserver,
    ObserverTuning,
    judged_outliers,
)
from estimator.plant import Plant
from estimator.settling import time_to_settle
from tests.estimator.observer_cell import CELL, DT, NOISE, STIFF, make_observer, step_run

SPIKES = np.array([1000, 2000, 3000, 4000, 5000])


@pytest.fixture(scope="module")
def spike_runs() -> tuple[np.ndarray, np.ndarray, ForceObserver]:
    """A held 20 N load with and without five alternating 50σ spikes (seed 11)."""
    n = 6000
    rng = np.random.default_rng(11)
    t = np.arange(n) * DT
    z = 20.0 / STIFF + rng.normal(0.0, NOISE, n)
    spiky = z.copy()
    spiky[SPIKES] += np.array([1, -1, 1, -1, 1]) * 50 * NOISE
    clean = make_observer().process(t, z)
    obs = make_observer()
    return clean, obs.process(t, spiky), obs


def test_spikes_are_rejected_counted_and_harmless(spike_runs) -> None:
    # Source: the spike-free run of the same record (the reference a spike must not move).
    clean, est, obs = spike_runs
    assert obs.counters.rejected == 5 and obs.counters.suspect == 5
    assert np.all(est["flags"][SPIKES] & FLAG_REJECTED)
    assert np.all(est["flags"][SPIKES + 1] & FLAG_OUTLIER_BEFORE)
    assert np.count_nonzero(est["flags"]) == 10
    # Every row but the suspect ones (which show both hypotheses) is within 3 of its own
    # reported σ of the spike-free estimate; from 10 ms after a spike, within 3 of the
    # spike-free run's σ.
    rows = np.setdiff1d(np.arange(est.size), SPIKES)
    dev = np.abs(est["force_n"] - clean["force_n"])
    assert np.all(dev[rows] <= 3.0 * est["force_u_n"][rows])
    later = np.concatenate([np.arange(s + 20, s + 1000) for s in SPIKES])
    assert np.all(dev[later] <= 3.0 * clean["force_u_n"][later])


def test_spikes_leave_the_force_within_three_spike_free_sigma(spike_runs) -> None:
    # The requirement read strictly: the spike-free run's σ as the yardstick.
    clean, est, _ = spike_runs
    rows = np.setdiff1d(np.arange(est.size), SPIKES)
    dev = np.abs(est["force_n"] - clean["force_n"])
    assert np.max(dev[rows] / clean["force_u_n"][rows]) <= 3.0


@pytest.mark.parametrize("length", [2, 3])
def test_a_burst_of_outliers_is_rejected_as_one(length: int) -> None:
    # Common practice: interference spoils a few samples in a row. Bursts of 2 and 3
    # consecutive 50σ samples (one sign per burst) on a held 20 N load: every sample of a
    # burst is held, then judged an outlier together, and counted; from 10 ms after a burst
    # the estimate is within 3σ of the spike-free run's (the reference). Before bursts were
    # held together, the second sample of a burst confirmed the first as a load change:
    # the estimate jumped out and back (60 N on an invented 150 Hz cell at 10 kHz).
    n = 6000
    rng = np.random.default_rng(13)
    t = np.arange(n) * DT
    z = 20.0 / STIFF + rng.normal(0.0, NOISE, n)
    spiky = z.copy()
    burst = np.concatenate([np.arange(s, s + length) for s in SPIKES])
    spiky[burst] += np.repeat([1, -1, 1, -1, 1], length) * 50 * NOISE
    clean = make_observer().process(t, z)
    obs = make_observer()
    est = obs.process(t, spiky)
    assert obs.counters.rejected == burst.size and obs.counters.suspect == burst.size
    assert np.array_equal(np.flatnonzero(judged_outliers(est["flags"])), burst)
    assert np.all(est["flags"][SPIKES + length] & FLAG_OUTLIER_BEFORE)
    later = np.concatenate([np.arange(s + 20, s + 1000) for s in SPIKES])
    dev = np.abs(est["force_n"] - clean["force_n"])
    assert np.all(dev[later] <= 3.0 * clean["force_u_n"][later])
    # the rows of a burst show the estimate without it, within 3 of their own σ
    assert np.all(dev[burst] <= 3.0 * est["force_u_n"][burst])


@pytest.mark.parametrize("zeta", [0.65, 2.5])
def test_a_spike_of_any_size_is_rejected(zeta: float) -> None:
    # Common practice (a contaminated-normal error model, as in robust statistics): an
    # outlier's size has a heavy tail. Spikes from 50 to 10⁶ noise σ on a held load, on a
    # stiffer cell (fn 400 Hz, five samples per period) well damped and overdamped: each
    # is rejected, and the rows after it are back within 3σ of the spike-free run. With a
    # Gaussian outlier model alone, spikes of 10³σ and more were taken as two load jumps,
    # out and back, on both.
    plant = Plant.from_modal(2.0 * math.pi * 400.0, zeta, STIFF)
    n = 6000
    rng = np.random.default_rng(12)
    t = np.arange(n) * DT
    z = 20.0 / STIFF + rng.normal(0.0, NOISE, n)
    sizes = np.array([50.0, 300.0, 3e3, 3e4, 1e6])
    spiky = z.copy()
    spiky[SPIKES] += np.array([1, -1, 1, -1, 1]) * sizes * NOISE
    clean = make_observer(plant).process(t, z)
    obs = make_observer(plant)
    est = obs.process(t, spiky)
    assert obs.counters.rejected == 5
    assert np.all(est["flags"][SPIKES + 1] & FLAG_OUTLIER_BEFORE)
    after = np.concatenate([SPIKES + 1, SPIKES + 2])
    dev = np.abs(est["force_n"][after] - clean["force_n"][after])
    assert np.all(dev <= 3.0 * clean["force_u_n"][after])


def test_a_spike_inside_a_wide_prediction_is_rejected_in_hindsight() -> None:
    # Truth by scipy.signal.lsim, 16x oversampled (SciPy); reference: the spike-free run.
    # An invented soft, very lightly damped cell sampled ten times a period (fn 100 Hz,
    # ζ 0.01, 1 kHz) under a 15 Hz sine of ±3000 N: the rate model in force predicts each
    # reading with a spread of tens of noise σ, so some 50σ spikes are not even suspect.
    # The sample after one comes back and shows it: "the sample before was the outlier"
    # is weighed then. Before, each spike was used and the next samples taken as a load
    # change: rows 700–1000 N off, the record's RMSE 4.0 times the spike-free one.
    fn, zeta, stiff, dt, noise = 100.0, 0.01, 6e6, 1e-3, 120e-9
    plant = Plant.from_modal(2.0 * math.pi * fn, zeta, stiff)
    n, over = 3000, 16
    fine = np.arange(n * over) * dt / over
    load = 12000.0 + np.where(fine > 0.2, 3000.0 * np.sin(2 * np.pi * 15.0 * (fine - 0.2)), 0.0)
    cell = scipy.signal.lti(
        [1.0 / plant.mass_kg],
        [1.0, plant.damping_n_s_per_m / plant.mass_kg, stiff / plant.mass_kg],
    )
    t = fine[::over]
    x = scipy.signal.lsim(cell, load, fine)[1][::over]
    z = x + np.random.default_rng(5).normal(0.0, noise, n)
    spikes = np.array([700, 1200, 1700, 2200, 2700])
    spiky = z.copy()
    spiky[spikes] += np.array([1, -1, 1, -1, 1]) * 50 * noise

    def run(readings: np.ndarray) -> np.ndarray:
        obs = ForceObserver(plant, dt, noise, 0.0, ObserverTuning(), force_range_n=24000.0)
        return obs.process(t, readings)

    clean, est = run(z), run(spiky)
    assert np.array_equal(np.flatnonzero(judged_outliers(est["flags"])), spikes)
    in_hindsight = (est["flags"][spikes] & FLAG_REJECTED) == 0
    assert np.any(in_hindsight)  # the case this test is about
    # decided by the next sample, or by the one after when the next left the odds open
    deferred = (est["flags"][spikes + 1] & FLAG_DEFERRED) != 0
    assert np.all(est["flags"][spikes + 1 + deferred] & FLAG_OUTLIER_BEFORE)
    force = load[::over]
    scored = t > 0.4
    ratio = np.sqrt(np.mean((est["force_n"] - force)[scored] ** 2)) / np.sqrt(
        np.mean((clean["force_n"] - force)[scored] ** 2)
    )
    assert ratio <= 1.2  # the spike target of the accuracy benchmark
    later = np.concatenate([np.arange(s + 3, s + 100) for s in spikes])
    dev = np.abs(est["force_n"][later] - clean["force_n"][later])
    assert np.all(dev <= 3.0 * clean["force_u_n"][later])


T_STEP = 0.4 + 0.3 * DT  # the 50 N step of step_record falls between two samples


@pytest.fixture(scope="module")
def step_record() -> tuple[np.ndarray, ...]:
    """0 N then 50 N, each held 0.4 s (truth by scipy.signal.lsim)."""
    return step_run([0.0, 50.0], 0.4, seed=3)


def test_a_real_step_is_not_rejected(step_record) -> None:
    # Source: the applied force of the lsim truth (SciPy).
    t, z, force = step_record
    obs = make_observer()
    est = obs.process(t, z)
    assert obs.counters.rejected == 0
    assert not np.any(est["flags"] & FLAG_OUTLIER_BEFORE)
    # Within 2 % of the step (1 N) from 5 ms after it to the end of the record.
    after = t >= T_STEP + 0.005
    assert np.max(np.abs(est["force_n"][after] - force[after])) < 0.02 * 50.0


def test_settles_three_times_sooner_than_k_x(step_record) -> None:
    # Truth by scipy.signal.lsim, 16x oversampled (SciPy); 2 % band (common practice).
    t, z, _ = step_record
    est = make_observer().process(t, z)
    band, t_end = 0.02 * 50.0, t[-1] + DT
    ts_obs = time_to_settle(t, est["force_n"], T_STEP, t_end, 50.0, band)
    ts_kx = time_to_settle(t, STIFF * z, T_STEP, t_end, 50.0, band)
    # k·x settles as the closed form says (Plant.settling_time_s, 32.1 ms), to within
    # the sampling (two periods).
    assert abs(ts_kx - CELL.settling_time_s(0.02)) <= 2 * DT
    assert 3.0 * ts_obs <= ts_kx  # measured here: 1.4 ms against 32.3 ms


def test_a_suspect_row_showing_the_old_level_still_covers_the_new_one() -> None:
    # The first sample of a step can look like an outlier; the row then shows the old
    # level until the next sample decides. Its ±2σ must hold the step too: it holds the
    # other hypothesis' ±2σ interval. Truth: scipy.signal.lsim of the shared invented
    # cell (observer_cell.step_run), each change 0.3 periods after a sample. Measured on
    # the four such rows here: |error|/σ 0.67-0.95 (3.0-4.7 before). The outliers' spread
    # is the former default, 50σ, under which four first rows here show the old level
    # (at today's 35σ most show the change at once, and the case is rarer).
    levels = [0.0, 40.0, 15.0, 90.0, 60.0, 100.0, 5.0, 120.0, 30.0]  # invented
    t, z, force = step_run(levels, 0.1, seed=8)
    est = make_observer(outlier_spread=50.0).process(t, z)
    steps = np.flatnonzero(np.diff(force) != 0.0) + 1
    shown_old = 0
    for s in steps:
        old, new = force[s - 1], force[s]
        for k in range(s, s + 3):
            if est["flags"][k] & FLAG_REJECTED and abs(est["force_n"][k] - old) < 0.01 * abs(
                new - old
            ):
                shown_old += 1
                assert abs(est["force_n"][k] - new) <= 2.0 * est["force_u_n"][k], (s, k)
    assert shown_old >= 3


def test_judged_outliers_reads_held_deferred_and_hindsight_rows() -> None:
    # Hand-made flag sequences (the rule of `judged_outliers`, method-observer §6, §8).
    rej, dfr, out = FLAG_REJECTED, FLAG_DEFERRED, FLAG_OUTLIER_BEFORE
    cases = [
        ([0, rej, out, 0], [1]),  # decided by the next sample
        ([0, rej, dfr, out], [1]),  # the next sample used by both, the one after decides
        ([rej, rej, dfr, out], [0, 1]),  # a burst of two, then a wait
        ([0, rej, dfr, 0], []),  # judged used: nothing left out
        ([0, 0, out, 0], [1]),  # in hindsight: the row before, not held
    ]
    for flags, expected in cases:
        got = np.flatnonzero(judged_outliers(np.array(flags, np.uint32)))
        assert got.tolist() == expected, flags


def test_a_step_on_a_slow_overdamped_cell_shows_on_its_first_row() -> None:
    # Truth by scipy.signal.lsim, 16x oversampled (SciPy). An invented overdamped cell read
    # at 5 kHz (598 Hz, ζ 2.86: its slow pole's time constant is 7 samples), each change
    # 0.3 samples after a sample: the first sample after a step has moved a tenth of it or
    # less, 100-500 noise σ, and is suspect. With the outliers' former spread (50σ) five
    # of these seven first rows showed the old level; at the default (35σ) "used" is the
    # likelier branch more often and the row shows the change. Measured: 3 of 7 rows at
    # the old level at 35σ, 5 of 7 at 50σ; the estimate within 70 % of the step on 4 rows
    # against 2.
    fn, zeta, stiff, dt, noise = 598.3, 2.8644, 6e5, 2e-4, 240e-9
    plant = Plant.from_modal(2.0 * math.pi * fn, zeta, stiff)
    levels = [0.0, 230.0, 480.0, 120.0, 700.0, 350.0, 900.0, 60.0]  # invented, N
    hold, over = 0.1, 16
    n = round(hold * len(levels) / dt)
    fine = np.arange(n * over) * (dt / over)
    edges = np.arange(1, len(levels)) * hold + 0.3 * dt
    load = np.asarray(levels)[np.searchsorted(edges, fine, side="right")]
    cell = scipy.signal.lti(
        [1.0 / plant.mass_kg],
        [1.0, plant.damping_n_s_per_m / plant.mass_kg, stiff / plant.mass_kg],
    )
    x = scipy.signal.lsim(cell, load, fine)[1][::over]
    t, force = fine[::over], load[::over]
    z = x + np.random.default_rng(4).normal(0.0, noise, n)

    def first_rows_showing_the_step(tuning: ObserverTuning) -> int:
        est = ForceObserver(plant, dt, noise, 0.0, tuning, force_range_n=950.0).process(t, z)
        first = np.flatnonzero(np.diff(force) != 0.0) + 1
        step = np.abs(force[first] - force[first - 1])
        return int(np.count_nonzero(np.abs(est["force_n"][first] - force[first]) < 0.7 * step))

    assert ObserverTuning().outlier_spread == 35.0
    assert first_rows_showing_the_step(ObserverTuning()) >= 4
    # the former default: the case this test is about
    assert first_rows_showing_the_step(ObserverTuning(outlier_spread=50.0)) <= 2
