"""Colours of the panels: a colour-blind-safe palette and fixed roles.

The eight colours are those proposed by Okabe & Ito (2008), "Color Universal Design
(CUD): how to make figures and presentations that are friendly to colorblind people"
(J*Fly, https://jfly.uni-koeln.de/color/), distinguishable under the common forms of
colour-vision deficiency. Maps use the perceptually uniform "viridis" scheme (van der
Walt & Smith 2015, matplotlib), readable in grey and by colour-blind viewers.
"""

from __future__ import annotations

__all__ = ["OKABE_ITO", "ROLE", "SEQUENCE", "MAP_SCHEME", "phase_colour"]

#: Okabe & Ito (2008) colours.
OKABE_ITO = {
    "black": "#000000",
    "orange": "#E69F00",
    "sky_blue": "#56B4E9",
    "bluish_green": "#009E73",
    "yellow": "#F0E442",
    "blue": "#0072B2",
    "vermillion": "#D55E00",
    "reddish_purple": "#CC79A7",
}

#: What each colour means in every panel (same meaning everywhere).
ROLE = {
    "data": OKABE_ITO["blue"],
    "error": OKABE_ITO["sky_blue"],
    "fit": OKABE_ITO["vermillion"],
    "selected": OKABE_ITO["orange"],
    "background": "#7F7F7F",
    "reference": OKABE_ITO["black"],
    "trend": OKABE_ITO["bluish_green"],
    "ok": OKABE_ITO["bluish_green"],
    "warning": OKABE_ITO["vermillion"],
    "current": OKABE_ITO["black"],
}

#: Order of colours for overlays and categories (phases, overlay frames).
SEQUENCE = [
    OKABE_ITO[k]
    for k in ("blue", "orange", "bluish_green", "reddish_purple", "sky_blue", "vermillion", "yellow", "black")
]

#: Colour scheme name of the overview and peak maps (bqplot ColorScale ``scheme``).
MAP_SCHEME = "viridis"


def phase_colour(index: int) -> str:
    """Colour of the ``index``-th category (phase), cycling through :data:`SEQUENCE`.

    >>> phase_colour(0), phase_colour(9)
    ('#0072B2', '#E69F00')
    """
    return SEQUENCE[int(index) % len(SEQUENCE)]
