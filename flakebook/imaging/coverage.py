"""Coverage of holes by flake outlines, and holes placed or edited by hand.

Coverage of a hole by a flake outline is the exact area of the disk inside the polygon
(circle-polygon intersection), whether it is fully covered, and the smallest margin from the
hole's edge to the flake's edge (negative when the flake's edge crosses the hole).
"""

from __future__ import annotations

import math

import numpy as np

from flakebook.errors import InputError
from flakebook.imaging.records import Coverage, Hole


def signed_distance(polygon_px: np.ndarray, point: tuple[float, float]) -> float:
    """Distance from a point to a polygon's boundary, positive inside, negative outside."""
    return float(signed_distances(polygon_px, np.asarray(point, np.float64).reshape(1, 2))[0])


def signed_distances(polygon_px: np.ndarray, points: np.ndarray) -> np.ndarray:
    """:func:`signed_distance` of many points ``[n, 2]`` at once (the same arithmetic per
    point), in blocks that keep the point-edge arrays small."""
    p = np.asarray(polygon_px, np.float64).reshape(-1, 2)
    q_all = np.asarray(points, np.float64).reshape(-1, 2)
    a = p
    b = np.roll(p, -1, axis=0)
    d = b - a
    L2 = np.maximum((d**2).sum(1), 1e-300)
    out = np.empty(len(q_all))
    step = max(1, 2_000_000 // max(len(p), 1))
    for s0 in range(0, len(q_all), step):
        q = q_all[s0 : s0 + step, None, :]  # (m, 1, 2) against the edges (e, 2)
        t = np.clip(((q - a) * d).sum(-1) / L2, 0, 1)
        near = a + t[..., None] * d
        dist = np.sqrt(((near - q) ** 2).sum(-1)).min(-1)
        # Even-odd rule.
        y = q[:, :, 1]
        cond = (a[:, 1] > y) != (b[:, 1] > y)
        with np.errstate(divide="ignore", invalid="ignore"):
            xc = a[:, 0] + (y - a[:, 1]) * d[:, 0] / d[:, 1]
        inside = np.count_nonzero(cond & (xc > q[:, :, 0]), axis=1) % 2 == 1
        out[s0 : s0 + step] = np.where(inside, dist, -dist)
    return out


def circle_polygon_area(
    polygon_px: np.ndarray, center: tuple[float, float], radius: float
) -> float:
    """Exact area of the intersection of a disk with a simple polygon (either orientation)."""
    p = np.asarray(polygon_px, np.float64).reshape(-1, 2) - np.asarray(center, np.float64)
    if len(p) < 3 or radius <= 0:
        return 0.0
    a = p
    b = np.roll(p, -1, axis=0)
    d = b - a
    r2 = radius * radius
    # Intersections of each edge a + t d with the circle.
    qa = (d**2).sum(1)
    qb = 2 * (a * d).sum(1)
    qc = (a**2).sum(1) - r2
    disc = qb**2 - 4 * qa * qc
    sq = np.sqrt(np.maximum(disc, 0))
    with np.errstate(divide="ignore", invalid="ignore"):
        t1 = np.where(disc > 0, (-qb - sq) / (2 * qa), 1.0)
        t2 = np.where(disc > 0, (-qb + sq) / (2 * qa), 1.0)
    t1 = np.clip(np.nan_to_num(t1, nan=1.0), 0, 1)
    t2 = np.clip(np.nan_to_num(t2, nan=1.0), 0, 1)
    ts = [np.zeros_like(t1), t1, t2, np.ones_like(t1)]
    total = 0.0
    for k in range(3):
        ta, tb = ts[k], ts[k + 1]
        pa = a + ta[:, None] * d
        pb = a + tb[:, None] * d
        mid = a + (0.5 * (ta + tb))[:, None] * d
        inside = (mid**2).sum(1) <= r2
        cross = pa[:, 0] * pb[:, 1] - pa[:, 1] * pb[:, 0]
        dot = (pa * pb).sum(1)
        tri = 0.5 * cross
        sector = 0.5 * r2 * np.arctan2(cross, dot)
        total += float(np.sum(np.where(tb > ta, np.where(inside, tri, sector), 0.0)))
    return abs(total)


def hole_coverage(
    outline_px: np.ndarray, hole: Hole | tuple[tuple[float, float], float], um_per_px: float
) -> Coverage:
    """Covered fraction, full coverage and margin of a hole under a flake outline.

    The margin is the distance from the hole's edge to the nearest point of the flake's edge
    (pixels and um): positive when the hole lies wholly inside the outline, negative when the
    flake edge crosses the hole (a straight edge through the centre gives -radius and covers
    exactly half).
    """
    if isinstance(hole, Hole):
        center, r = hole.center_px, hole.radius_px
    else:
        center, r = hole
    poly = np.asarray(outline_px, np.float64).reshape(-1, 2)
    if len(poly) < 3:
        return Coverage(0.0, False, float("nan"), float("nan"))
    return _coverage_from(poly, (center, r), signed_distance(poly, center), um_per_px)


def _coverage_from(poly: np.ndarray, hole, sd: float, um_per_px: float) -> Coverage:
    """hole_coverage from the signed distance of the hole's centre to the outline."""
    if isinstance(hole, Hole):
        center, r = hole.center_px, hole.radius_px
    else:
        center, r = hole
    margin = sd - r
    if sd >= r:
        frac = 1.0  # wholly inside: no edge within the disk
    elif sd <= -r:
        frac = 0.0  # wholly outside
    else:
        frac = circle_polygon_area(poly, center, r) / (math.pi * r * r)
        frac = float(min(max(frac, 0.0), 1.0))
    full = bool(margin >= 0 and frac > 1 - 1e-9)
    return Coverage(frac, full, margin, margin * um_per_px)


# ---- editing by hand and coverage tables -----------------------------------------------------


def manual_hole(
    center_px: tuple[float, float],
    radius_px: float,
    *,
    um_per_px: float,
    um_per_px_err: float = 0.0,
    placement_err_px: float = 0.5,
) -> Hole:
    """A hole placed by hand (centre and radius in pixels; their uncertainty is how precisely
    they were placed)."""
    x, y = (float(v) for v in center_px)
    r = float(radius_px)
    if not (math.isfinite(x) and math.isfinite(y) and math.isfinite(r) and r > 0):
        raise InputError(
            f"hole at {center_px} with radius {radius_px!r} px; accepted: a finite centre and a "
            "positive radius"
        )
    return Hole((x, y), r, placement_err_px, placement_err_px, um_per_px, um_per_px_err, True, 0)


def edit_holes(
    holes: tuple[Hole, ...],
    *,
    add: tuple[Hole, ...] = (),
    move: dict[int, tuple[float, float]] | None = None,
    resize: dict[int, float] | None = None,
    delete: tuple[int, ...] = (),
) -> tuple[Hole, ...]:
    """A new tuple of holes with some moved, resized, deleted (by index) and some added.

    Moved or resized holes keep their other values; the input is not changed.
    """
    from dataclasses import replace

    n = len(holes)
    for i in list((move or {}).keys()) + list((resize or {}).keys()) + list(delete):
        if not (0 <= int(i) < n):
            raise InputError(f"hole index {i}; accepted: 0 to {n - 1}")
    out = []
    for i, h in enumerate(holes):
        if i in set(delete):
            continue
        if move and i in move:
            x, y = (float(v) for v in move[i])
            h = replace(h, center_px=(x, y))
        if resize and i in resize:
            r = float(resize[i])
            if not (math.isfinite(r) and r > 0):
                raise InputError(f"hole radius {resize[i]!r} px; accepted: a positive number")
            h = replace(h, radius_px=r)
        out.append(h)
    return tuple(out) + tuple(add)


def coverage_pairs(
    outlines_px: dict[int, np.ndarray], holes: tuple[Hole, ...], um_per_px: float
) -> list[tuple[int, int, Coverage]]:
    """(flake id, hole index, coverage) for every flake outline that covers part of a hole."""
    out = []
    if not holes:
        return out
    centres = np.array([h.center_px for h in holes], np.float64).reshape(-1, 2)
    radii = np.array([h.radius_px for h in holes], np.float64)
    for fid, poly in outlines_px.items():
        poly = np.asarray(poly, np.float64).reshape(-1, 2)
        if len(poly) < 3:
            continue
        x0, y0 = poly.min(0)
        x1, y1 = poly.max(0)
        cx, cy = centres[:, 0], centres[:, 1]
        near = ~((cx + radii < x0) | (cx - radii > x1) | (cy + radii < y0) | (cy - radii > y1))
        ks = np.flatnonzero(near)
        if not len(ks):
            continue
        sds = signed_distances(poly, centres[ks])
        for k, sd in zip(ks, sds):
            cov = _coverage_from(poly, holes[k], float(sd), um_per_px)
            if cov.covered_fraction > 0:
                out.append((fid, int(k), cov))
    return out
