"""The hole lattice: square or hexagonal pitch and angle fitted to hole centres, its sites, and
the holes it predicts under flakes.

A lattice predicts holes that nobody has seen, so it is accepted only from at least
MIN_LATTICE_HOLES centres lying within MAX_LATTICE_RESIDUAL of the pitch of it.
"""

from __future__ import annotations

import math

import numpy as np

from flakebook.errors import InputError
from flakebook.imaging import _grid
from flakebook.imaging.coverage import signed_distances
from flakebook.imaging.records import Hole, Lattice

MIN_LATTICE_HOLES = 6  # fewer holes do not fix a lattice (4 points fit some lattice nearly always)
MAX_LATTICE_RESIDUAL = 0.05  # largest rms residual accepted, as a fraction of the pitch


def fit_lattice(
    centers_px: np.ndarray,
    kind: str = "auto",
    *,
    min_holes: int = MIN_LATTICE_HOLES,
    max_residual_rel: float = MAX_LATTICE_RESIDUAL,
) -> Lattice | None:
    """Fit a square or hexagonal lattice to hole centres ([n, 2], pixels).

    A lattice predicts holes that nobody has seen, so it is accepted only from at least
    ``min_holes`` centres whose rms residual (per coordinate) is under ``max_residual_rel`` of
    the pitch. Returns None otherwise (:func:`lattice_refusal` says why).
    """
    lat = _fit_lattice(centers_px, kind)
    if lat is None or lat.n_holes < min_holes:
        return None
    if lat.residual_px > max_residual_rel * lat.pitch_px:
        return None
    return lat


def lattice_refusal(
    centers_px: np.ndarray,
    kind: str = "auto",
    *,
    min_holes: int = MIN_LATTICE_HOLES,
    max_residual_rel: float = MAX_LATTICE_RESIDUAL,
) -> str | None:
    """Why :func:`fit_lattice` gives no lattice for these centres (None when it gives one)."""
    p = np.asarray(centers_px, np.float64).reshape(-1, 2)
    if len(p) < min_holes:
        return (
            f"no hole lattice fitted: {len(p)} holes found, at least {min_holes} are needed, so "
            "no hidden holes are predicted"
        )
    lat = _fit_lattice(p, kind)
    if lat is None:
        return "no hole lattice fitted: the holes form no regular pattern"
    if lat.residual_px > max_residual_rel * lat.pitch_px:
        return (
            f"no hole lattice fitted: the holes lie {100 * lat.residual_px / lat.pitch_px:.0f}% "
            f"of the pitch off the best {lat.kind} lattice (at most "
            f"{100 * max_residual_rel:.0f}% accepted), so no hidden holes are predicted"
        )
    return None


def _nearest_distance(p: np.ndarray, block: int = 512) -> np.ndarray:
    """Distance from each point to its nearest other point, sqrt(dx*dx + dy*dy)."""
    out = np.empty(len(p))
    for s0 in range(0, len(p), block):
        d = p[s0 : s0 + block, None, :] - p[None, :, :]
        d2 = d[..., 0] * d[..., 0] + d[..., 1] * d[..., 1]
        d2[np.arange(d2.shape[0]), np.arange(s0, s0 + d2.shape[0])] = np.inf  # not itself
        out[s0 : s0 + block] = np.sqrt(d2.min(1))
    return out


