"""The simulated cell: the plant integrated exactly, noise, ADC counts, the truth.

`SimulatedCell` integrates the spring-mass-damper plant

    m·x'' + b·x' + k·x = F(t),   b = 2·ζ·√(k·m)

itself (no import from `estimator`), adds transducer noise and quantises to ADC counts.

Discretisation: ramp-invariant (first-order hold). Between two sub-steps t_j, t_{j+1}
(h = 1 / (sample_rate_hz · oversample)) the force is taken as the straight line from its
value just after t_j to its value just before t_{j+1}; for such a force the step

    x_{j+1} = Φ·x_j + Γa·F(t_j⁺) + Γb·F(t_{j+1}⁻)

is exact, with Φ, Γa, Γb read off ``expm`` of the 4×4 augmented matrix
[[A, B, 0], [0, 0, 1], [0, 0, 0]]·h (state x, force, force slope). Steps of the programme
that fall on the sub-step grid are therefore reproduced exactly; a step between grid
points becomes a ramp over one sub-step. The cell starts at rest at x = 0 with 0 N.
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass

import numpy as np
import scipy.linalg
import scipy.signal

from daq.csv_dialect import write_csv_table
from daq.errors import FramingError
from daq.lines import encode_lines
from daq.programme import LoadProgramme
from daq.samples import empty_block
from daq.scaling import Scaling

#: Integration steps one `SimulatedCell.generate` may make (about 2 GB of arrays): beyond,
#: a mistyped rate or duration (1e12 Hz, 3·10⁵ s) is refused instead of exhausting memory.
MAX_SIMULATED_STEPS = 50_000_000

TRUTH_TITLE = "simulated cell truth (invented data)"
#: First line of a truth CSV file.
TRUTH_HEADER = f"# forcelens {TRUTH_TITLE}"


@dataclass(frozen=True, eq=False)
class SimulatedRun:
    """One simulated recording; every array has shape (n,) and is read-only.

    Attributes:
        seq: sample sequence numbers 0..n−1, int64.
        device_time_us: round(seq · 1e6 / sample_rate_hz), µs, int64.
        counts: ADC readings (noise and offset included, quantised, clipped), int64.
        true_force_n: applied force at each sample time (value just after it), N.
        true_displacement_m: plant displacement without noise or offset, m.
        sample_rate_hz: sample rate, Hz.
        n_clipped: how many readings hit the ADC range.
        over_range: bool, true where the reading sits at the edge of the ADC range
            (saturated), or None if unknown; binary frames report it in status bit 0.
    """

    seq: np.ndarray
    device_time_us: np.ndarray
    counts: np.ndarray
    true_force_n: np.ndarray
    true_displacement_m: np.ndarray
    sample_rate_hz: float
    n_clipped: int = 0
    over_range: np.ndarray | None = None

    def __post_init__(self) -> None:
        names = ["seq", "device_time_us", "counts", "true_force_n", "true_displacement_m"]
        if self.over_range is not None:
            names.append("over_range")
        for name in names:
            a = np.array(getattr(self, name), copy=True)
            a.setflags(write=False)
            object.__setattr__(self, name, a)

    @property
    def time_s(self) -> np.ndarray:
        """Device time of each sample, s, shape (n,)."""
        return self.device_time_us * 1e-6

    def __len__(self) -> int:
        return int(self.seq.size)

    def sample_block(
        self, scaling: Scaling, host_time_s: float | np.ndarray = math.nan
    ) -> np.ndarray:
        """The run as the reader delivers it: a `daq.samples` block (sequence numbers,
        device times, counts and their displacement by ``scaling``), received at
        ``host_time_s`` (one time for all, or one per sample; default unknown)."""
        block = empty_block(len(self))
        block["seq"] = self.seq
        block["device_time_s"] = self.time_s
        block["host_time_s"] = host_time_s
        block["counts"] = self.counts
        block["displacement_m"] = scaling.to_metres(self.counts)
        return block


def foh_matrices(
    mass_kg: float, stiffness_n_per_m: float, damping_ratio: float, step_s: float
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Ramp-invariant step of the plant over `step_s`, s.

    Returns:
        Φ (2, 2), Γa (2,), Γb (2,) with x_{j+1} = Φ·x_j + Γa·F_j⁺ + Γb·F_{j+1}⁻, where
        x = [displacement m, velocity m/s] and F in N.
    """
    m, k, z, h = mass_kg, stiffness_n_per_m, damping_ratio, step_s
    b = 2.0 * z * math.sqrt(k * m)
    M = np.zeros((4, 4))
    M[0, 1] = 1.0
    M[1, 0] = -k / m
    M[1, 1] = -b / m
    M[1, 2] = 1.0 / m
    M[2, 3] = 1.0
    E = scipy.linalg.expm(M * h)
    phi = E[:2, :2]
    gamma_b = E[:2, 3] / h
    gamma_a = E[:2, 2] - gamma_b
    return phi, gamma_a, gamma_b


