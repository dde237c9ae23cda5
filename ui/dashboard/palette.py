"""The dashboard's colours: our own palette, and every text colour with its background.

`TEXT_ON_BACKGROUND` lists each pair of text colour and background the window draws, so
a test can check their contrast (WCAG 2.1, `ui.contrast`) against the 4.5:1 that
success criterion 1.4.3 asks for normal text. The window takes its colours from here
only. No Qt here.
"""

from __future__ import annotations

__all__ = [
    "ALARM_LIST_BG",
    "ALARM_TEXT",
    "CAUTION_BG",
    "CAUTION_BORDER",
    "CAUTION_TEXT",
    "PANEL_BG",
    "PANEL_TEXT",
    "PLOT_BG",
    "PLOT_TEXT",
    "SECONDARY_TEXT",
    "TEXT_ON_BACKGROUND",
    "TILE_BG",
    "TILE_TEXT",
]

# Plots: deep teal estimate, slate static conversion, indigo displacement; the band is
# the estimate's colour, translucent; the close-up strip's band a warmer tint so that it
# reads as "the uncertainty at the reading". RGB(A) tuples, as pyqtgraph takes them.
ESTIMATE = (0, 110, 120)
BAND = (0, 110, 120, 55)
ZOOM_BAND = (186, 219, 222)  # opaque: a large translucent fill costs the painter more
STATIC = (120, 128, 140)
DISPLACEMENT = (60, 60, 150)
GRID = (212, 216, 222)
CURSOR = (140, 30, 70)  # the replay cursor: the critical alarm's wine, opaque
VALID_SINCE = (0, 105, 92)  # the settled tile's green

LEGEND_BG = (255, 255, 255, 225)  # nearly opaque white: the legend stays readable over data

PLOT_BG = "#ffffff"
PLOT_TEXT = "#232323"  # axes, ticks, legend

PANEL_BG = "#f4f6f7"
PANEL_TEXT = "#1c262b"  # labels of the side panel
SECONDARY_TEXT = "#37474f"  # titles, the settling rule, the model's detail, reasons
READING_TEXT = "#00353a"  # the force in large type
U_TEXT = "#00535a"  # ± U under it

# The settling tile: white text on one colour per state.
TILE_TEXT = "#ffffff"
TILE_BG: dict[str, str] = {
    "waiting": "#546e7a",
    "changing": "#37474f",
    "settling": "#8a5a00",
    "settled": "#00695c",
    "out-of-range": "#8e244d",
}

# The alarm list (a white list box).
ALARM_LIST_BG = "#ffffff"
ALARM_TEXT: dict[str, str] = {
    "critical": "#8e244d",
    "warning": "#8a5a00",
    "advisory": "#37474f",
    "acknowledged": "#59676e",
    "none": "#2f5d3a",  # "no active alarms"
}

# The caution: dark brown on a light amber box with a darker edge.
CAUTION_TEXT = "#4a3300"
CAUTION_BG = "#fff3d9"
CAUTION_BORDER = "#a86b00"

#: (what, text colour, background) for every text the window draws in its own colours.
TEXT_ON_BACKGROUND: tuple[tuple[str, str, str], ...] = (
    ("plot axes and legend", PLOT_TEXT, PLOT_BG),
    ("panel labels", PANEL_TEXT, PANEL_BG),
    ("settling rule, titles, model detail, reasons", SECONDARY_TEXT, PANEL_BG),
    ("force reading", READING_TEXT, PANEL_BG),
    ("U under the reading", U_TEXT, PANEL_BG),
    ("caution", CAUTION_TEXT, CAUTION_BG),
    *((f"tile {state}", TILE_TEXT, bg) for state, bg in TILE_BG.items()),
    *((f"alarm {kind}", fg, ALARM_LIST_BG) for kind, fg in ALARM_TEXT.items()),
)
