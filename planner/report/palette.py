"""Colours, line styles and markers of the report, readable by colour-blind readers.

The eight colours are the Okabe–Ito palette (Okabe, M. & Ito, K. (2008) "Color Universal
Design (CUD): how to make figures and presentations that are friendly to colorblind people").
Every series that a chart tells apart by colour also differs by line style or marker, so a
chart still reads in greyscale print; dry risk is never shown as red against green.
"""
from __future__ import annotations

OKABE_ITO: dict[str, str] = {
    "black": "#000000",
    "orange": "#E69F00",
    "sky_blue": "#56B4E9",
    "bluish_green": "#009E73",
    "yellow": "#F0E442",
    "blue": "#0072B2",
    "vermillion": "#D55E00",
    "reddish_purple": "#CC79A7",
}

# Greys for text, rules and table shading (neutral: no hue to confuse).
NEUTRALS: dict[str, str] = {
    "text": "#1A1A1A",
    "muted": "#595959",
    "rule": "#BFBFBF",
    "shade": "#F2F2F2",
    "white": "#FFFFFF",
}


def tint(colour: str, share: float) -> str:
    """``colour`` mixed with white: ``share`` = 1 keeps it, 0 gives white (same hue)."""
    rgb = [int(colour[i:i + 2], 16) for i in (1, 3, 5)]
    mixed = [round(255 - (255 - c) * share) for c in rgb]
    return "#" + "".join(f"{c:02X}" for c in mixed)


# What each colour means in the report; charts and the page use only these roles.
ROLE: dict[str, str] = {
    "history": OKABE_ITO["black"],
    "cleaned": OKABE_ITO["orange"],
    "flagged": OKABE_ITO["reddish_purple"],
    "forecast": OKABE_ITO["blue"],
    "band_outer": tint(OKABE_ITO["sky_blue"], 0.35),   # the 90 % band
    "band_inner": OKABE_ITO["sky_blue"],
    "balance": OKABE_ITO["bluish_green"],
    "visit": OKABE_ITO["blue"],
    "limit": OKABE_ITO["reddish_purple"],
    "dry": OKABE_ITO["vermillion"],
    "target": OKABE_ITO["black"],
    "plan": OKABE_ITO["blue"],
    "baseline": OKABE_ITO["orange"],
    "bound": OKABE_ITO["bluish_green"],
    "warn_fill": tint(OKABE_ITO["vermillion"], 0.18),  # cells over the dry-risk target
    "info_fill": tint(OKABE_ITO["sky_blue"], 0.15),    # the cautions box
}

# A sequence for series without a fixed meaning (depots, routines, variants), each with its
# own marker and line style as the second cue.
SERIES_COLOURS: tuple[str, ...] = (
    OKABE_ITO["blue"], OKABE_ITO["orange"], OKABE_ITO["bluish_green"],
    OKABE_ITO["vermillion"], OKABE_ITO["reddish_purple"], OKABE_ITO["sky_blue"],
    OKABE_ITO["black"], OKABE_ITO["yellow"],
)
SERIES_MARKERS: tuple[str, ...] = ("o", "s", "^", "D", "v", "P", "X", "*")
SERIES_LINESTYLES: tuple[str, ...] = ("-", "--", "-.", ":", "-", "--", "-.", ":")
SERIES_HATCHES: tuple[str, ...] = ("", "//", "..", "xx", "\\\\", "++", "oo", "--")

# Flags of the cleaned history and how a chart marks them (shape first, colour second).
FLAG_MARKERS: dict[str, tuple[str, str]] = {
    "gap": ("|", OKABE_ITO["reddish_purple"]),
    "down": ("x", OKABE_ITO["reddish_purple"]),
    "dry": ("^", OKABE_ITO["vermillion"]),
    "outlier": ("D", OKABE_ITO["orange"]),
}


def allowed_colours() -> set[str]:
    """Every colour (upper-case hex) the report may use."""
    return {c.upper() for c in (*OKABE_ITO.values(), *NEUTRALS.values(), *ROLE.values())}


def series_style(i: int) -> dict[str, str]:
    """Colour, marker, line style and hatch of the i-th unnamed series (cycles after eight)."""
    n = len(SERIES_COLOURS)
    return {"color": SERIES_COLOURS[i % n], "marker": SERIES_MARKERS[i % n],
            "linestyle": SERIES_LINESTYLES[i % n], "hatch": SERIES_HATCHES[i % n]}