def _positive(name: str, value: object) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float, np.integer, np.floating)):
        raise FramingError(f"SimulatedCell: {name}={value!r} is not a number")
    v = float(value)
    if not (math.isfinite(v) and v > 0.0):
        raise FramingError(f"SimulatedCell: {name}={value!r} must be a finite number > 0")
    return v


class SimulatedCell:
    """A spring-mass-damper cell read by a noisy, quantising transducer.

    Args:
        mass_kg: moving mass, kg (> 0).
        stiffness_n_per_m: spring stiffness, N/m (> 0).
        damping_ratio: ζ, dimensionless (≥ 0).
        noise_m: standard deviation of white transducer noise, m (≥ 0).
        scaling: ADC and transducer scaling used to quantise.
        sample_rate_hz: output sample rate, Hz (> 0).
        seed: seed of the noise generator (PCG64); same seed, same run.
        oversample: integration sub-steps per sample (≥ 1).
        zero_offset_m: constant added to the displacement seen by the transducer, m.
    """

    def __init__(
        self,
        mass_kg: float,
        stiffness_n_per_m: float,
        damping_ratio: float,
        noise_m: float,
        scaling: Scaling,
        sample_rate_hz: float,
        seed: int = 0,
        oversample: int = 8,
        zero_offset_m: float = 0.0,
    ) -> None:
        self.mass_kg = _positive("mass_kg", mass_kg)
        self.stiffness_n_per_m = _positive("stiffness_n_per_m", stiffness_n_per_m)
        z = float(damping_ratio)
        if not (math.isfinite(z) and z >= 0.0):
            raise FramingError(f"SimulatedCell: damping_ratio={damping_ratio!r} must be >= 0")
        self.damping_ratio = z
        nz = float(noise_m)
        if not (math.isfinite(nz) and nz >= 0.0):
            raise FramingError(f"SimulatedCell: noise_m={noise_m!r} must be >= 0")
        self.noise_m = nz
        if not isinstance(scaling, Scaling):
            raise FramingError(f"SimulatedCell: scaling={scaling!r} is not a daq Scaling")
        self.scaling = scaling
        self.sample_rate_hz = _positive("sample_rate_hz", sample_rate_hz)
        if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or seed < 0:
            raise FramingError(f"SimulatedCell: seed={seed!r} must be an integer >= 0")
        self.seed = int(seed)
        if isinstance(oversample, bool) or not isinstance(oversample, (int, np.integer)):
            raise FramingError(f"SimulatedCell: oversample={oversample!r} must be an integer")
        if not 1 <= oversample <= 1024:
            raise FramingError(f"SimulatedCell: oversample={oversample!r} must be 1..1024")
        self.oversample = int(oversample)
        off = float(zero_offset_m)
        if not math.isfinite(off):
            raise FramingError(f"SimulatedCell: zero_offset_m={zero_offset_m!r} must be finite")
        self.zero_offset_m = off

    def n_samples(self, programme: LoadProgramme) -> int:
        """Samples in a run of `programme`: those at i / sample_rate_hz < duration_s (≥ 1)."""
        return max(1, math.ceil(programme.duration_s * self.sample_rate_hz - 1e-9))

    def generate(self, programme: LoadProgramme, *, seed: int | None = None) -> SimulatedRun:
        """Simulate `programme` from rest; deterministic for a seed (default: the cell's)."""
        if not isinstance(programme, LoadProgramme):
            raise FramingError(f"generate: programme={programme!r} is not a LoadProgramme")
        n = self.n_samples(programme)
        if n * self.oversample > MAX_SIMULATED_STEPS:
            raise FramingError(
                f"generate: {programme.duration_s:g} s at {self.sample_rate_hz:g} Hz is "
                f"{n} samples ({n * self.oversample} integration steps); the simulated cell "
                f"makes at most {MAX_SIMULATED_STEPS} steps in one go (shorten the "
                "programme or lower the rate; --loop repeats a programme)"
            )
        per_s = self.sample_rate_hz * self.oversample  # sub-steps per second
        h = 1.0 / per_s
        n_sub = (n - 1) * self.oversample
        t = np.arange(n_sub + 1) / per_s
        # Put segment boundaries that fall on the grid exactly on it, so that
        # force_at(side=...) sees the step where the programme has it.
        for tau in programme.boundaries_s:
            j = round(tau * per_s)
            if 0 <= j <= n_sub and abs(j * h - tau) <= 1e-6 * h:
                t[j] = tau
        f_right = programme.force_at(t, side="right")
        f_left = programme.force_at(t, side="left")
        x = self._integrate(f_right[:-1], f_left[1:], h)
        x_samples = x[:: self.oversample]
        seq = np.arange(n, dtype=np.int64)
        rng = np.random.Generator(np.random.PCG64(self.seed if seed is None else int(seed)))
        noise = rng.standard_normal(n) * self.noise_m
        counts, n_clipped = self.scaling.to_counts_clipped(x_samples + self.zero_offset_m + noise)
        lo, hi = self.scaling.count_range
        return SimulatedRun(
            seq=seq,
            device_time_us=np.rint(seq * 1e6 / self.sample_rate_hz).astype(np.int64),
            counts=counts,
            true_force_n=f_right[:: self.oversample],
            true_displacement_m=x_samples,
            sample_rate_hz=self.sample_rate_hz,
            n_clipped=n_clipped,
            over_range=(counts <= lo) | (counts >= hi),
        )

    def _integrate(self, f_start: np.ndarray, f_end: np.ndarray, h: float) -> np.ndarray:
        """Displacement at every sub-step, m, shape (len(f_start) + 1,), from rest."""
        phi, ga, gb = foh_matrices(self.mass_kg, self.stiffness_n_per_m, self.damping_ratio, h)
        # Position transfer of one input column g of the 2-state recursion:
        # (g0·z⁻¹ + (Φ01·g1 − Φ11·g0)·z⁻²) / (1 − tr Φ·z⁻¹ + det Φ·z⁻²).
        a = [1.0, -(phi[0, 0] + phi[1, 1]), phi[0, 0] * phi[1, 1] - phi[0, 1] * phi[1, 0]]
        x = np.zeros(f_start.size + 1)
        for g, u in ((ga, f_start), (gb, f_end)):
            num = [0.0, g[0], phi[0, 1] * g[1] - phi[1, 1] * g[0]]
            # Output j depends on inputs < j only, so one padding input yields x_N.
            x += scipy.signal.lfilter(num, a, np.append(u, 0.0))
        return x


def lines(run: SimulatedRun, start: int = 0, stop: int | None = None) -> bytes:
    """ASCII lines of samples run[start:stop] (see docs/ascii-line-format.md)."""
    sl = slice(start, stop)
    return encode_lines(run.seq[sl], run.device_time_us[sl], run.counts[sl])


def write_truth_csv(run: SimulatedRun, path: str | os.PathLike[str]) -> None:
    """Write ``time_s [s], force_n [N], displacement_m [m]`` of `run` to `path` in
    forcelens's CSV dialect (`daq.csv_dialect`), below the `TRUTH_HEADER` line."""
    write_csv_table(
        path,
        title=TRUTH_TITLE,
        columns=[
            ("time_s", "s", run.time_s),
            ("force_n", "N", run.true_force_n),
            ("displacement_m", "m", run.true_displacement_m),
        ],
    )
