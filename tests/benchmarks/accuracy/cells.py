"""Invented force cells: three damping regimes, each with its own transducer and rate.

All figures are invented for the benchmark (no real cell is described). The plant is
``m·x'' + b·x' + k·x = F(t)`` with mass m (kg), damping b (N·s/m), stiffness k (N/m),
force F (N) and displacement x (m).
"""

from __future__ import annotations

import math
from dataclasses import dataclass


@dataclass(frozen=True)
class Cell:
    """An invented cell, its transducer and its sampling.

    Attributes:
        name: short label used in tables and in ``--only``.
        regime: words describing the damping regime.
        natural_freq_hz: fn (Hz).
        damping_ratio: ζ (dimensionless).
        stiffness_n_per_m: k (N/m).
        sample_rate_hz: sampling rate of the displacement (Hz).
        noise_m: standard deviation of the transducer's white noise (m).
        resolution_m: one ADC step (m); readings are quantised to it.
        force_range_n: rated span, from 0 N to this force (N).
    """

    name: str
    regime: str
    natural_freq_hz: float
    damping_ratio: float
    stiffness_n_per_m: float
    sample_rate_hz: float
    noise_m: float
    resolution_m: float
    force_range_n: float

    def __post_init__(self) -> None:
        for field in (
            "natural_freq_hz",
            "damping_ratio",
            "stiffness_n_per_m",
            "sample_rate_hz",
            "noise_m",
            "resolution_m",
            "force_range_n",
        ):
            value = getattr(self, field)
            if not (math.isfinite(value) and value > 0):
                raise ValueError(f"{field} = {value!r}: must be a finite number > 0")

    @property
    def omega_n_rad_s(self) -> float:
        """Natural angular frequency ωn (rad/s)."""
        return 2.0 * math.pi * self.natural_freq_hz

    @property
    def mass_kg(self) -> float:
        """Moving mass m = k/ωn² (kg)."""
        return self.stiffness_n_per_m / self.omega_n_rad_s**2

    @property
    def damping_n_s_per_m(self) -> float:
        """Damping b = 2ζ·√(k·m) (N·s/m)."""
        return 2.0 * self.damping_ratio * math.sqrt(self.stiffness_n_per_m * self.mass_kg)

    @property
    def dt_s(self) -> float:
        """Nominal sampling period (s)."""
        return 1.0 / self.sample_rate_hz

    @property
    def measurement_var_m2(self) -> float:
        """Measurement variance R = noise² + LSB²/12 (m²)."""
        return self.noise_m**2 + self.resolution_m**2 / 12.0

    def describe(self) -> str:
        """One line for the report (units in the text)."""
        return (
            f"{self.name:<9} invented, {self.regime}: fn {self.natural_freq_hz:g} Hz, "
            f"ζ {self.damping_ratio:g}, k {self.stiffness_n_per_m:.0e} N/m, "
            f"m {self.mass_kg * 1e3:.3g} g, fs {self.sample_rate_hz / 1e3:g} kHz, "
            f"noise {self.noise_m * 1e9:g} nm, LSB {self.resolution_m * 1e9:g} nm, "
            f"range 0–{self.force_range_n:g} N"
        )


#: The three invented cells of the benchmark.
CELLS: tuple[Cell, ...] = (
    Cell(
        name="stiff",
        regime="stiff and well damped",
        natural_freq_hz=400.0,
        damping_ratio=0.65,
        stiffness_n_per_m=1.0e6,
        sample_rate_hz=2_000.0,
        noise_m=50e-9,
        resolution_m=10e-9,
        force_range_n=500.0,
    ),
    Cell(
        name="ringing",
        regime="lightly damped",
        natural_freq_hz=150.0,
        damping_ratio=0.04,
        stiffness_n_per_m=2.0e5,
        sample_rate_hz=10_000.0,
        noise_m=20e-9,
        resolution_m=5e-9,
        force_range_n=200.0,
    ),
    Cell(
        name="sluggish",
        regime="overdamped",
        natural_freq_hz=60.0,
        damping_ratio=2.5,
        stiffness_n_per_m=2.0e4,
        sample_rate_hz=1_000.0,
        noise_m=100e-9,
        resolution_m=20e-9,
        force_range_n=100.0,
    ),
)


#: Three more invented cells, unlike the three above, to check that the observer's
#: defaults carry over to cells it was not tuned on (``bench_accuracy.py --cells other``).
OTHER_CELLS: tuple[Cell, ...] = (
    Cell(
        name="crisp",
        regime="very stiff, moderately damped",
        natural_freq_hz=800.0,
        damping_ratio=0.3,
        stiffness_n_per_m=5.0e6,
        sample_rate_hz=5_000.0,
        noise_m=20e-9,
        resolution_m=5e-9,
        force_range_n=2000.0,
    ),
    Cell(
        name="floaty",
        regime="very lightly damped, soft",
        natural_freq_hz=40.0,
        damping_ratio=0.01,
        stiffness_n_per_m=5.0e3,
        sample_rate_hz=2_000.0,
        noise_m=200e-9,
        resolution_m=50e-9,
        force_range_n=20.0,
    ),
    Cell(
        name="critical",
        regime="critically damped",
        natural_freq_hz=250.0,
        damping_ratio=1.0,
        stiffness_n_per_m=3.0e5,
        sample_rate_hz=4_000.0,
        noise_m=30e-9,
        resolution_m=10e-9,
        force_range_n=300.0,
    ),
)
