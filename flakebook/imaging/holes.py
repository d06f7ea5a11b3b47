"""Holes in the chip: detection, sub-pixel radius, lattice, and coverage by flakes.

Circular holes are found by the Hough transform on a downsampled image, then each edge is fitted
at full resolution: intensity profiles along rays from the rough centre, the half-way crossing
between the inside and outside levels on each ray, and a least-squares (geometric) circle
through those edge points. The radius's standard error comes from the scatter of the edge points
about the circle. The hole lattice (square or hexagonal: pitch and angle) is fitted to the
centres and predicts holes hidden under a flake. Coverage of a hole by a flake outline is the
exact area of the disk inside the polygon (circle-polygon intersection), whether it is fully
covered, and the smallest margin from the hole's edge to the flake's edge.

Coordinates: full-resolution pixels, origin at the top-left pixel's centre (INTERFACE.md).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import cv2
import numpy as np

from flakebook.errors import InputError, check_cancel
from flakebook.imaging import _grid


@dataclass(frozen=True)
class Hole:
    """One hole.

    Attributes:
        center_px: (x, y).
        radius_px: radius in pixels.
        radius_err_px, center_err_px: standard errors from the edge fit (predicted holes: the
            lattice residual and the detected holes' radius spread).
        um_per_px, um_per_px_err: the scale used for the micrometre values.
        detected: True if seen in the image, False if predicted from the lattice.
        n_edge_points: edge points used in the fit.
    """

    center_px: tuple[float, float]
    radius_px: float
    radius_err_px: float
    center_err_px: float
    um_per_px: float
    um_per_px_err: float = 0.0
    detected: bool = True
    n_edge_points: int = 0

    @property
    def radius_um(self) -> float:
        return self.radius_px * self.um_per_px

    @property
    def radius_err_um(self) -> float:
        return math.hypot(self.radius_err_px * self.um_per_px, self.radius_px * self.um_per_px_err)

    def to_dict(self) -> dict:
        return {
            "center_px": list(self.center_px),
            "radius_px": self.radius_px,
            "radius_um": self.radius_um,
            "radius_err_um": self.radius_err_um,
            "center_err_px": self.center_err_px,
            "detected": self.detected,
        }


@dataclass(frozen=True)
class Lattice:
    """A hole lattice: positions origin + i a1 + j a2 (pixels)."""

    kind: str  # "square" or "hexagonal"
    pitch_px: float
    pitch_err_px: float
    angle_deg: float  # direction of a1, in [0, 90) (square) or [0, 60) (hexagonal)
    origin_px: tuple[float, float]
    a1_px: tuple[float, float]
    a2_px: tuple[float, float]
    residual_px: float
    n_holes: int

    def to_dict(self) -> dict:
        return {
            "kind": self.kind,
            "pitch_px": self.pitch_px,
            "pitch_err_px": self.pitch_err_px,
            "angle_deg": self.angle_deg,
            "origin_px": list(self.origin_px),
            "residual_px": self.residual_px,
            "n_holes": self.n_holes,
        }


@dataclass(frozen=True)
class Coverage:
    """How a flake outline covers a hole."""

    covered_fraction: float
    fully_covered: bool
    margin_px: float  # hole edge to flake edge; negative when the flake edge crosses the hole
    margin_um: float

    def to_dict(self) -> dict:
        return {
            "covered_fraction": self.covered_fraction,
            "fully_covered": self.fully_covered,
            "margin_px": self.margin_px,
            "margin_um": self.margin_um,
        }


# ---- sub-pixel edge fit ----------------------------------------------------------------------


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
    g = None if sampler is not None else np.ascontiguousarray(gray, np.float32)
    ox, oy = offset
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
        if sampler is not None:
            prof = sampler(cx + np.outer(np.cos(th), rr), cy + np.outer(np.sin(th), rr))
        else:
            mx = (cx - ox + np.outer(np.cos(th), rr)).astype(np.float32)
            my = (cy - oy + np.outer(np.sin(th), rr)).astype(np.float32)
            prof = cv2.remap(
                g, mx, my, cv2.INTER_LINEAR, borderMode=cv2.BORDER_CONSTANT, borderValue=np.nan
            )
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


# ---- detection -----------------------------------------------------------------------------

MIN_HOLE_RADIUS_PX = 6.0  # smallest hole radius (full-resolution pixels) the default search finds


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
    for cx, cy, r in found:
        check_cancel(cancel)
        if sampler is not None:
            fit = refine_hole(None, cx, cy, r, min_step=need, sampler=sampler)
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
    while r <= rmax * 1.0001:
        a = max(3, int(round(1.2 * r)) | 1)
        b = max(a + 4, int(round(3.0 * r)) | 1)
        inner = cv2.boxFilter(g, -1, (a, a), borderType=cv2.BORDER_REPLICATE)
        outer = cv2.boxFilter(g, -1, (b, b), borderType=cv2.BORDER_REPLICATE)
        ring = (outer * np.float32(b * b) - inner * np.float32(a * a)) / np.float32(b * b - a * a)
        resp = np.abs(inner - ring)
        thr = 6.0 * max(noise, 1e-12) * math.sqrt(1.0 / (a * a) + 1.0 / (b * b - a * a))
        peak = (resp >= cv2.dilate(resp, np.ones((3, 3), np.uint8))) & (resp > thr)
        ys, xs = np.nonzero(peak)
        if len(ys):
            cand.append(np.column_stack([xs, ys, np.full(len(xs), r), resp[ys, xs]]))
        r *= 1.3
    if not cand:
        return np.zeros((0, 3))
    c = np.concatenate(cand)
    c = c[np.argsort(-c[:, 3])][: 4 * max_spots]
    # (The difference, not its ratio to the noise, which grows with the box.)
    # Strongest difference first; a weaker candidate nearer than the larger of the two radii
    # (plus a pixel) to a kept one is the same spot.
    from scipy.spatial import cKDTree

    tree = cKDTree(c[:, :2])
    keep = np.ones(len(c), bool)
    top = float(c[:, 2].max())
    for i in range(len(c)):
        if keep[i]:
            nb = np.asarray(tree.query_ball_point(c[i, :2], max(c[i, 2], top) + 1.0), int)
            d = np.hypot(c[nb, 0] - c[i, 0], c[nb, 1] - c[i, 1])
            keep[nb[d < np.maximum(c[nb, 2], c[i, 2]) + 1.0]] = False
            keep[i] = True
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


# ---- lattice -----------------------------------------------------------------------------


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


def _fit_lattice(centers_px: np.ndarray, kind: str = "auto") -> Lattice | None:
    """The best square or hexagonal lattice through the centres, however poor (None with fewer
    than 4 centres or no neighbour pairs)."""
    if kind not in ("auto", "square", "hexagonal"):
        raise InputError(f"lattice kind {kind!r}; accepted: auto, square, hexagonal")
    p = np.asarray(centers_px, np.float64).reshape(-1, 2)
    n = len(p)
    if n < 4:
        return None
    from scipy.spatial import cKDTree

    tree = cKDTree(p)
    d, _ = tree.query(p, k=2)
    pitch0 = float(np.median(d[:, 1]))
    if not pitch0 > 0:
        return None
    pairs = tree.query_pairs(1.25 * pitch0, output_type="ndarray")
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
    out = []
    for s in sites:
        if np.min(np.hypot(*(dc - s).T)) < 0.5 * lattice.pitch_px:
            continue
        for poly in outlines_px:
            if len(poly) >= 3 and signed_distance(poly, (s[0], s[1])) > -r:
                out.append(
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
                )
                break
    return tuple(out)


# ---- coverage ------------------------------------------------------------------------------


def signed_distance(polygon_px: np.ndarray, point: tuple[float, float]) -> float:
    """Distance from a point to a polygon's boundary, positive inside, negative outside."""
    p = np.asarray(polygon_px, np.float64).reshape(-1, 2)
    a = p
    b = np.roll(p, -1, axis=0)
    q = np.asarray(point, np.float64)
    d = b - a
    L2 = np.maximum((d**2).sum(1), 1e-300)
    t = np.clip(((q - a) * d).sum(1) / L2, 0, 1)
    near = a + t[:, None] * d
    dist = float(np.sqrt(((near - q) ** 2).sum(1)).min())
    # Even-odd rule.
    y = q[1]
    cond = (a[:, 1] > y) != (b[:, 1] > y)
    with np.errstate(divide="ignore", invalid="ignore"):
        xc = a[:, 0] + (y - a[:, 1]) * d[:, 0] / d[:, 1]
    inside = bool(np.count_nonzero(cond & (xc > q[0])) % 2)
    return dist if inside else -dist


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
    sd = signed_distance(poly, center)
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
    for fid, poly in outlines_px.items():
        poly = np.asarray(poly, np.float64).reshape(-1, 2)
        if len(poly) < 3:
            continue
        x0, y0 = poly.min(0)
        x1, y1 = poly.max(0)
        for k, h in enumerate(holes):
            cx, cy = h.center_px
            r = h.radius_px
            if cx + r < x0 or cx - r > x1 or cy + r < y0 or cy - r > y1:
                continue
            cov = hole_coverage(poly, h, um_per_px)
            if cov.covered_fraction > 0:
                out.append((fid, k, cov))
    return out
