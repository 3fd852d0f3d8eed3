"""The report's colours: one palette for the workbook fills and every figure.

The hues are taken from the colour-blind-safe set of Okabe & Ito ("Color Universal Design",
2008: black, orange, sky blue, bluish green, yellow, blue, vermilion, reddish purple); the
tints, the ordering and the diverging map built from them are this project's own.

The one rule the whole report keeps: **orange = below the band's minimum** (too little load
would be shed), **blue = above the band's maximum** (too much).  The two stay apart for the
common forms of colour-vision deficiency (red-green and blue-yellow) and in greyscale
(the orange side is the lighter), and every figure repeats the meaning with a line style or a
marker shape so colour is never the only cue.
"""

from __future__ import annotations

from matplotlib.colors import LinearSegmentedColormap

# --- Okabe-Ito hues (hex) ----------------------------------------------------------------------
BLACK = "#000000"
ORANGE = "#E69F00"
SKY = "#56B4E9"
GREEN = "#009E73"
YELLOW = "#F0E442"
BLUE = "#0072B2"
VERMILION = "#D55E00"
PURPLE = "#CC79A7"

# --- meanings ---------------------------------------------------------------------------------
BELOW = VERMILION  # line/marker colour for "below min"
ABOVE = BLUE  # line/marker colour for "above max"
TARGET = "#444444"
BAND_SHADE = "#D9D9D9"
INK = "#1A1A1A"
MUTED = "#777777"
BEFORE = "#8C8C8C"  # the current allocation drawn behind a plan

#: workbook fills (ARGB without alpha) - light tints so the numbers stay readable
FILL_BELOW = "F6C89F"  # light vermilion/orange: value below the band's minimum
FILL_ABOVE = "A6D3F2"  # light sky blue: value above the band's maximum
FILL_HEADER = "E4E8EC"
FILL_TITLE = "D7E3EA"

#: categorical order for blocks, feeder classes and day types (black left out: it is ink)
CATEGORICAL = (BLUE, ORANGE, GREEN, PURPLE, SKY, VERMILION, YELLOW, "#5D5D5D")

#: line series (the frequency traces, one per loss size)
SERIES = (BLUE, VERMILION, GREEN, PURPLE, ORANGE, SKY, BLACK, YELLOW)
#: reference lines of the frequency figures: nominal frequency, floor and ceiling
NOMINAL_LINE = "#8C8C8C"
LIMIT_LINE = "#404040"

#: hatches used after the colours run out, so a ninth class is still told apart
HATCHES = ("", "//", "..", "xx", "\\\\", "oo")


def category(i: int) -> tuple[str, str]:
    """Colour and hatch of the i-th category."""
    n = len(CATEGORICAL)
    return CATEGORICAL[i % n], HATCHES[(i // n) % len(HATCHES)]


def band_colormap() -> LinearSegmentedColormap:
    """Diverging map for a share of demand, meant for a norm that puts the band's minimum at
    0.25, the target at 0.5 and the maximum at 0.75: pale tints inside the band, a sharp step to
    strong orange below the minimum and to strong blue above the maximum."""
    nodes = [
        (0.0, "#6B2C00"),
        (0.2499, VERMILION),
        (0.25, "#F9DCC4"),
        (0.5, "#F7F7F7"),
        (0.75, "#CFE6F6"),
        (0.7501, BLUE),
        (1.0, "#062C4A"),
    ]
    cmap = LinearSegmentedColormap.from_list("ufls_band_okabe_ito", nodes, N=512)
    return cmap.with_extremes(bad="#BDBDBD")
