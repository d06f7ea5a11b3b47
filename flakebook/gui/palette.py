"""Colours for layer numbers: the Okabe-Ito colour-blind-safe palette.

Source: M. Okabe and K. Ito, "Color Universal Design (CUD): how to make figures and
presentations that are friendly to colorblind people" (2008), the eight-colour set. The seven
coloured entries are used for N = 1..7 in an order chosen so that neighbouring layer numbers
differ strongly in hue and lightness; N >= 8 (and the "more" bin) share one light grey, and a
region without an assignment is drawn in white with a dashed line.
"""

from __future__ import annotations

from PySide6.QtGui import QColor

#: Okabe-Ito (2008) colours by their published names, as sRGB hex codes.
OKABE_ITO = {
    "black": "#000000",
    "orange": "#E69F00",
    "sky blue": "#56B4E9",
    "bluish green": "#009E73",
    "yellow": "#F0E442",
    "blue": "#0072B2",
    "vermillion": "#D55E00",
    "reddish purple": "#CC79A7",
}

# N = 1..7, in this order.
_LAYER_ORDER = (
    "sky blue",
    "orange",
    "bluish green",
    "reddish purple",
    "yellow",
    "vermillion",
    "blue",
)
THICK_COLOUR = "#BBBBBB"
UNKNOWN_COLOUR = "#FFFFFF"
HOLE_COLOUR = "#FFFFFF"  # white on a dark halo (gold-bottomed holes look yellow themselves)
SELECTION_COLOUR = "#FFFFFF"
MAX_DISTINCT_LAYERS = len(_LAYER_ORDER)


#: N_max of the open project: a layer number above it is the likelihood's "more" bin.
MAX_LAYERS = 15


def layer_label(layers: int | None) -> str:
    """``"3L"``, or ``">15L"`` for the "more than N_max" bin, or ``"-"``."""
    if layers is None:
        return "-"
    if layers > MAX_LAYERS:
        return f">{MAX_LAYERS}L"
    return f"{layers}L"


def layer_hex(layers: int | None) -> str:
    """Hex colour for a layer number (None: not yet known)."""
    if layers is None or layers < 1:
        return UNKNOWN_COLOUR
    if layers <= MAX_DISTINCT_LAYERS:
        return OKABE_ITO[_LAYER_ORDER[layers - 1]]
    return THICK_COLOUR


def layer_colour(layers: int | None) -> QColor:
    """QColor for a layer number (None: not yet known)."""
    return QColor(layer_hex(layers))


def legend_entries() -> list[tuple[str, str]]:
    """(label, hex colour) for the legend: 1L..7L, then 8L and more, then unknown."""
    out = [(f"{n}L", layer_hex(n)) for n in range(1, MAX_DISTINCT_LAYERS + 1)]
    out.append((f"{MAX_DISTINCT_LAYERS + 1}L+", THICK_COLOUR))
    out.append(("not assigned", UNKNOWN_COLOUR))
    return out
