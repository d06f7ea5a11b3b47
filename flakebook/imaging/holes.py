"""Holes in the chip: detection (Hough transform and small round spots) and the entry point
for everything about holes.

Circular holes are found by the Hough transform on a downsampled image (small ones as round spots
on a finer grid), then each edge is fitted at full resolution (``hole_fit``). The lattice
(``lattice``) and coverage by flake outlines and editing by hand (``coverage``) are re-exported
here, as are the records (``records``: Hole, Lattice, Coverage).

Coordinates: full-resolution pixels, origin at the top-left pixel's centre (INTERFACE.md).
"""

from __future__ import annotations

import math

import cv2
import numpy as np

from flakebook.errors import InputError, check_cancel
from flakebook.imaging import _grid
from flakebook.imaging._threads import with_one_blas_thread
from flakebook.imaging.coverage import (
    circle_polygon_area,
    coverage_pairs,
    edit_holes,
    hole_coverage,
    manual_hole,
    signed_distance,
)
from flakebook.imaging.hole_fit import fit_circle, refine_hole, refine_holes
from flakebook.imaging.lattice import (
    MAX_LATTICE_RESIDUAL,
    MIN_LATTICE_HOLES,
    fit_lattice,
    lattice_refusal,
    lattice_sites,
    predict_hidden_holes,
)
from flakebook.imaging.records import Coverage, Hole, Lattice

__all__ = [
    "MAX_LATTICE_RESIDUAL",
    "MIN_HOLE_RADIUS_PX",
    "MIN_LATTICE_HOLES",
    "Coverage",
    "Hole",
    "Lattice",
    "circle_polygon_area",
    "coverage_pairs",
    "detect_holes",
    "edit_holes",
    "fit_circle",
    "fit_lattice",
    "hole_coverage",
    "lattice_refusal",
    "lattice_sites",
    "manual_hole",
    "predict_hidden_holes",
    "refine_hole",
    "signed_distance",
]

MIN_HOLE_RADIUS_PX = 6.0  # smallest hole radius (full-resolution pixels) the default search finds


