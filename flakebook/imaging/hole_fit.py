"""A hole's edge at sub-pixel precision: radial intensity profiles and a geometric circle fit.

Intensity profiles along rays from a rough centre, the half-way crossing between the inside and
outside levels on each ray, and a least-squares (geometric) circle through those edge points.
The radius's standard error comes from the scatter of the edge points about the circle.
"""

from __future__ import annotations

import math

import cv2
import numpy as np


def fit_circle(x: np.ndarray, y: np.ndarray) -> tuple[float, float, float, np.ndarray]:
    """Geometric least-squares circle through points; returns (cx, cy, r, residuals)."""
    x = np.asarray(x, np.float64)
    y = np.asarray(y, np.float64)
    # Algebraic (Kasa) start, then Gauss-Newton on the geometric distances.
    a = np.column_stack([x, y, np.ones_like(x)])
    b = x**2 + y**2
    sol = np.linalg.lstsq(a, b, rcond=None)[0]
    cx, cy = sol[0] / 2, sol[1] / 2
    r = math.sqrt(max(sol[2] + cx**2 + cy**2, 1e-12))
    for _ in range(12):
        dx, dy = x - cx, y - cy
        d = np.hypot(dx, dy)
        d = np.maximum(d, 1e-12)
        res = d - r
        j = np.column_stack([-dx / d, -dy / d, -np.ones_like(d)])
        step = np.linalg.lstsq(j, -res, rcond=None)[0]
        cx, cy, r = cx + step[0], cy + step[1], r + step[2]
        if np.abs(step).max() < 1e-7:
            break
    res = np.hypot(x - cx, y - cy) - r
    return float(cx), float(cy), float(r), res


def refine_hole(
    gray: np.ndarray,
    cx: float,
    cy: float,
    r: float,
    *,
    offset: tuple[int, int] = (0, 0),
    n_angles: int | None = None,
    iterations: int = 2,
    max_rms_px: float = 0.3,
    max_rms_rel: float = 0.03,
    min_step: float | None = None,
    sampler=None,
) -> tuple[float, float, float, float, float, int] | None:
    """Sub-pixel centre and radius of a hole from radial intensity profiles.

    Args:
        gray: 2-D float image (full resolution, or a crop whose top-left pixel is ``offset``
            (x, y) in the full image).
        cx, cy, r: rough centre and radius in full-image pixels.
        n_angles: rays (default: about one per pixel of circumference, 24 to 360).
        max_rms_px, max_rms_rel: the largest rms scatter of edge points about the circle
            accepted (pixels, plus a fraction of the radius); rounder shapes only.
        min_step: the smallest inside-outside level difference accepted.
        sampler: instead of ``gray``, a function ``(x, y) -> values`` giving the bilinearly
            interpolated gray level at full-image coordinates (NaN outside the image).

    Returns:
        (cx, cy, r, center_err, radius_err, n_points) or None when no clear edge is found.
    """
    opts = dict(
        n_angles=n_angles,
        iterations=iterations,
        max_rms_px=max_rms_px,
        max_rms_rel=max_rms_rel,
        min_step=min_step,
    )
    if sampler is not None:
        return refine_holes([(cx, cy, r)], sampler, **opts)[0]
    g = np.ascontiguousarray(gray, np.float32)
    ox, oy = offset
    steps = _refine_steps(cx, cy, r, **opts)
    try:
        want = next(steps)
        while True:
            px, py, th, rr = want
            mx = (px - ox + np.outer(np.cos(th), rr)).astype(np.float32)
            my = (py - oy + np.outer(np.sin(th), rr)).astype(np.float32)
            prof = cv2.remap(
                g, mx, my, cv2.INTER_LINEAR, borderMode=cv2.BORDER_CONSTANT, borderValue=np.nan
            )
            want = steps.send(prof)
    except StopIteration as done:
        return done.value


