"""The hole colour differs from every colour the layers (and selection, unknown, thick) use,
in normal colour vision and under the common colour-vision deficiencies.

References: CIEDE2000 colour difference (CIE 142-2001) and the Machado, Oliveira and Fernandes
(2009) simulation of protanopia, deuteranopia and tritanopia, both as implemented in the
colour-science package; sRGB decoding per IEC 61966-2-1. The threshold of 20 CIEDE2000 units
(clearly different colours, not just noticeably different) is common practice, no source.
"""

from __future__ import annotations

import numpy as np
import pytest

colour = pytest.importorskip("colour")


def _srgb(hex_code: str) -> np.ndarray:
    h = hex_code.lstrip("#")
    return np.array([int(h[i : i + 2], 16) / 255 for i in (0, 2, 4)])


def _lab(rgb: np.ndarray) -> np.ndarray:
    xyz = colour.sRGB_to_XYZ(rgb)
    return colour.XYZ_to_Lab(xyz)


def _others():
    from flakebook.render import palette

    codes = [palette.layer_hex(n) for n in range(1, palette.MAX_DISTINCT_LAYERS + 1)]
    return codes + [palette.THICK_COLOUR, palette.UNKNOWN_COLOUR, palette.SELECTION_COLOUR]


@pytest.mark.parametrize("module", ["flakebook.render.palette", "flakebook.gui.palette"])
def test_hole_colour_is_used_for_nothing_else(module):
    import importlib

    hole = importlib.import_module(module).HOLE_COLOUR
    for other in _others():
        assert hole.upper() != other.upper()
        d = colour.delta_E(_lab(_srgb(hole)), _lab(_srgb(other)), method="CIE 2000")
        assert d > 20, (hole, other, d)


@pytest.mark.parametrize("deficiency", ["Protanomaly", "Deuteranomaly", "Tritanomaly"])
def test_hole_colour_differs_in_colour_blind_vision(deficiency):
    from flakebook.render.palette import HOLE_COLOUR

    m = colour.blindness.matrix_cvd_Machado2009(deficiency, 1.0)

    def seen(code):
        lin = colour.cctf_decoding(_srgb(code), function="sRGB")
        out = np.clip(m @ lin, 0, 1)
        return _lab(colour.cctf_encoding(out, function="sRGB"))

    for other in _others():
        d = colour.delta_E(seen(HOLE_COLOUR), seen(other), method="CIE 2000")
        assert d > 20, (deficiency, other, d)


def test_window_and_cards_draw_holes_alike():
    """One hole colour in the window and on flake cards."""
    from flakebook.gui import palette as gui_palette
    from flakebook.render import palette

    assert gui_palette.HOLE_COLOUR == palette.HOLE_COLOUR
