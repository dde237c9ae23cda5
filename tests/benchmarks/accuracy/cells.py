"""Invented force cells: three damping regimes, each with its own transducer and rate.

All figures are invented for the benchmark (no real cell is described). The plant is
``m·x'' + b·x' + k·x = F(t)`` with mass m (kg), damping b (N·s/m), stiffness k (N/m),
force F (N) and displacement x (m).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np


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


#: Sampling rates the random cells draw from (Hz), and the fewest samples per natural period.
RANDOM_RATES_HZ: tuple[float, ...] = (1_000.0, 2_000.0, 4_000.0, 5_000.0, 10_000.0)
RANDOM_MIN_SAMPLES_PER_PERIOD = 2.5


def random_cells(
    n: int, seed: int, adc_step: tuple[float, float] = (0.1, 0.5), prefix: str = "r"
) -> tuple[Cell, ...]:
    """``n`` invented cells drawn at random, to look for where the defaults break.

    Each cell: fn log-uniform in 30–1000 Hz (the loads' sines reach 8 Hz, their
    random part 15 Hz); ζ from one of three regimes chosen with equal
    odds (lightly damped 0.005–0.1, moderately 0.1–1, overdamped 1–5, log-uniform); a
    sampling rate from ``RANDOM_RATES_HZ`` with at least ``RANDOM_MIN_SAMPLES_PER_PERIOD``
    samples per natural period; noise log-uniform in 10–300 nm, ADC step 0.1–0.5 of it;
    stiffness log-uniform in 10³–10⁷ N/m; rated range such that full-scale displacement is
    5·10³–10⁵ noise σ (log-uniform). Names ``r01``, ``r02``…; the draw depends only on
    ``(n, seed)``. ``adc_step`` (as multiples of the noise) and ``prefix`` give the same
    cells read by another ADC: ``(0.5, 3)`` and ``"c"`` are ``--cells coarse:N``, whose steps
    reach past the noise (docs/method-observer.md, section 7).
    """

    def log_uniform(lo: float, hi: float) -> float:
        return float(math.exp(rng.uniform(math.log(lo), math.log(hi))))

    rng = np.random.default_rng(np.random.SeedSequence(seed, spawn_key=(0xCE11,)))
    regimes = (("lightly damped", 0.005, 0.1), ("moderately damped", 0.1, 1.0),
               ("overdamped", 1.0, 5.0))  # fmt: skip
    cells = []
    for i in range(n):
        fn = log_uniform(30.0, 1000.0)
        words, z_lo, z_hi = regimes[int(rng.integers(3))]
        rates = [f for f in RANDOM_RATES_HZ if f >= RANDOM_MIN_SAMPLES_PER_PERIOD * fn]
        noise = log_uniform(10e-9, 300e-9)
        stiffness = log_uniform(1e3, 1e7)
        cells.append(
            Cell(
                name=f"{prefix}{i + 1:02d}",
                regime=f"random, {words}",
                natural_freq_hz=round(fn, 1),
                damping_ratio=round(log_uniform(z_lo, z_hi), 4),
                stiffness_n_per_m=float(f"{stiffness:.2g}"),
                sample_rate_hz=rates[int(rng.integers(len(rates)))],
                noise_m=float(f"{noise:.2g}"),
                resolution_m=float(f"{noise * rng.uniform(*adc_step):.2g}"),
                force_range_n=float(f"{stiffness * noise * log_uniform(5e3, 1e5):.2g}"),
            )
        )
    return tuple(cells)
