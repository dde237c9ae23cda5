"""A simulated force cell: the independent "truth" the observer is tested against.

`SimulatedCell` integrates the spring-mass-damper plant

    m·x'' + b·x' + k·x = F(t),   b = 2·ζ·√(k·m)

itself (no import from `estimator`), adds transducer noise and quantises to ADC counts.
`PtyCell` plays a simulated run on a pseudo-terminal in real time, so any serial client
can read it as if a device were plugged in; it can send ASCII lines or binary frames and
play faults (noise, lost and corrupted samples, a disconnect, a stall) with a record of
which samples went out intact (docs/simulated-cell.md).

Discretisation: ramp-invariant (first-order hold). Between two sub-steps t_j, t_{j+1}
(h = 1 / (sample_rate_hz · oversample)) the force is taken as the straight line from its
value just after t_j to its value just before t_{j+1}; for such a force the step

    x_{j+1} = Φ·x_j + Γa·F(t_j⁺) + Γb·F(t_{j+1}⁻)

is exact, with Φ, Γa, Γb read off ``expm`` of the 4×4 augmented matrix
[[A, B, 0], [0, 0, 1], [0, 0, 0]]·h (state x, force, force slope). Steps of the programme
that fall on the sub-step grid are therefore reproduced exactly; a step between grid
points becomes a ramp over one sub-step. The cell starts at rest at x = 0 with 0 N.

The package: the cell and its truth (`cell`), the faults (`faults`), the pseudo-terminal
player (`pty`).
"""

from __future__ import annotations

from daq.simulator.cell import (
    MAX_SIMULATED_STEPS,
    TRUTH_HEADER,
    SimulatedCell,
    SimulatedRun,
    foh_matrices,
    lines,
    write_truth_csv,
)
from daq.simulator.faults import FAULT_KINDS, Fault
from daq.simulator.pty import PTY_FRAMINGS, PtyCell

__all__ = [
    "FAULT_KINDS",
    "MAX_SIMULATED_STEPS",
    "PTY_FRAMINGS",
    "TRUTH_HEADER",
    "Fault",
    "PtyCell",
    "SimulatedCell",
    "SimulatedRun",
    "foh_matrices",
    "lines",
    "write_truth_csv",
]