def refine_holes(
    circles, sampler, **opts
) -> list[tuple[float, float, float, float, float, int] | None]:
    """:func:`refine_hole` with a ``sampler`` for many rough circles ``(cx, cy, r)`` at once:
    each round of profiles of every hole is sampled in one call (the sampler works point by
    point, so the results are those of one hole at a time)."""
    out: list = [None] * len(circles)
    live = {}
    wants = {}
    for i, (cx, cy, r) in enumerate(circles):
        steps = _refine_steps(cx, cy, r, **opts)
        try:
            wants[i] = next(steps)
        except StopIteration as done:
            out[i] = done.value
            continue
        live[i] = steps
    while live:
        ids = list(live)
        xs, ys, shapes = [], [], []
        for i in ids:
            px, py, th, rr = wants[i]
            xs.append((px + np.outer(np.cos(th), rr)).ravel())
            ys.append((py + np.outer(np.sin(th), rr)).ravel())
            shapes.append((len(th), len(rr)))
        prof_all = sampler(np.concatenate(xs), np.concatenate(ys))
        at = 0
        for i, shape in zip(ids, shapes):
            n = shape[0] * shape[1]
            prof = prof_all[at : at + n].reshape(shape)
            at += n
            try:
                wants[i] = live[i].send(prof)
            except StopIteration as done:
                out[i] = done.value
                del live[i]
    return out


def _refine_steps(
    cx, cy, r, *, n_angles=None, iterations=2, max_rms_px=0.3, max_rms_rel=0.03, min_step=None
):
    """The fit of :func:`refine_hole` as a generator: it yields the rays it needs sampled
    ``(cx, cy, angles, radii)`` and is sent back the profiles ``[angle, radius]``; its return
    value is the result."""
    zone = 8.0
    for _ in range(iterations):
        k = n_angles or int(np.clip(2 * math.pi * r, 24, 96))
        th = np.linspace(0, 2 * math.pi, k, endpoint=False)
        step = 0.25 if r < 20 else 0.5
        # Levels from a few radii well inside and outside; the edge zone finely sampled.
        rr = np.concatenate(
            [
                np.linspace(0.3 * r, 0.55 * r, 4),
                np.arange(max(0.65 * r, r - zone), min(1.35 * r + 1.0, r + zone + 1.0), step),
                np.linspace(1.45 * r + 1.0, 1.7 * r + 2.0, 4),
            ]
        )
        prof = yield cx, cy, th, rr
        inside = np.nanmedian(prof[:, :4])
        outside = np.nanmedian(prof[:, -4:])
        if not (np.isfinite(inside) and np.isfinite(outside)):
            return None
        mid = 0.5 * (inside + outside)
        s = np.sign(prof - mid)
        # Crossing nearest to the rough radius on each ray.
        cross = (s[:, :-1] * s[:, 1:]) < 0
        cross &= np.isfinite(prof[:, :-1]) & np.isfinite(prof[:, 1:])
        if not cross.any():
            return None
        dist = np.where(cross, np.abs(rr[:-1] - r), np.inf)
        j = np.argmin(dist, axis=1)
        ok = np.isfinite(dist[np.arange(k), j])
        p0 = prof[np.arange(k), j]
        p1 = prof[np.arange(k), j + 1]
        t = (mid - p0) / np.where(p1 != p0, p1 - p0, 1.0)
        redge = rr[j] + (rr[j + 1] - rr[j]) * np.clip(t, 0, 1)
        ex = cx + np.cos(th) * redge
        ey = cy + np.sin(th) * redge
        ex, ey = ex[ok], ey[ok]
        if len(ex) < 8:
            return None
        ncx, ncy, nr, res = fit_circle(ex, ey)
        # Leave out rays that a flake edge or dust disturbs.
        mad = 1.4826 * np.median(np.abs(res - np.median(res)))
        good = np.abs(res) <= max(3 * mad, 0.15)
        if np.count_nonzero(good) < 0.7 * k:
            return None  # too many rays off the circle: not a round hole
        if not good.all():
            ncx, ncy, nr, res = fit_circle(ex[good], ey[good])
        if not (np.isfinite(nr) and nr > 0.5 and math.hypot(ncx - cx, ncy - cy) < 0.5 * r + 2):
            return None
        cx, cy, r = ncx, ncy, nr
        zone = 4.0  # the edge is now known to about a pixel
    n = len(res)
    sd = float(np.sqrt(np.sum(res**2) / max(n - 3, 1)))
    if sd > max_rms_px + max_rms_rel * r:
        return None  # the edge is not a circle (a flake corner, dust)
    if min_step is not None and abs(float(inside) - float(outside)) < min_step:
        return None  # too faint a step between inside and outside
    return cx, cy, r, sd * math.sqrt(2.0 / n), sd / math.sqrt(n), n
