"""Several images of one flake: suggest which known flake a region in a new image is.

A region found in a new image (another magnification, another day) is compared with the flakes
already outlined in other images of the same chip. Positions are put on the chip through each
image's stage position (the chip coordinate of the image centre, in um, with the image's axes:
x to the right, y down) and pixel size; the suggestion scores how well the outlines overlap
there (intersection over union) and, for stages whose origin has drifted, how well the shapes
agree once their centroids are laid on each other.
"""

from __future__ import annotations

import math
from collections.abc import Hashable, Sequence
from dataclasses import dataclass

import cv2
import numpy as np

from flakebook.errors import InputError


def to_chip_um(
    points_px,
    *,
    um_per_px: float,
    stage_um: tuple[float, float],
    shape: tuple[int, int],
) -> np.ndarray:
    """Pixel (x, y) points of an image to chip coordinates in um.

    ``stage_um`` is the chip coordinate of the image's centre, ``shape`` its (rows, cols); pixel
    coordinates have their origin at the top-left pixel's centre (INTERFACE.md).
    """
    pts = np.asarray(points_px, dtype=float).reshape(-1, 2)
    if not (um_per_px > 0 and math.isfinite(um_per_px)):
        raise InputError(f"pixel size {um_per_px!r} um is not allowed; accepted: a positive size")
    rows, cols = shape
    cx, cy = (cols - 1) / 2.0, (rows - 1) / 2.0
    return np.column_stack(
        [stage_um[0] + (pts[:, 0] - cx) * um_per_px, stage_um[1] + (pts[:, 1] - cy) * um_per_px]
    )


@dataclass(frozen=True)
class LinkSuggestion:
    """How well a new outline matches a known flake's outline (both in chip um)."""

    key: Hashable
    iou: float  # overlap at the recorded stage positions
    shape_iou: float  # overlap with the centroids laid on each other
    distance_um: float  # between the centroids
    area_ratio: float  # new area / known area

    @property
    def score(self) -> float:
        """The suggestion's strength, 0..1: the overlap on the chip, or, when the stage
        positions disagree, a close shape match (shape IoU of 0.8 or more) at half weight."""
        shape = 0.5 * self.shape_iou if self.shape_iou >= 0.8 else 0.0
        return max(self.iou, shape)

    def to_dict(self) -> dict:
        return {
            "key": self.key,
            "iou": self.iou,
            "shape_iou": self.shape_iou,
            "distance_um": self.distance_um,
            "area_ratio": self.area_ratio,
            "score": self.score,
        }


def _area_centroid(poly: np.ndarray) -> tuple[float, np.ndarray]:
    x, y = poly[:, 0], poly[:, 1]
    xn, yn = np.roll(x, -1), np.roll(y, -1)
    cross = x * yn - xn * y
    a = 0.5 * cross.sum()
    if abs(a) < 1e-12:
        return 0.0, poly.mean(axis=0)
    c = np.array([((x + xn) * cross).sum(), ((y + yn) * cross).sum()]) / (6.0 * a)
    return abs(a), c


def polygon_iou(a_um: np.ndarray, b_um: np.ndarray, grid_um: float | None = None) -> float:
    """Intersection over union of two polygons (um), by rasterising both on a common grid fine
    enough for about 1% accuracy on the smaller one."""
    a = np.asarray(a_um, float).reshape(-1, 2)
    b = np.asarray(b_um, float).reshape(-1, 2)
    lo = np.minimum(a.min(axis=0), b.min(axis=0))
    hi = np.maximum(a.max(axis=0), b.max(axis=0))
    if grid_um is None:
        small = min(_area_centroid(a)[0], _area_centroid(b)[0])
        grid_um = max(math.sqrt(max(small, 1e-12)) / 200.0, (hi - lo).max() / 4000.0)
    size = np.ceil((hi - lo) / grid_um).astype(int) + 3
    ma = np.zeros((size[1], size[0]), np.uint8)
    mb = np.zeros_like(ma)
    shift = 4
    for poly, m in ((a, ma), (b, mb)):
        q = np.round(((poly - lo) / grid_um + 1.0) * (1 << shift)).astype(np.int32)
        cv2.fillPoly(m, [q], 1, lineType=cv2.LINE_8, shift=shift)
    inter = np.count_nonzero(ma & mb)
    union = np.count_nonzero(ma | mb)
    return inter / union if union else 0.0


def suggest_links(
    outline_um,
    candidates: Sequence[tuple[Hashable, np.ndarray]],
    *,
    max_distance_um: float = 200.0,
    min_score: float = 0.3,
) -> list[LinkSuggestion]:
    """Rank known flakes as the identity of a new outline.

    Args:
        outline_um: the new region's outline in chip um (:func:`to_chip_um`).
        candidates: (key, outline in chip um) of flakes already outlined in other images.
        max_distance_um: candidates whose centroid is farther than this are not considered.
        min_score: suggestions weaker than this are left out.

    Returns:
        Suggestions, strongest first (possibly empty).
    """
    new = np.asarray(outline_um, float).reshape(-1, 2)
    if len(new) < 3:
        raise InputError("an outline needs at least 3 points to be linked to a flake")
    area_new, c_new = _area_centroid(new)
    out = []
    for key, poly in candidates:
        poly = np.asarray(poly, float).reshape(-1, 2)
        if len(poly) < 3:
            continue
        area_old, c_old = _area_centroid(poly)
        dist = float(np.hypot(*(c_new - c_old)))
        if dist > max_distance_um or area_old <= 0:
            continue
        iou = polygon_iou(new, poly)
        shape_iou = polygon_iou(new - c_new, poly - c_old)
        s = LinkSuggestion(key, iou, shape_iou, dist, area_new / area_old)
        if s.score >= min_score:
            out.append(s)
    out.sort(key=lambda s: s.score, reverse=True)
    return out
