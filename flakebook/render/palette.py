"""Colours for layer numbers, shared by every picture: the Okabe-Ito colour-blind-safe palette.

Source: M. Okabe and K. Ito, "Color Universal Design (CUD): how to make figures and presentations
that are friendly to colorblind people" (2008), the eight-colour set. The seven coloured entries
are used for N = 1..7 in an order chosen so that neighbouring layer numbers differ strongly in
hue and lightness; N >= 8 (and the "more" bin) share one light grey, and a region without an
assignment is drawn in white; holes in black (the set's eighth colour, tests/gui/test_colours.py
checks it differs from all of them, also in colour-blind vision). Plain hex codes: no Qt here, so reports can use them too.
"""

from __future__ import annotations

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
LAYER_ORDER = (
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
#: Holes: Okabe-Ito black, the one colour of the set no layer number uses (and used for
#: nothing else); drawn on a light halo so that it reads on dark holes too.
HOLE_COLOUR = OKABE_ITO["black"]
HOLE_HALO = "#FFFFFF"  # under the hole's ring, drawn translucent (alpha HOLE_HALO_ALPHA)
HOLE_HALO_ALPHA = 150
SELECTION_COLOUR = "#FFFFFF"
MAX_DISTINCT_LAYERS = len(LAYER_ORDER)


def layer_hex(layers: int | None) -> str:
    """Hex colour for a layer number (None: not yet known)."""
    if layers is None or layers < 1:
        return UNKNOWN_COLOUR
    if layers <= MAX_DISTINCT_LAYERS:
        return OKABE_ITO[LAYER_ORDER[layers - 1]]
    return THICK_COLOUR


def legend_entries() -> list[tuple[str, str]]:
    """(label, hex colour) for a legend: 1L..7L, then 8L and more, then unknown."""
    out = [(f"{n}L", layer_hex(n)) for n in range(1, MAX_DISTINCT_LAYERS + 1)]
    out.append((f"{MAX_DISTINCT_LAYERS + 1}L+", THICK_COLOUR))
    out.append(("not assigned", UNKNOWN_COLOUR))
    return out