def _fit_lattice(centers_px: np.ndarray, kind: str = "auto") -> Lattice | None:
    """The best square or hexagonal lattice through the centres, however poor (None with fewer
    than 4 centres or no neighbour pairs)."""
    if kind not in ("auto", "square", "hexagonal"):
        raise InputError(f"lattice kind {kind!r}; accepted: auto, square, hexagonal")
    p = np.asarray(centers_px, np.float64).reshape(-1, 2)
    n = len(p)
    if n < 4:
        return None
    pitch0 = float(np.median(_nearest_distance(p)))
    if not pitch0 > 0:
        return None
    pairs = _grid.close_pairs(p, 1.25 * pitch0)
    if len(pairs) < 3:
        return None
    v = p[pairs[:, 1]] - p[pairs[:, 0]]
    th = np.arctan2(v[:, 1], v[:, 0])
    r4 = np.abs(np.mean(np.exp(4j * th)))
    r6 = np.abs(np.mean(np.exp(6j * th)))
    if kind == "auto":
        kind = "square" if r4 >= r6 else "hexagonal"
    k = 4 if kind == "square" else 6
    ang = float(np.angle(np.mean(np.exp(1j * k * th))) / k) % (2 * math.pi / k)
    second = ang + (math.pi / 2 if kind == "square" else math.pi / 3)
    a1 = pitch0 * np.array([math.cos(ang), math.sin(ang)])
    a2 = pitch0 * np.array([math.cos(second), math.sin(second)])
    ref = p[np.argmin(((p - p.mean(0)) ** 2).sum(1))]
    basis = np.column_stack([a1, a2])
    for _ in range(3):
        ij = np.linalg.solve(basis, (p - ref).T).T
        idx = np.round(ij)
        a = np.column_stack([np.ones(n), idx[:, 0], idx[:, 1]])
        if np.linalg.matrix_rank(a) < 3:
            return None  # the holes lie on one line: the second lattice vector is unknown
        sol, *_ = np.linalg.lstsq(a, p, rcond=None)
        ref, a1, a2 = sol[0], sol[1], sol[2]
        basis = np.column_stack([a1, a2])
    res = p - a @ sol
    rms = float(np.sqrt(np.sum(res**2) / max(2 * n - 6, 1)))
    cov = np.linalg.pinv(a.T @ a) * rms**2
    l1, l2 = float(np.hypot(*a1)), float(np.hypot(*a2))
    pitch = 0.5 * (l1 + l2)
    pitch_err = 0.5 * math.sqrt(cov[1, 1] + cov[2, 2])
    angle = math.degrees(math.atan2(a1[1], a1[0])) % (360.0 / k)
    return Lattice(
        kind,
        pitch,
        pitch_err,
        angle,
        (float(ref[0]), float(ref[1])),
        (float(a1[0]), float(a1[1])),
        (float(a2[0]), float(a2[1])),
        rms,
        n,
    )


def lattice_sites(lattice: Lattice, shape: tuple[int, int], margin_px: float = 0.0) -> np.ndarray:
    """Every lattice position inside the image (at least ``margin_px`` from its edges)."""
    rows, cols = shape
    o = np.array(lattice.origin_px)
    basis = np.column_stack([lattice.a1_px, lattice.a2_px])
    corners = np.array([[0, 0], [cols - 1, 0], [0, rows - 1], [cols - 1, rows - 1]], float)
    ij = np.linalg.solve(basis, (corners - o).T).T
    lo = np.floor(ij.min(0)) - 1
    hi = np.ceil(ij.max(0)) + 1
    ii, jj = np.meshgrid(np.arange(lo[0], hi[0] + 1), np.arange(lo[1], hi[1] + 1), indexing="ij")
    pts = o + np.outer(ii.ravel(), lattice.a1_px) + np.outer(jj.ravel(), lattice.a2_px)
    keep = (
        (pts[:, 0] >= margin_px)
        & (pts[:, 0] <= cols - 1 - margin_px)
        & (pts[:, 1] >= margin_px)
        & (pts[:, 1] <= rows - 1 - margin_px)
    )
    return pts[keep]


def predict_hidden_holes(
    holes: tuple[Hole, ...],
    lattice: Lattice,
    shape: tuple[int, int],
    outlines_px: list[np.ndarray],
) -> tuple[Hole, ...]:
    """Lattice sites with no detected hole whose disk lies under one of the outlines."""
    det = [h for h in holes if h.detected]
    if not det or not outlines_px:
        return ()
    radii = np.array([h.radius_px for h in det])
    r = float(np.median(radii))
    r_err = float(1.4826 * np.median(np.abs(radii - r))) if len(radii) > 2 else float(radii.std())
    sites = lattice_sites(lattice, shape, margin_px=r)
    dc = np.array([h.center_px for h in det])
    if not len(sites):
        return ()
    # Sites with no detected hole within half a pitch ...
    far = np.array([np.min(np.hypot(*(dc - s).T)) >= 0.5 * lattice.pitch_px for s in sites])
    cand = np.flatnonzero(far)
    # ... whose disk lies (partly) under an outline: signed distance > -r to any of them (a
    # site farther than r outside an outline's box cannot be).
    under = np.zeros(len(sites), bool)
    for poly in outlines_px:
        poly = np.asarray(poly, np.float64).reshape(-1, 2)
        if len(poly) < 3 or not len(cand):
            continue
        (x0, y0), (x1, y1) = poly.min(0), poly.max(0)
        pts = sites[cand]
        box = (pts[:, 0] >= x0 - r) & (pts[:, 0] <= x1 + r)
        box &= (pts[:, 1] >= y0 - r) & (pts[:, 1] <= y1 + r)
        test = cand[box]
        if len(test):
            under[test[signed_distances(poly, sites[test]) > -r]] = True
        cand = cand[~under[cand]]
    out = [
        Hole(
            (float(s[0]), float(s[1])),
            r,
            r_err,
            lattice.residual_px,
            det[0].um_per_px,
            det[0].um_per_px_err,
            False,
            0,
        )
        for s in sites[under]
    ]
    return tuple(out)
