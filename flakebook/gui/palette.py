"""Colours for layer numbers in the window: the shared Okabe-Ito palette of
``flakebook.render.palette`` (source and order there), as QColors, plus window-only choices."""

from __future__ import annotations

from PySide6.QtGui import QColor

from flakebook.render.palette import (
    HOLE_COLOUR,
    HOLE_HALO,
    HOLE_HALO_ALPHA,
    LAYER_ORDER,
    MAX_DISTINCT_LAYERS,
    OKABE_ITO,
    SELECTION_COLOUR,
    THICK_COLOUR,
    UNKNOWN_COLOUR,
    layer_hex,
    legend_entries,
)

#: N_max of the open project: a layer number above it is the likelihood's "more" bin.
MAX_LAYERS = 15


def layer_label(layers: int | None) -> str:
    """``"3L"``, or ``">15L"`` for the "more than N_max" bin, or ``"-"``."""
    if layers is None:
        return "-"
    if layers > MAX_LAYERS:
        return f">{MAX_LAYERS}L"
    return f"{layers}L"


def layer_colour(layers: int | None) -> QColor:
    """QColor for a layer number (None: not yet known)."""
    return QColor(layer_hex(layers))


__all__ = [
    "HOLE_COLOUR",
    "HOLE_HALO",
    "HOLE_HALO_ALPHA",
    "LAYER_ORDER",
    "MAX_DISTINCT_LAYERS",
    "MAX_LAYERS",
    "OKABE_ITO",
    "SELECTION_COLOUR",
    "THICK_COLOUR",
    "UNKNOWN_COLOUR",
    "layer_colour",
    "layer_hex",
    "layer_label",
    "legend_entries",
]
