"""Which surveyed regions are parts of one terrace.

The survey splits a flake wherever its contrast changes. Over a hole the contrast changes because
the substrate under the flake changes, not the flake: a suspended region whose surroundings are
one supported region of the same flake is the same terrace (same thickness) as that region. Its
two layer likelihoods (suspended and supported models) are then evidence for one layer number.
"""

from __future__ import annotations

import math

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
        if best is not None and share >= min_share:
            groups[best].append(sr.region.id)
            joined.add(sr.region.id)
    return [g for rid, g in sorted(groups.items()) if rid not in joined]