@with_one_blas_thread
def detect_holes(
    intensity: np.ndarray,
    *,
    um_per_px: float,
    um_per_px_err: float = 0.0,
    radius_um: float | None = None,
    radius_range_um: tuple[float, float] | None = None,
    work: np.ndarray | None = None,
    factor: int | None = None,
    min_step: float | None = None,
    cancel=None,
) -> tuple[Hole, ...]:
    """Find circular holes and fit each one at full resolution.

    Args:
        intensity: a Micrograph, or float ``[row, col, ch]`` (or 2-D) linear intensity.
        um_per_px, um_per_px_err: the scale.
        radius_um: the expected hole radius (searches 0.6x to 1.6x of it), or
        radius_range_um: (min, max) radius; default: MIN_HOLE_RADIUS_PX (6 px) to a quarter of
            the image (radii under 4 working pixels on a finer grid).
        work, factor: a block-averaged working copy and its factor.
        min_step: smallest inside-outside intensity step accepted for a hole (default: 8 noise
            standard deviations of the image).

    Returns:
        Holes sorted by y then x.
    """
    from flakebook.imaging.io import Micrograph

    if isinstance(intensity, Micrograph):
        img = intensity
        rows, cols = img.shape

        def crop_of(rs: slice, cs: slice) -> np.ndarray:
            return img.crop(rs, cs)

        def work_of(f: int) -> np.ndarray:
            return img.working(f)

        def fine_gray(f: int) -> np.ndarray:
            # Edges only (the Hough transform): block means of the decoded samples, which are
            # a monotonic function of the intensity, with no conversion to linear.
            return _gray(_grid.downsample(img.samples, f).astype(np.float32, copy=False))

        sampler = _gray_sampler(img)
    else:
        arr = np.asarray(intensity)
        if arr.ndim == 2:
            arr = arr[:, :, None]
        rows, cols = arr.shape[:2]

        def crop_of(rs: slice, cs: slice) -> np.ndarray:
            return arr[rs, cs]

        def work_of(f: int) -> np.ndarray:
            return _grid.downsample(arr, f)

        def fine_gray(f: int) -> np.ndarray:
            return _gray(_grid.downsample(arr, f))

        sampler = None

    if radius_um is not None:
        lo_um, hi_um = 0.6 * radius_um, 1.6 * radius_um
    elif radius_range_um is not None:
        lo_um, hi_um = radius_range_um
    else:
        lo_um, hi_um = None, None
    if lo_um is not None and not (0 < lo_um < hi_um):
        raise InputError(f"hole radius range {lo_um}-{hi_um} um; accepted: 0 < min < max")
    # A factor that keeps the smallest expected radius at >= 6 working pixels.
    if factor is None or work is None:
        factor = _grid.choose_factor((rows, cols), 1.5e6)
        work = None
    f = factor
    if lo_um is not None:
        fmax = max(1, int(lo_um / um_per_px / 6.0))
        if f > fmax:
            f = fmax
            work = None
    if work is None:
        work = work_of(f)
    if work.ndim == 2:
        work = work[:, :, None]
    # Hough passes: (gray image, its factor, smallest and largest radius in its pixels).
    passes = []
    if lo_um is not None:
        rmin = max(3, int(math.floor(lo_um / um_per_px / f)))
        rmax = max(rmin + 2, int(math.ceil(hi_um / um_per_px / f)))
        passes.append((_gray(work), f, rmin, rmax, "hough"))
    else:
        # Default: every hole from MIN_HOLE_RADIUS_PX up to a quarter of the image. Radii under
        # 4 working pixels are searched on a grid fine enough to give them 3 pixels or more.
        gray = _gray(work)
        top = max(8, min(gray.shape) // 4)
        fs = max(1, int(MIN_HOLE_RADIUS_PX // 3))
        lo_w = MIN_HOLE_RADIUS_PX / f
        if lo_w < 4:
            # Too small for the Hough transform on the working grid: round spots on a grid
            # giving them >= 3 pixels, fitted (and checked for roundness) below.
            fs = max(1, min(f, int(MIN_HOLE_RADIUS_PX // 3)))
            g = gray if fs == f else fine_gray(fs)
            passes.append((g, fs, MIN_HOLE_RADIUS_PX / fs, 4.5 * f / fs, "spots"))
        passes.append((gray, f, 4, top, "hough"))
    found: list[tuple[float, float, float]] = []
    for gray, fp, rmin, rmax, how in passes:
        if rmax <= rmin:
            continue
        circles = _hough(gray, rmin, rmax) if how == "hough" else _spots(gray, rmin, rmax)
        for c in circles:
            found.append(
                (float(_grid.to_full(c[0], fp)), float(_grid.to_full(c[1], fp)), float(c[2] * fp))
            )
    if not found:
        return ()
    # Noise estimate of the full-resolution gray level (MAD of horizontal differences).
    bands = [
        crop_of(slice(r0, min(rows, r0 + 16)), slice(None))
        for r0 in range(0, rows, max(16, rows // 4))
    ]
    sample = np.concatenate([_gray(b) for b in bands[:5]], axis=0)
    noise = 1.4826 * float(np.median(np.abs(np.diff(sample, axis=1)))) / math.sqrt(2)
    need = min_step if min_step is not None else max(8 * noise, 1e-4)
    holes: list[Hole] = []
    check_cancel(cancel)
    # With a sampler, every hole's profiles are sampled together, round by round.
    fits = refine_holes(found, sampler, min_step=need) if sampler is not None else None
    for i, (cx, cy, r) in enumerate(found):
        check_cancel(cancel)
        if fits is not None:
            fit = fits[i]
        else:
            pad = int(1.7 * r + 6)
            x0, y0 = max(0, int(cx - pad)), max(0, int(cy - pad))
            x1, y1 = min(cols, int(cx + pad) + 1), min(rows, int(cy + pad) + 1)
            if x1 - x0 < 4 or y1 - y0 < 4:
                continue
            g = _gray(crop_of(slice(y0, y1), slice(x0, x1)))
            fit = refine_hole(g, cx, cy, r, offset=(x0, y0), min_step=need)
        if fit is None:
            continue
        fx, fy, fr, ce, re, n = fit
        if not (0 <= fx < cols and 0 <= fy < rows):
            continue
        if any(math.hypot(fx - h.center_px[0], fy - h.center_px[1]) < 0.5 * fr for h in holes):
            continue
        holes.append(Hole((fx, fy), fr, re, ce, um_per_px, um_per_px_err, True, n))
    holes.sort(key=lambda h: (round(h.center_px[1]), h.center_px[0]))
    return tuple(holes)


def _hough(gray: np.ndarray, rmin: int, rmax: int) -> np.ndarray:
    """Circles ``[n, 3]`` (x, y, r in the gray image's pixels) by OpenCV's gradient Hough
    transform on the image stretched to its 0.5-99.5 percentile range, widened to the extremes
    of a smoothed copy (a few small holes are far less than 0.5% of an image, and stretching
    the noise of the rest to full scale would hide their edges)."""
    gray = np.ascontiguousarray(gray, np.float32)
    lo, hi = np.percentile(
        gray[:: max(1, gray.shape[0] // 300), :: max(1, gray.shape[1] // 300)], [0.5, 99.5]
    )
    smooth_lo, smooth_hi, _, _ = cv2.minMaxLoc(cv2.GaussianBlur(gray, (0, 0), 1.5))
    lo, hi = min(lo, smooth_lo), max(hi, smooth_hi)
    if hi - lo <= 0:
        return np.zeros((0, 3))
    g8 = np.clip((gray - lo) * (255.0 / (hi - lo)), 0, 255).astype(np.uint8)
    g8 = cv2.GaussianBlur(g8, (0, 0), 1.0)
    circles = cv2.HoughCircles(
        g8,
        cv2.HOUGH_GRADIENT_ALT,
        dp=1.0 if rmin < 6 else 1.5,
        minDist=max(2 * rmin, 4),
        param1=80,
        param2=0.75,
        minRadius=rmin,
        maxRadius=rmax,
    )
    return np.zeros((0, 3)) if circles is None else circles.reshape(-1, 3)


def _spots(gray: np.ndarray, rmin: float, rmax: float, max_spots: int = 20000) -> np.ndarray:
    """Candidate small round spots ``[n, 3]`` (x, y, rough r, in the gray image's pixels).

    At radii from ``rmin`` to ``rmax`` (steps of 1.3x): the mean of a box of side 1.2 r (inside
    a disk of radius r) minus the mean of the square ring out to side 3 r; local extremes of
    this centre-surround difference above 6 of its noise standard deviations, the strongest
    radius kept at each place. The fit at full resolution decides which are holes.
    """
    g = np.ascontiguousarray(gray, np.float32)
    sample = g[:: max(1, g.shape[0] // 400)]
    noise = 1.4826 * float(np.median(np.abs(np.diff(sample, axis=1)))) / math.sqrt(2)
    cand = []
    r = float(rmin)
    surround = np.empty_like(g)
    while r <= rmax * 1.0001:
        a = max(3, int(round(1.2 * r)) | 1)
        b = max(a + 4, int(round(3.0 * r)) | 1)
        inner = cv2.boxFilter(g, -1, (a, a), borderType=cv2.BORDER_REPLICATE)
        outer = cv2.boxFilter(g, -1, (b, b), borderType=cv2.BORDER_REPLICATE)
        # surround = (outer b^2 - inner a^2) / (b^2 - a^2), resp = |inner - surround|, in place
        np.multiply(outer, np.float32(b * b), out=outer)
        np.multiply(inner, np.float32(a * a), out=surround)
        np.subtract(outer, surround, out=surround)
        np.divide(surround, np.float32(b * b - a * a), out=surround)
        resp = np.subtract(inner, surround, out=inner)
        np.abs(resp, out=resp)
        thr = 6.0 * max(noise, 1e-12) * math.sqrt(1.0 / (a * a) + 1.0 / (b * b - a * a))
        top3 = cv2.dilate(resp, np.ones((3, 3), np.uint8), dst=outer)
        peak = np.greater(resp, thr)
        peak &= resp >= top3
        ys, xs = _grid.nonzero(peak)
        if len(ys):
            cand.append(np.column_stack([xs, ys, np.full(len(xs), r), resp[ys, xs]]))
        r *= 1.3
    if not cand:
        return np.zeros((0, 3))
    c = np.concatenate(cand)
    c = c[np.argsort(-c[:, 3])][: 4 * max_spots]
    # (The difference, not its ratio to the noise, which grows with the box.)
    # Strongest difference first; a weaker candidate nearer than the larger of the two radii
    # (plus a pixel) to a kept one is the same spot (greedy, in order of strength).
    # Pairs nearer than the larger radius + 1 (and within top + 1, the search radius that
    # defines them): searched radius class by radius class, each against the smaller ones.
    top = float(c[:, 2].max())
    found = []
    classes = np.unique(c[:, 2])
    for rc in classes:
        big = np.flatnonzero(c[:, 2] == rc)
        small = np.flatnonzero(c[:, 2] <= rc)
        pr = _grid.cross_pairs(c[big, :2], c[small, :2], (rc + 1.0) * (1 + 1e-9))
        found.append(np.column_stack([big[pr[:, 0]], small[pr[:, 1]]]))
    pairs = np.concatenate(found) if found else np.zeros((0, 2), np.int64)
    pairs = pairs[pairs[:, 0] != pairs[:, 1]]
    keep = np.ones(len(c), bool)
    if len(pairs):
        i, j = pairs[:, 0], pairs[:, 1]
        # (gathers from contiguous columns: the same values as from c's rows)
        cx, cy, cr = (np.ascontiguousarray(c[:, k]) for k in range(3))
        dx, dy = cx[j] - cx[i], cy[j] - cy[i]
        d = np.hypot(dx, dy)
        near = d < np.maximum(cr[j], cr[i]) + 1.0
        near &= dx * dx + dy * dy <= (top + 1.0) ** 2
        lo = np.minimum(i[near], j[near])
        hi = np.maximum(i[near], j[near])
        order = np.argsort(lo, kind="stable")
        lo, hi = lo[order], hi[order]
        starts = np.searchsorted(lo, np.arange(len(c) + 1))
        for k in np.unique(lo):
            if keep[k]:
                keep[hi[starts[k] : starts[k + 1]]] = False
    c = c[keep]
    # A hole is a uniform disk in a uniform surround: sampled at 0.4 r inside and 1.7 r
    # outside, each ring's spread must stay under a third of the step between them (flake
    # corners and edges, which also stand out of their surroundings, do not pass).
    th = np.linspace(0, 2 * math.pi, 12, endpoint=False)
    rows, cols = g.shape

    def ring(k: float) -> np.ndarray:
        xs = np.clip(np.round(c[:, :1] + k * c[:, 2:3] * np.cos(th)), 0, cols - 1).astype(int)
        ys = np.clip(np.round(c[:, 1:2] + k * c[:, 2:3] * np.sin(th)), 0, rows - 1).astype(int)
        return g[ys, xs]

    inner, outer = ring(0.4), ring(1.7)
    step = np.abs(np.median(inner, axis=1) - np.median(outer, axis=1))
    spread = np.maximum(np.ptp(inner, axis=1), np.ptp(outer, axis=1))
    c = c[(spread < step / 3.0) & (step > 0)]
    return c[:max_spots, :3]


def _gray_sampler(img):
    """Bilinear gray level (mean of linear channels) of a Micrograph at full-res coordinates,
    converting only the pixels it touches (NaN outside the image)."""
    rows, cols = img.shape

    nch = len(img.channels)
    if img.samples.dtype == np.uint8:
        base = img._convert(np.arange(256, dtype=np.uint8).reshape(-1, 1, 1), reorder=False)
        lut = base.reshape(-1) / np.float32(nch)
    else:
        lut = None

    def sample(mx: np.ndarray, my: np.ndarray) -> np.ndarray:
        x0 = np.floor(mx).astype(np.int64)
        y0 = np.floor(my).astype(np.int64)
        fx = (mx - x0).astype(np.float32)
        fy = (my - y0).astype(np.float32)
        valid = (x0 >= 0) & (y0 >= 0) & (x0 + 1 < cols) & (y0 + 1 < rows)
        x0 = np.clip(x0, 0, max(cols - 2, 0))
        y0 = np.clip(y0, 0, max(rows - 2, 0))
        x1 = np.minimum(x0 + 1, cols - 1)
        y1 = np.minimum(y0 + 1, rows - 1)
        # One gather of the four neighbours of every point.
        raw = img.samples[np.stack([y0, y0, y1, y1]), np.stack([x0, x1, x0, x1])]
        if lut is not None:
            g = lut[raw].sum(axis=-1)
        else:
            lin = img._convert(raw.reshape(-1, 1, nch), reorder=False)
            g = lin.reshape(raw.shape).mean(axis=-1)
        v = (
            g[0] * (1 - fx) * (1 - fy)
            + g[1] * fx * (1 - fy)
            + g[2] * (1 - fx) * fy
            + g[3] * fx * fy
        )
        return np.where(valid, v, np.nan).astype(np.float32)

    return sample


def _gray(a: np.ndarray) -> np.ndarray:
    """Mean over channels (float32 2-D), computed by OpenCV for speed."""
    if a.ndim == 2 or a.shape[2] == 1:
        return a.reshape(a.shape[0], a.shape[1])
    n = a.shape[2]
    src = np.ascontiguousarray(a, np.float32)
    if n > 4:
        return src.mean(axis=2)
    return cv2.transform(src, np.full((1, n), 1.0 / n, np.float32))
