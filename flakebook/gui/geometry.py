"""Outline geometry for the window's edit tools: merging two outlines, splitting one by a line.

Plain numpy and OpenCV on rasterised polygons (pixel coordinates as INTERFACE.md gives them:
the origin at the top-left pixel's centre), no Qt. Results are simplified to within half a
pixel of the rasterised shape.
"""

from __future__ import annotations

import cv2
import numpy as np

from flakebook.errors import InputError

_SCALE = 4  # sub-pixel rasterisation: 1/4 pixel


def _raster(polys: list[np.ndarray], pad: int = 4):
    pts = np.vstack([np.asarray(p, float) for p in polys])
    x0, y0 = np.floor(pts.min(axis=0)) - pad
    x1, y1 = np.ceil(pts.max(axis=0)) + pad
    w = int((x1 - x0) * _SCALE) + 1
    h = int((y1 - y0) * _SCALE) + 1
    return (x0, y0), (h, w)


def _fill(poly: np.ndarray, origin, shape) -> np.ndarray:
    m = np.zeros(shape, np.uint8)
    p = np.round((np.asarray(poly, float) - origin) * _SCALE).astype(np.int32)
    cv2.fillPoly(m, [p], 1)
    return m


def _outline(mask: np.ndarray, origin) -> np.ndarray | None:
    contours, _ = cv2.findContours(
        mask.astype(np.uint8), cv2.RETR_EXTERNAL, cv2.CHAIN_APPROX_SIMPLE
    )
    if not contours:
        return None
    c = max(contours, key=cv2.contourArea)
    c = cv2.approxPolyDP(c, 0.5 * _SCALE, True).reshape(-1, 2).astype(float)
    if len(c) < 3:
        return None
    return c / _SCALE + np.asarray(origin, float)


def merge_outlines(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """The outline of the union of two outlines (they must touch or overlap)."""
    origin, shape = _raster([a, b])
    ma, mb = _fill(a, origin, shape), _fill(b, origin, shape)
    # touching within a pixel counts: close the gap of the rasterisation
    union = cv2.morphologyEx(ma | mb, cv2.MORPH_CLOSE, np.ones((_SCALE + 1, _SCALE + 1), np.uint8))
    n, _labels = cv2.connectedComponents(union)
    if n - 1 > 1:
        raise InputError(
            "The two outlines neither touch nor overlap; merge only neighbouring outlines."
        )
    out = _outline(union, origin)
    if out is None:
        raise InputError("The merged outline is empty.")
    return out


def split_outline(poly: np.ndarray, p0, p1) -> tuple[np.ndarray, np.ndarray]:
    """Split an outline along the straight line through p0 and p1 into two outlines."""
    p0, p1 = np.asarray(p0, float), np.asarray(p1, float)
    d = p1 - p0
    if np.hypot(*d) < 2:
        raise InputError("The split line is too short; draw it across the outline.")
    origin, shape = _raster([poly])
    m = _fill(poly, origin, shape)
    yy, xx = np.mgrid[0 : shape[0], 0 : shape[1]]
    x = xx / _SCALE + origin[0]
    y = yy / _SCALE + origin[1]
    side = (d[0] * (y - p0[1]) - d[1] * (x - p0[0])) >= 0
    a = _outline(m & side, origin)
    b = _outline(m & ~side, origin)
    if a is None or b is None:
        raise InputError("The split line does not cross the outline; draw it from edge to edge.")
    return a, b


def outline_iou(a: np.ndarray, b: np.ndarray) -> float:
    """Intersection over union of two outlines (polygons in image pixels), 0 to 1, from their
    rasterised areas (1/4 pixel)."""
    origin, shape = _raster([a, b])
    ma, mb = _fill(a, origin, shape).astype(bool), _fill(b, origin, shape).astype(bool)
    union = np.count_nonzero(ma | mb)
    return float(np.count_nonzero(ma & mb) / union) if union else 0.0


def match_outlines(
    new: list[np.ndarray], old: dict[int, np.ndarray], min_iou: float = 0.5
) -> dict[int, int]:
    """Pair new outlines (by index) with old ones (by key), one to one, best overlap first,
    where the intersection over union exceeds ``min_iou``."""
    pairs = []
    for i, a in enumerate(new):
        lo_a, hi_a = np.min(a, axis=0), np.max(a, axis=0)
        for key, b in old.items():
            lo_b, hi_b = np.min(b, axis=0), np.max(b, axis=0)
            if np.any(hi_a < lo_b) or np.any(hi_b < lo_a):
                continue  # boxes apart: no overlap
            iou = outline_iou(a, b)
            if iou > min_iou:
                pairs.append((iou, i, key))
    out: dict[int, int] = {}
    used: set[int] = set()
    for _iou, i, key in sorted(pairs, reverse=True):
        if i not in out and key not in used:
            out[i] = key
            used.add(key)
    return out
