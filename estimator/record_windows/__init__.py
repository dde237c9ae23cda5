"""Where the test is in a whole record: the free decay (`find_ringdown_window`) and the
load step (`find_step_window`) that ``forcelens identify`` needs, found from the data
alone over what both share (`activity`: the noise, the ringing period and the stretches
where the cell moves)."""

from estimator.record_windows.activity import WindowNotFoundError
from estimator.record_windows.ringdown import RingdownWindow, find_ringdown_window
from estimator.record_windows.step import StepWindow, find_step_window

__all__ = [
    "RingdownWindow",
    "StepWindow",
    "WindowNotFoundError",
    "find_ringdown_window",
    "find_step_window",
]
