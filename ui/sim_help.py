"""Help texts of the built-in simulated cell's options, worded once for every command.

``live``, ``dashboard`` and ``simulate`` take a load programme and faults in the same
small languages (``daq.programme.parse_programme``, ``ui.wiring.parse_faults``); their
``--help`` states the syntax with the units from here. Standard library only: it is
imported when the parser is built.
"""

from __future__ import annotations

__all__ = ["FAULTS_HELP", "PROGRAMME_HELP", "SPEED_HELP"]

#: The text load programme: segments, their numbers and units, an example.
PROGRAMME_HELP = (
    "load programme: segments separated by ';', each 'hold DURATION_S FORCE_N', "
    "'ramp DURATION_S TO_FORCE_N', 'sine DURATION_S MEAN_N AMPLITUDE_N FREQUENCY_HZ' or "
    "'halfsine DURATION_S PEAK_N WIDTH_S' (s, N, Hz), played from 0 N at t = 0 s, e.g. "
    "'hold 0.5 0; hold 1 50; ramp 1 0'"
)

#: Faults on the simulated line: kinds, times on which clock, durations, counts.
FAULTS_HELP = (
    "faults to inject, comma-separated KIND@T[:DURATION][*COUNT]: T in simulated s from "
    "the start; kinds garbage (COUNT bytes), drop (COUNT samples), corrupt (COUNT "
    "samples), disconnect (for DURATION s of real time), stall (for DURATION simulated "
    "s); e.g. 'drop@1*50,disconnect@2:0.5'"
)

#: The simulated cell's speed.
SPEED_HELP = "simulated seconds per real second, a factor: 2 plays twice as fast"
