"""Flake cards drawn offscreen from the sample project."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from flakebook.render.flakecard import nice_length_um, save_flake_card
from flakebook.store import Project

SAMPLE = Path(__file__).resolve().parents[2] / "sample_project" / "k7-campaign.flakebook"


@pytest.mark.parametrize(
    ("target", "expected"), [(3.7, 2.0), (5.0, 5.0), (12.0, 10.0), (0.8, 0.5), (260.0, 200.0)]
)
def test_scale_bar_lengths_are_round(target, expected):
    """Common practice, no source: scale bars are 1, 2 or 5 times a power of ten."""
    assert nice_length_um(target) == pytest.approx(expected)


def test_flake_card_shows_the_flake(tmp_path):
    """A card is a PNG with the crop, the coloured terrace outlines and a caption (pixel
    statistics, not a pixel-exact reference)."""
    import cv2

    with Project.open(SAMPLE, read_only=True) as p:
        out = save_flake_card(p, "K7N-03", tmp_path / "card.png", size_px=300)
    img = cv2.imread(str(out))
    assert img is not None and img.shape[1] == 300
    assert img.std() > 10  # not blank
    # The caption band is dark, the image above it is not.
    assert img[-20:].mean() < 60 < img[:200].mean()
    # Terrace outlines in the palette's 3L colour (Okabe-Ito bluish green #009E73) are drawn.
    bgr = np.array([0x73, 0x9E, 0x00])
    assert (np.abs(img.astype(int) - bgr).sum(axis=2) < 40).sum() > 50


def test_flake_card_refuses_other_suffixes(tmp_path):
    from flakebook.errors import InputError

    with Project.open(SAMPLE, read_only=True) as p, pytest.raises(InputError, match="PNG"):
        save_flake_card(p, "K7N-03", tmp_path / "card.jpg")
