"""Settling rules on hand-made waveforms with known answers."""

from __future__ import annotations

import math

import numpy as np
import pytest

from estimator.errors import ParameterError
from estimator.plant import Plant
from estimator.settling import time_to_settle


def test_time_to_settle_on_a_decaying_exponential() -> None:
    # y = 1 − e^(−t/τ) enters ±2 % of 1 for good at t = τ·ln(50) (closed form).
    tau, dt = 0.01, 1e-5
    t = np.arange(0.0, 0.2, dt)
    y = 1.0 - np.exp(-t / tau)
    ts = time_to_settle(t, y, 0.0, 0.2, 1.0, 0.02)
    assert ts == pytest.approx(tau * math.log(50.0), abs=dt)  # one sample


def test_time_to_settle_matches_the_plant_closed_form() -> None:
    # Sampled closed-form step response vs the plant's exact settling time.
    plant = Plant.from_modal(1000.0, 0.12, 4.0e5)
    dt = 1e-6
    t = np.arange(0.0, 0.1, dt)
    y = plant.step_response(t) * plant.stiffness_n_per_m
    ts = time_to_settle(t, y, 0.0, 0.1, 1.0, 0.02)
    assert ts == pytest.approx(plant.settling_time_s(0.02), abs=dt)  # one sample


def test_time_to_settle_edge_cases() -> None:
    t = np.arange(10) * 0.1
    assert time_to_settle(t, np.ones(10), 0.0, 1.0, 1.0, 0.1) == 0.0  # never leaves
    assert math.isnan(time_to_settle(t, np.zeros(10), 0.0, 1.0, 1.0, 0.1))  # never enters
    assert math.isnan(time_to_settle(t, np.ones(10), 5.0, 6.0, 1.0, 0.1))  # no samples
    with pytest.raises(ParameterError, match="band"):
        time_to_settle(t, np.ones(10), 0.0, 1.0, 1.0, 0.0)
