"""Which surveyed regions are parts of one terrace.

The survey splits a flake wherever its contrast changes. Over a hole the contrast changes because
the substrate under the flake changes, not the flake: a suspended region whose surroundings are
one supported region of the same flake is the same terrace (same thickness) as that region. Its
two layer likelihoods (suspended and supported models) are then evidence for one layer number.
"""

from __future__ import annotations

import math

import cv2
import numpy as np

from flakebook.imaging import _grid


def terrace_groups(result, ring: float = 1.25, min_share: float = 0.6) -> list[list[int]]:
    """Group a survey's regions into terraces of uniform thickness.

    Args:
        result: a ``flakebook.imaging.survey.SurveyResult``.
        ring: radius, in hole radii, of the circle sampled around each suspended region's hole.
        min_share: fraction of that circle that must lie in one supported region of the same
            flake for the suspended region to join it (a step edge across the hole keeps them
            apart).

    Returns:
        Lists of region ids; each list is one terrace, its first id the supported region
        (or the lone region) that gives the terrace its outline. Every region is in one list.
    """
    seg = result.segmentation
    by_id = {r.region.id: r for r in result.regions}
    f = seg.factor
    rows, cols = seg.labels.shape
    groups: dict[int, list[int]] = {rid: [rid] for rid in by_id}
    joined: set[int] = set()
    angles = np.linspace(0.0, 2.0 * math.pi, 96, endpoint=False)
    for sr in result.regions:
        if sr.geometry != "suspended" or sr.hole_index is None:
            continue
        hole = result.holes[sr.hole_index]
        cx, cy = hole.center_px
        rad = ring * hole.radius_px
        xs = _grid.to_work(cx + rad * np.cos(angles), f)
        ys = _grid.to_work(cy + rad * np.sin(angles), f)
        j = np.clip(np.round(xs).astype(int), 0, cols - 1)
        i = np.clip(np.round(ys).astype(int), 0, rows - 1)
        labels = seg.labels[i, j]
        best, share = None, 0.0
        for lab in np.unique(labels):
            other = by_id.get(int(lab))
            if other is None or other.geometry != "supported":
                continue
            if other.region.flake_id != sr.region.flake_id:
                continue
            s = float(np.mean(labels == lab))
            if s > share:
                best, share = int(lab), s
        if best is None or share < min_share:
            # A hole the flake covers only in part: the ring runs mostly over bare substrate,
            # so the supported region the suspended part adjoins across the rim decides.
            best, share = _adjoining(seg, sr, hole, by_id)
        if best is not None and share >= min_share:
            groups[best].append(sr.region.id)
            joined.add(sr.region.id)
    return [g for rid, g in sorted(groups.items()) if rid not in joined]


def _adjoining(seg, sr, hole, by_id) -> tuple[int | None, float]:
    """The supported region of the same flake that a suspended region adjoins just outside its
    hole's edge, and its share of the labelled pixels there (None, 0 when there are none).

    The band looked at: pixels within a few full-resolution pixels (past the blurred rim) of
    the suspended region and outside the hole's edge, on the working grid.
    """
    f = seg.factor
    rows, cols = seg.labels.shape
    reach = 2 + int(math.ceil(6.0 / f))
    x0, y0, x1, y1 = sr.region.bbox_px
    j0, j1 = max(0, x0 // f - reach), min(cols, x1 // f + reach + 1)
    i0, i1 = max(0, y0 // f - reach), min(rows, y1 // f + reach + 1)
    crop = seg.labels[i0:i1, j0:j1]
    own = (crop == sr.region.id).astype(np.uint8)
    if not own.any():
        return None, 0.0
    k = cv2.getStructuringElement(cv2.MORPH_ELLIPSE, (2 * reach + 1, 2 * reach + 1))
    band = cv2.dilate(own, k) > 0
    cx, cy = (float(_grid.to_work(v, f)) for v in hole.center_px)
    yy, xx = np.ogrid[i0:i1, j0:j1]
    band &= np.hypot(xx - cx, yy - cy) > hole.radius_px / f + 0.5
    labs = crop[band]
    labs = labs[labs > 0]
    if labs.size < 3:
        return None, 0.0
    best, count = None, 0
    for lab, n in zip(*np.unique(labs, return_counts=True)):
        other = by_id.get(int(lab))
        if other is None or other.geometry != "supported":
            continue
        if other.region.flake_id != sr.region.flake_id:
            continue
        if n > count:
            best, count = int(lab), int(n)
    return best, count / float(labs.size)
