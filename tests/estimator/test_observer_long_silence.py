"""A long silence in a record: the observer starts afresh after it (issue 15, found by
fuzzing: a silence of about 3000 s after the first sample, or 1e7 s mid-record, overflowed
the smooth-load priors' variance, which grows as the cube of the step, into a division by
zero inside the kernel).

Nothing of the state is worth predicting across hours: the observer treats the first
sample after a silence longer than ``restart_gap_s`` as the first of a record (common
practice for a tracking filter that loses its target; no source). The checks compare the
estimates after the silence with those of a fresh observer on the same samples, bit for
bit. The cell and the readings are invented.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from estimator.observer import FLAG_GAP, ForceObserver, ObserverTuning
from estimator.plant import Plant
from estimator.smoother import smooth_record

# invented cell: 0.4 kg, 4e5 N/m, ζ = 0.12 (fn ≈ 159 Hz), 2 kHz, 50 nm noise, 130 N span
CELL = Plant.from_modal(math.sqrt(4.0e5 / 0.4), 0.12, 4.0e5)
DT, NOISE, SPAN = 5e-4, 5e-8, 130.0


def _observer() -> ForceObserver:
    return ForceObserver(CELL, DT, NOISE, 1e-8, ObserverTuning(), force_range_n=SPAN)


def _record(silence_after: int, silence_s: float) -> tuple[np.ndarray, np.ndarray]:
    """400 samples of 20 N held (invented), a silence of `silence_s` after sample
    `silence_after`, then 30 N held."""
    rng = np.random.default_rng(5)
    t = np.arange(400) * DT
    t[silence_after + 1 :] += silence_s
    f = np.where(np.arange(400) <= silence_after, 20.0, 30.0)
    z = f / 4.0e5 + rng.normal(0.0, NOISE, t.size)
    return t, z


@pytest.mark.parametrize(("after", "silence_s"), [(0, 3000.0), (199, 1e7), (199, 61.0)])
def test_the_observer_starts_afresh_after_a_long_silence(after: int, silence_s: float) -> None:
    t, z = _record(after, silence_s)
    obs = _observer()
    assert obs.restart_gap_s == 60.0  # the longer of 60 s and 100 periods (0.63 s)
    est = obs.process(t, z)
    assert np.all(np.isfinite(est["force_n"])) and np.all(np.isfinite(est["force_u_n"]))
    assert obs.counters.restarts == 1
    k = after + 1
    assert est["flags"][k] & FLAG_GAP
    fresh = _observer().process(t[k:], z[k:])
    tail = est[k:].copy()
    tail["flags"][0] &= ~np.uint32(FLAG_GAP)
    assert tail.tobytes() == fresh.tobytes()
    # the same in blocks cut at the silence and elsewhere (block-size bit identity)
    blocks = _observer()
    parts = [blocks.process(t[a:b], z[a:b]) for a, b in ((0, k), (k, k + 7), (k + 7, 400))]
    assert np.concatenate([p for p in parts if p.size]).tobytes() == est.tobytes()
    # the held load after the silence is read within its U (k = 2)
    assert abs(est["force_n"][-1] - 30.0) < 2.0 * est["force_u_n"][-1] + 0.05


def test_a_silence_shorter_than_the_limit_is_predicted_across() -> None:
    t, z = _record(199, 59.0)
    obs = _observer()
    est = obs.process(t, z)
    assert obs.counters.restarts == 0 and est["flags"][200] & FLAG_GAP
    assert np.all(np.isfinite(est["force_n"]))


def test_the_smoother_smooths_each_stretch_between_long_silences_alone() -> None:
    t, z = _record(199, 1e7)
    whole = smooth_record(_observer(), t, z)
    first = smooth_record(_observer(), t[:200], z[:200])
    second = smooth_record(_observer(), t[200:], z[200:])
    assert whole[:200].tobytes() == first.tobytes()
    assert whole["flags"][200] & FLAG_GAP
    assert np.array_equal(whole["force_n"][200:], second["force_n"])
    assert np.array_equal(whole["force_u_n"][200:], second["force_u_n"])
