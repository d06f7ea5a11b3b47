"""Segmentation: bare substrate, flakes, terraces, outlines and per-region contrast.

Optical contrast per channel is C = 1 - I / I_substrate (DESIGN.md: positive when the flake is
darker than the bare substrate of the same image). The bare substrate is the image's dominant
colour. Flakes are connected regions whose (lightly smoothed) contrast stands out of the
substrate's noise, kept when larger than a minimum area in um^2. Within a flake, terraces of
uniform thickness are found by mean-shift clustering of the contrast vectors, then connected
components. Detection runs on a block-averaged working copy; each region's contrast is measured
at full resolution from its interior pixels (edges left out), as a robust mean with a standard
error that allows for spatially correlated pixel noise: the effective number of independent
pixels is n / A_c, with A_c the integral of the noise autocorrelation measured on bare substrate.

Outlines are polygons in full-resolution pixel coordinates with the origin at the top-left
pixel's centre, x to the right, y down (INTERFACE.md).
"""

from __future__ import annotations

from dataclasses import dataclass

import cv2
import numpy as np

from flakebook.errors import InputError, check_cancel
from flakebook.imaging import _grid
from flakebook.imaging.background import Background, fit_background
from flakebook.imaging.io import Micrograph


@dataclass(frozen=True, eq=False)
class Region:
    """A terrace: a connected region of uniform contrast within a flake.

    Coordinates are full-resolution pixels (INTERFACE.md convention); ``bbox_px`` is
    ``(x_min, y_min, x_max, y_max)`` inclusive.
    """

    id: int
    flake_id: int
    area_px: int
    area_um2: float
    bbox_px: tuple[int, int, int, int]
    centroid_px: tuple[float, float]
    outline_px: np.ndarray
    contrast: dict[str, float]
    contrast_err: dict[str, float]
    contrast_sd: dict[str, float]
    n_pixels: int
    n_effective: float

    def to_dict(self) -> dict:
        return {
            "id": self.id,
            "flake_id": self.flake_id,
            "centroid_px": list(self.centroid_px),
            "area_um2": self.area_um2,
            "area_px": self.area_px,
            "bbox_px": list(self.bbox_px),
            "outline_px": self.outline_px.tolist(),
            "contrast": dict(self.contrast),
            "contrast_err": dict(self.contrast_err),
            "n_pixels": self.n_pixels,
            "n_effective": self.n_effective,
        }


@dataclass(frozen=True, eq=False)
class Flake:
    """A connected non-substrate region (one or more terraces)."""

    id: int
    area_px: int
    area_um2: float
    bbox_px: tuple[int, int, int, int]
    centroid_px: tuple[float, float]
    outline_px: np.ndarray
    region_ids: tuple[int, ...]

    def to_dict(self) -> dict:
        return {
            "id": self.id,
            "area_um2": self.area_um2,
            "area_px": self.area_px,
            "bbox_px": list(self.bbox_px),
            "centroid_px": list(self.centroid_px),
            "outline_px": self.outline_px.tolist(),
            "region_ids": list(self.region_ids),
        }


@dataclass(frozen=True, eq=False)
class Segmentation:
    """The result of :func:`segment`.

    Attributes:
        channels: channel names.
        substrate: the bare substrate's level per channel (after background correction).
        substrate_fraction: fraction of the image that is bare substrate.
        noise: per-pixel contrast noise (standard deviation) on bare substrate per channel, full
            resolution.
        correlation_area_px: integrated noise autocorrelation per channel (1 for white noise).
        flakes, regions: what was found; region ids are 1-based, flake ids too.
        labels: int32 working-resolution map of region ids (0: none).
        flake_labels: int32 working-resolution map of flake ids (0: substrate).
        factor: the working copy's downsampling factor.
        um_per_px: the scale used for areas.
        warnings: messages for the user.
        background: the background correction finally used (refitted without the flakes).
    """

    channels: tuple[str, ...]
    substrate: dict[str, float]
    substrate_fraction: float
    noise: dict[str, float]
    correlation_area_px: dict[str, float]
    flakes: tuple[Flake, ...]
    regions: tuple[Region, ...]
    labels: np.ndarray
    flake_labels: np.ndarray
    factor: int
    um_per_px: float
    warnings: tuple[str, ...] = ()
    background: Background | None = None

    def to_dict(self) -> dict:
        return {
            "substrate": dict(self.substrate),
            "substrate_fraction": self.substrate_fraction,
            "noise": dict(self.noise),
            "correlation_area_px": dict(self.correlation_area_px),
            "flakes": [f.to_dict() for f in self.flakes],
            "regions": [r.to_dict() for r in self.regions],
            "warnings": list(self.warnings),
        }


# ---- substrate ---------------------------------------------------------------------------------


def substrate_colour(
    work: np.ndarray, valid: np.ndarray | None = None, bins: int = 48
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The dominant colour of an image and the pixels that have it.

    The colour with most pixels around it: a histogram of log intensity (so that dark regions,
    whose absolute noise is smaller, do not win by a sharper peak), summed over a 3-bin
    neighbourhood in every channel, then refined to the median and spread of the pixels near it.

    Args:
        work: float ``[row, col, ch]`` intensity (background-corrected).
        valid: bool ``[row, col]`` of pixels that may count (e.g. unsaturated).
        bins: histogram bins per channel over the robust range of the image.

    Returns:
        (level per channel, robust standard deviation per channel, bool mask of substrate pixels).
    """
    from scipy.ndimage import uniform_filter

    rows, cols, nch = work.shape
    if nch > 3:
        bins = max(4, int(round(110_000 ** (1.0 / nch))))
    step = max(1, int(np.ceil(np.sqrt(rows * cols / 1e5))))
    lin = work[::step, ::step].reshape(-1, nch)
    if valid is not None:
        lin = lin[valid[::step, ::step].ravel()]
    if lin.shape[0] == 0:
        raise InputError("no usable (unsaturated) pixels in the image")
    floor = max(float(np.percentile(lin, 99.5)) * 1e-3, 1e-6)
    sample = np.log(np.maximum(lin, floor))
    lo = np.percentile(sample, 0.5, axis=0)
    hi = np.percentile(sample, 99.5, axis=0)
    width = np.maximum(hi - lo, 1e-6) / bins
    q = np.clip(((sample - lo) / width).astype(np.int64), 0, bins - 1)
    key = np.zeros(q.shape[0], np.int64)
    for c in range(nch):
        key = key * bins + q[:, c]
    counts = np.bincount(key, minlength=bins**nch).astype(np.float64).reshape((bins,) * nch)
    mass = uniform_filter(counts, size=3, mode="constant")
    idx = np.array(np.unravel_index(int(np.argmax(mass)), mass.shape))
    level = lo + (idx + 0.5) * width
    tol = 2.0 * width
    sd = width
    for _ in range(3):
        near = np.all(np.abs(sample - level) <= tol, axis=1)
        if np.count_nonzero(near) < 10:
            break
        level = np.median(sample[near], axis=0)
        sd = 1.4826 * np.median(np.abs(sample[near] - level), axis=0)
        sd = np.maximum(sd, 1e-6)
        tol = np.maximum(4.0 * sd, 0.5 * width)
    lev_lin = np.exp(level)
    lo_lin = np.exp(level - tol).astype(np.float32)
    hi_lin = np.exp(level + tol).astype(np.float32)
    mask = np.all((work >= lo_lin) & (work <= hi_lin), axis=2)
    if valid is not None:
        mask &= valid
    return lev_lin, sd * lev_lin, mask


def contrast_image(intensity: np.ndarray, substrate: np.ndarray | dict) -> np.ndarray:
    """Per-channel optical contrast C = 1 - I / I_substrate (float32 ``[row, col, ch]``).

    Positive where the pixel is darker than the bare substrate (DESIGN.md).
    """
    s = np.asarray(list(substrate.values()) if isinstance(substrate, dict) else substrate)
    return (1.0 - intensity / s.astype(np.float32)).astype(np.float32, copy=False)


# ---- noise correlation ---------------------------------------------------------------------------


def correlation_area(patches: list[np.ndarray], max_lag: int = 8) -> float:
    """Integrated autocorrelation of noise patches (each 2-D, mean removed inside).

    The variance of a mean over a large region is sigma^2 A_c / n; white noise gives A_c = 1.
    """
    if not patches:
        return 1.0
    acc = None
    norm = None
    for p in patches:
        p = p.astype(np.float64) - p.mean()
        h, w = p.shape
        fh, fw = cv2.getOptimalDFTSize(2 * h), cv2.getOptimalDFTSize(2 * w)
        f = np.fft.rfft2(p, (fh, fw))
        ac = np.fft.irfft2(f * np.conj(f), (fh, fw))
        ones = np.fft.rfft2(np.ones_like(p), (fh, fw))
        cnt = np.fft.irfft2(ones * np.conj(ones), (fh, fw))
        lags = np.r_[0 : max_lag + 1, -max_lag:0]
        sub = ac[np.ix_(lags % fh, lags % fw)]
        csub = np.maximum(np.round(cnt[np.ix_(lags % fh, lags % fw)]), 1)
        acc = sub if acc is None else acc + sub
        norm = csub if norm is None else norm + csub
    cov = acc / norm
    if cov[0, 0] <= 0:
        return 1.0
    rho = cov / cov[0, 0]
    # Lags whose correlation is not significant (3 standard errors) count as zero, so that the
    # estimate of white noise is not the sum of a few hundred noisy terms.
    insignificant = np.abs(rho) < 3.0 / np.sqrt(norm)
    insignificant[0, 0] = False
    rho = np.where(insignificant, 0.0, rho)
    return float(np.clip(rho.sum(), 1.0, (2 * max_lag + 1) ** 2))


def _substrate_patches(
    sub_mask_work: np.ndarray, f: int, size: int, want: int = 8
) -> list[tuple[int, int]]:
    """Top-left full-resolution corners of size x size patches lying wholly on substrate."""
    bw = max(1, int(np.ceil(size / f)))
    rows, cols = sub_mask_work.shape
    if rows < bw or cols < bw:
        return []
    m = sub_mask_work.astype(np.uint8)
    er = cv2.erode(m, np.ones((bw + 2, bw + 2), np.uint8), anchor=(0, 0), borderValue=0)
    ys, xs = np.nonzero(er[: rows - bw - 1, : cols - bw - 1] if rows > bw + 1 else er)
    if len(ys) == 0:
        return []
    pick = np.linspace(0, len(ys) - 1, min(want, len(ys))).astype(int)
    return [(int(ys[i] * f + f), int(xs[i] * f + f)) for i in pick]


# ---- terraces by mean shift ------------------------------------------------------------------


def _mean_shift_modes(points: np.ndarray, weights: np.ndarray, iters: int = 40) -> np.ndarray:
    """Flat-kernel (radius 1) mean shift of weighted points; returns (mode per point, modes)."""
    pts = points.astype(np.float64)
    p2 = (pts**2).sum(1)
    wp = weights[:, None] * pts
    x = pts.copy()
    active = np.ones(len(x), bool)
    for _ in range(iters):
        xa = x[active]
        d2 = (xa**2).sum(1)[:, None] + p2[None, :] - 2.0 * xa @ pts.T
        k = (d2 <= 1.0).astype(np.float64)
        new = (k @ wp) / np.maximum(k @ weights, 1e-12)[:, None]
        moved = np.abs(new - xa).max(axis=1)
        x[active] = new
        idx = np.nonzero(active)[0]
        active[idx[moved < 1e-3]] = False
        if not active.any():
            break
    # Merge converged positions closer than half the bandwidth, densest first.
    d2 = (x**2).sum(1)[:, None] + p2[None, :] - 2.0 * x @ pts.T
    dens = (d2 <= 1.0) @ weights
    order = np.argsort(-dens)
    centres = np.zeros((0, pts.shape[1]))
    label = np.empty(len(x), int)
    for i in order:
        if len(centres):
            dd = ((centres - x[i]) ** 2).sum(1)
            j = int(np.argmin(dd))
            if dd[j] <= 0.25:
                label[i] = j
                continue
        centres = np.vstack([centres, x[i]])
        label[i] = len(centres) - 1
    return label, centres


def _terrace_labels(
    cvec: np.ndarray, bandwidth: np.ndarray, max_points: int = 1200
) -> tuple[np.ndarray, np.ndarray]:
    """Cluster contrast vectors ([n, ch]) by mean shift; returns (label per vector, centres)."""
    z = cvec / bandwidth
    q = 2.5
    for _ in range(6):
        key = np.floor(z * q).astype(np.int64)
        uniq, inv, counts = np.unique(key, axis=0, return_inverse=True, return_counts=True)
        if len(uniq) <= max_points:
            break
        q /= 1.6
    inv = inv.ravel()
    pts = np.zeros((len(uniq), z.shape[1]))
    np.add.at(pts, inv, z)
    pts /= counts[:, None]
    lab, centres = _mean_shift_modes(pts, counts.astype(np.float64))
    return lab[inv], centres * bandwidth


# ---- geometry helpers -------------------------------------------------------------------------


def _outline(mask: np.ndarray, x0: int, y0: int, f: int) -> np.ndarray:
    """Largest external contour of a working-resolution crop mask, in full-res pixel coords."""
    m = np.pad(mask.astype(np.uint8), 1)
    contours, _ = cv2.findContours(m, cv2.RETR_EXTERNAL, cv2.CHAIN_APPROX_SIMPLE)
    if not contours:
        return np.zeros((0, 2))
    c = max(contours, key=cv2.contourArea).reshape(-1, 2).astype(np.float64)
    c -= 1
    c[:, 0] += x0
    c[:, 1] += y0
    return np.column_stack([_grid.to_full(c[:, 0], f), _grid.to_full(c[:, 1], f)])


def _full_crop_mask(mask_work: np.ndarray, f: int) -> np.ndarray:
    if f == 1:
        return mask_work
    return np.repeat(np.repeat(mask_work, f, axis=0), f, axis=1)


def _robust_mean(v: np.ndarray) -> tuple[float, float]:
    """Mean of values within 3 robust sigmas of the median, and the robust sigma.

    The median and its absolute deviation come from at most ~5000 evenly spaced values.
    """
    w = v[:: max(1, v.size // 5000)]
    med = float(np.median(w))
    sd = 1.4826 * float(np.median(np.abs(w - med)))
    if sd > 0:
        v = v[np.abs(v - med) <= 3 * sd]
    m = float(v.mean()) if v.size else med
    return m, sd if sd > 0 else float(v.std())


# ---- segmentation ----------------------------------------------------------------------------

MAX_PIXELS = 40_000  # interior pixels measured per region (a sub-grid beyond this)


def segment(
    image: Micrograph,
    *,
    um_per_px: float,
    min_area_um2: float = 20.0,
    background: Background | None = None,
    exclude: np.ndarray | None = None,
    holes: list[tuple[float, float, float]] | None = None,
    work: np.ndarray | None = None,
    factor: int | None = None,
    threshold_sigma: float = 6.0,
    refine_background: bool = True,
    min_contrast: float = 0.01,
    progress=None,
    cancel=None,
) -> Segmentation:
    """Find the bare substrate, the flakes and their terraces, and measure each terrace.

    Args:
        image: the micrograph (linear intensity).
        um_per_px: the image scale.
        min_area_um2: flakes and terraces smaller than this are left out.
        background: the background correction (default: a degree-2 polynomial fitted here).
        exclude: optional bool working-resolution mask of pixels that are not flake.
        holes: hole disks ``(x, y, radius)`` in full-resolution pixels. Pixels of a bare hole
            (those whose contrast lies between the substrate's and that of the holes with bare
            substrate around them) are not flake; a terrace lying over a hole is kept even when
            smaller than ``min_area_um2`` (a membrane).
        work, factor: a working copy of the raw intensity and its factor, if the caller has one.
        threshold_sigma: a pixel is non-substrate where its smoothed contrast exceeds this many
            noise standard deviations in some channel (and ``min_contrast``).
        min_contrast: the smallest contrast magnitude counted as a flake.
        refine_background: refit a polynomial background once with the flakes found left out.
        progress, cancel: INTERFACE.md's progress callback and cancel event.

    Returns:
        A :class:`Segmentation`.
    """
    if not (np.isfinite(um_per_px) and um_per_px > 0):
        raise InputError(f"scale {um_per_px!r} um per pixel; accepted: a positive number")
    if not (np.isfinite(min_area_um2) and min_area_um2 >= 0):
        raise InputError(f"minimum area {min_area_um2!r} um^2; accepted: zero or more")
    rows, cols = image.shape
    warnings: list[str] = []
    if work is None:
        factor = _grid.choose_factor((rows, cols))
        work = image.working(factor)
    f = int(factor or 1)
    if background is None:
        background = fit_background(image, work=work, factor=f)
        warnings.extend(background.warnings)
    wr, wc = work.shape[:2]
    check_cancel(cancel)
    # Working copy corrected for dark offset and illumination: gain evaluated at the working
    # pixel centres (an exact evaluation of the smooth surface on the coarse grid).
    valid = ~image.saturated_working(f)[:wr, :wc]
    hole_w = [
        (float(_grid.to_work(x, f)), float(_grid.to_work(y, f)), r / f) for x, y, r in holes or ()
    ]
    for attempt in range(2):
        wgain = _work_gain(background, wr, wc, f)
        wcorr = (work - np.asarray(background.dark_offset, np.float32)) * wgain
        if not np.any(valid):
            raise InputError(
                f"{image.path or 'image'}: every pixel is saturated; accepted: an image exposed below "
                "the camera's full scale"
            )
        level, sd_work, sub_mask = substrate_colour(wcorr, valid)
        if np.any(level <= 0):
            raise InputError(
                f"{image.path or 'image'}: the substrate is black (level {level.min():.3g}); "
                "accepted: an exposed image of a chip with bare substrate in view"
            )
        frac = float(np.count_nonzero(sub_mask)) / float(np.count_nonzero(valid))
        spread = float(np.max(sd_work / level))
        if spread > 0.2:
            raise InputError(
                f"{image.path or 'image'}: no bare substrate visible (no uniform dominant colour: "
                f"its spread is {100 * spread:.0f}%); accepted: an image with bare substrate in view"
            )
        if frac < 0.05:
            raise InputError(
                f"{image.path or 'image'}: no bare substrate visible (the dominant colour covers "
                f"{100 * frac:.1f}% of the image); accepted: an image with bare substrate in view"
            )
        if frac < 0.2:
            warnings.append(
                f"little bare substrate: the dominant colour covers only {100 * frac:.0f}% of the "
                "image, so the reference for contrast may be wrong"
            )
        if progress:
            progress(0.2, "substrate")

        # Smoothed contrast on the working grid; its noise on the substrate sets the threshold.
        cw = contrast_image(wcorr, level)
        cs = cv2.GaussianBlur(cw, (0, 0), 1.0)
        if cs.ndim == 2:
            cs = cs[:, :, None]
        sub_vals = cs[sub_mask][:: max(1, int(np.count_nonzero(sub_mask) // 100_000))]
        sd_s = 1.4826 * np.median(np.abs(sub_vals - np.median(sub_vals, axis=0)), axis=0)
        quant = 1.0 / (255.0 if image.bit_depth == 8 else 65535.0) / np.maximum(level, 1e-6)
        sd_s = np.maximum(sd_s, quant)
        if np.all(sd_s <= quant * 1.0001) and float(np.ptp(cw[valid])) < 1e-6:
            warnings.append("the image is uniform: no flakes and no noise to measure")
        thr = np.maximum(threshold_sigma * sd_s, min_contrast).astype(np.float32)
        fg = np.any(np.abs(cs) > thr, axis=2) & valid
        if exclude is not None:
            fg &= ~exclude[:wr, :wc]
        bare_mask, bare_c = _bare_hole_pixels(cs, sub_mask, hole_w, thr)
        fg &= ~bare_mask
        # A smooth surface can bend into a large flake; fit it again with everything that is
        # not bare substrate left out.
        previous_level = background.level
        if attempt == 0 and refine_background and background.method == "polynomial" and fg.any():
            grow_ex = cv2.dilate((~sub_mask | fg).astype(np.uint8), np.ones((5, 5), np.uint8)) > 0
            try:
                refit = fit_background(
                    image,
                    dark_offset=dict(zip(image.channels, background.dark_offset)),
                    degree=background.degree,
                    work=work,
                    factor=f,
                    exclude_work=grow_ex,
                    _refit=True,
                )
            except InputError:
                break
            # Detection is redone only if the refit moves the substrate by a visible amount
            # (a quarter of the detection threshold); otherwise the refit is kept for measuring.
            change = np.abs(_work_gain(refit, wr, wc, f)[::4, ::4] / wgain[::4, ::4] - 1)
            moved = bool(np.any(change.reshape(-1, change.shape[-1]).max(0) > 0.25 * thr))
            level_old = level
            background = refit
            if moved:
                continue
            # Same segmentation; the substrate level follows the refined surface.
            scale_lv = np.array(refit.level) / np.maximum(np.array(previous_level), 1e-12)
            level = level_old * scale_lv
            break
        break
    fg = cv2.morphologyEx(
        fg.astype(np.uint8), cv2.MORPH_OPEN, cv2.getStructuringElement(cv2.MORPH_ELLIPSE, (3, 3))
    )
    px_area_work = (um_per_px * f) ** 2
    min_px_work = max(4, int(np.ceil(min_area_um2 / px_area_work)))
    nlab, flab, stats, _ = cv2.connectedComponentsWithStats(fg, connectivity=8)
    check_cancel(cancel)
    if progress:
        progress(0.4, "flakes")

    # Noise at full resolution and its correlation, from patches of bare substrate.
    for psize in (48, 32, 24):
        corners = _substrate_patches(sub_mask, f, psize)
        if corners:
            break
    noise = {}
    corr = {}
    if corners:
        pcs = []
        for y0, x0 in corners:
            crop = background.correct(image, slice(y0, y0 + psize), slice(x0, x0 + psize))
            pcs.append(contrast_image(crop, level))
        for c, name in enumerate(image.channels):
            ps = [p[:, :, c] for p in pcs]
            allv = np.concatenate([p.ravel() for p in ps])
            noise[name] = float(1.4826 * np.median(np.abs(allv - np.median(allv))))
            corr[name] = correlation_area(ps, max_lag=min(8, psize // 3))
    else:
        for c, name in enumerate(image.channels):
            noise[name] = float(sd_work[c] / level[c] * f)
            corr[name] = 1.0
        warnings.append("no bare-substrate patch for the noise correlation: taken as white noise")
    # Relative uncertainty of the substrate level itself.
    n_sub = max(1.0, float(np.count_nonzero(sub_mask)) * f * f)
    sub_rel = {name: noise[name] * np.sqrt(corr[name] / n_sub) for name in image.channels}

    bw = np.maximum(3.0 * sd_s, 0.015)
    flakes: list[Flake] = []
    regions: list[Region] = []
    labels = np.zeros((wr, wc), np.int32)
    flake_labels = np.zeros((wr, wc), np.int32)
    kernel = cv2.getStructuringElement(cv2.MORPH_ELLIPSE, (3, 3))
    order = [i for i in range(1, nlab) if stats[i, cv2.CC_STAT_AREA] >= min_px_work]
    order.sort(key=lambda i: -stats[i, cv2.CC_STAT_AREA])
    pad = 3
    erode5 = cv2.getStructuringElement(cv2.MORPH_ELLIPSE, (5, 5))
    grow = cv2.getStructuringElement(cv2.MORPH_ELLIPSE, (2 * pad + 1, 2 * pad + 1))
    usable = valid & ~bare_mask
    hole_disks = None
    if hole_w:
        hole_disks = np.zeros((wr, wc), np.uint8)
        for x, y, r in hole_w:
            cv2.circle(hole_disks, (int(round(x)), int(round(y))), max(1, int(round(r))), 1, -1)
        hole_zone = cv2.dilate(hole_disks, np.ones((5, 5), np.uint8))
        hole_disks = hole_disks.astype(np.float64)
    if exclude is not None:
        usable &= ~exclude[:wr, :wc]
    for k, comp in enumerate(order):
        check_cancel(cancel)
        x0, y0, w, h = (int(v) for v in stats[comp, :4])
        cmask = (flab[y0 : y0 + h, x0 : x0 + w] == comp).astype(np.uint8)
        # Modes from the interior only: the blurred rim between flake and substrate would
        # otherwise form rings of intermediate contrast.
        interior = cv2.erode(np.pad(cmask, 2), erode5)[2:-2, 2:-2] > 0
        if np.count_nonzero(interior) < 6:
            interior = cmask > 0
        vecs = cs[y0 : y0 + h, x0 : x0 + w][interior]
        lab, centres = _terrace_labels(vecs, bw)
        weight = np.bincount(lab, minlength=len(centres))
        keep = weight >= max(6, 0.1 * min_px_work)
        if hole_disks is not None:
            # A mode lying mostly over holes is a suspended part (a membrane, perhaps only a
            # part of a hole): kept however small, like the terraces over a hole below.
            over = np.bincount(
                lab, weights=hole_disks[y0 : y0 + h, x0 : x0 + w][interior], minlength=len(centres)
            )
            keep |= (weight >= 6) & (over >= 0.5 * weight)
        if bare_c is not None:
            keep &= np.sqrt((((centres - bare_c) / thr) ** 2).sum(-1)) >= 1.5  # bare hole
        centres = centres[keep]
        if len(centres) == 0:
            continue
        # Every pixel near the component goes to the nearest of {substrate, terrace modes} by
        # its smoothed contrast: edges then sit half-way, where a blurred step crosses 50%.
        px0, py0 = max(0, x0 - pad), max(0, y0 - pad)
        px1, py1 = min(wc, x0 + w + pad), min(wr, y0 + h + pad)
        near = cv2.dilate((flab[py0:py1, px0:px1] == comp).astype(np.uint8), grow) > 0
        near &= usable[py0:py1, px0:px1]
        near &= flake_labels[py0:py1, px0:px1] == 0
        z = cs[py0:py1, px0:px1] / bw
        cz = np.vstack([np.zeros((1, z.shape[2])), centres / bw])
        d2 = ((z[:, :, None, :] - cz[None, None, :, :]) ** 2).sum(-1)
        tl = np.argmin(d2, axis=2).astype(np.int32)
        tl[~near] = 0
        if bare_c is not None and hole_disks is not None:
            # Over a hole, a pixel nearer to the bare hole's contrast than to every class is
            # bare hole (a flake edge across the hole then lies half-way, as on substrate).
            db = ((z - (bare_c / bw)) ** 2).sum(-1)
            tl[(db < d2.min(axis=2)) & (hole_zone[py0:py1, px0:px1] > 0)] = 0
        fmask = tl > 0
        if hole_disks is not None:
            fmask = _bridge_rims(fmask, hole_zone[py0:py1, px0:px1] > 0, 3)
        if np.count_nonzero(fmask) < min_px_work:
            continue
        fid = len(flakes) + 1
        flake_labels[py0:py1, px0:px1][fmask] = fid
        rids = []
        for t in range(1, len(cz)):
            tm = (tl == t).astype(np.uint8)
            if np.count_nonzero(tm) < 6:
                continue
            tm = cv2.morphologyEx(tm, cv2.MORPH_OPEN, kernel)
            n2, lab2, st2, _ = cv2.connectedComponentsWithStats(tm, connectivity=8)
            for j in range(1, n2):
                if st2[j, cv2.CC_STAT_AREA] < min_px_work and not _over_hole(
                    st2[j], px0, py0, hole_w, lab2, j
                ):
                    continue
                rx, ry, rw, rh = (int(v) for v in st2[j, :4])
                rmask = lab2[ry : ry + rh, rx : rx + rw] == j
                rid = len(regions) + 1
                reg = _measure_region(
                    image,
                    background,
                    level,
                    rmask,
                    px0 + rx,
                    py0 + ry,
                    f,
                    rid,
                    fid,
                    um_per_px,
                    noise,
                    corr,
                    sub_rel,
                )
                if reg is not None:
                    labels[py0 + ry : py0 + ry + rh, px0 + rx : px0 + rx + rw][rmask] = rid
                    regions.append(reg)
                    rids.append(rid)
        ys, xs = np.nonzero(fmask)
        bx0, bx1, by0, by1 = xs.min(), xs.max(), ys.min(), ys.max()
        crop = fmask[by0 : by1 + 1, bx0 : bx1 + 1]
        full = _full_crop_mask(crop, f)
        yy, xx = np.nonzero(full)
        area_px = int(len(yy))
        ox, oy = (px0 + bx0) * f, (py0 + by0) * f
        flakes.append(
            Flake(
                id=fid,
                area_px=area_px,
                area_um2=float(area_px * um_per_px**2),
                bbox_px=(ox, oy, ox + full.shape[1] - 1, oy + full.shape[0] - 1),
                centroid_px=(float(xx.mean() + ox), float(yy.mean() + oy)),
                outline_px=_flake_outline(
                    image,
                    background,
                    level,
                    crop,
                    px0 + bx0,
                    py0 + by0,
                    f,
                    cz,
                    bw,
                    bare_c,
                    hole_w,
                ),
                region_ids=tuple(rids),
            )
        )
        if progress:
            progress(0.4 + 0.6 * (k + 1) / len(order), "terraces")
    for a in (labels, flake_labels):
        a.setflags(write=False)
    return Segmentation(
        channels=image.channels,
        substrate={n: float(v) for n, v in zip(image.channels, level)},
        substrate_fraction=frac,
        noise=noise,
        correlation_area_px=corr,
        flakes=tuple(flakes),
        regions=tuple(regions),
        labels=labels,
        flake_labels=flake_labels,
        factor=f,
        um_per_px=float(um_per_px),
        warnings=tuple(warnings),
        background=background,
    )


def _flake_outline(
    image: Micrograph,
    bg: Background,
    level: np.ndarray,
    crop: np.ndarray,
    wx0: int,
    wy0: int,
    f: int,
    centres: np.ndarray,
    bw: np.ndarray,
    bare_c: np.ndarray | None,
    hole_w: list,
) -> np.ndarray:
    # ``centres``: substrate (zeros) then the terrace modes, divided by ``bw``.
    """A flake's outline; at full resolution where the flake touches a hole.

    On the working grid an outline is good to about f/2 pixels. Where a flake meets a hole (the
    coverage margin needs the edge to a pixel), the flake's full-resolution pixels are classed
    as on the working grid (nearest of substrate, bare hole and the flake's terrace contrasts,
    after a 1-pixel smoothing, so that the edge lies half-way) and the outline traced on them.
    """
    coarse = _outline(crop, wx0, wy0, f)
    if f == 1 or not hole_w:
        return coarse
    h, w = crop.shape
    # Full-resolution box of the flake, padded; the coarse mask expanded to it.
    pad = 2
    bx0, by0 = max(0, (wx0 - pad) * f), max(0, (wy0 - pad) * f)
    bx1 = min(image.width, (wx0 + w + pad) * f)
    by1 = min(image.height, (wy0 + h + pad) * f)
    win = 3 * f + 12  # edges nearer than this to a hole's edge are traced at full resolution
    near = [
        (x * f + (f - 1) / 2.0, y * f + (f - 1) / 2.0, r * f)
        for x, y, r in hole_w
        if wx0 - r - win / f <= x <= wx0 + w + r + win / f
        and wy0 - r - win / f <= y <= wy0 + h + r + win / f
    ]
    if not near:
        return coarse
    big = np.zeros((by1 - by0, bx1 - bx0), np.uint8)
    up = cv2.resize(crop.astype(np.uint8), (w * f, h * f), interpolation=cv2.INTER_NEAREST)
    oy, ox = wy0 * f - by0, wx0 * f - bx0
    hh, ww = min(up.shape[0], big.shape[0] - oy), min(up.shape[1], big.shape[1] - ox)
    big[oy : oy + hh, ox : ox + ww] = up[:hh, :ww]
    allowed = cv2.dilate(big, np.ones((2 * f + 1, 2 * f + 1), np.uint8))
    others = [np.zeros(len(bw))]
    if bare_c is not None:
        others.append(np.asarray(bare_c))
    cz = np.vstack([np.array(others) / bw, centres[1:]]).astype(np.float32)
    n_off = len(others)
    inv_bw = (1.0 / bw).astype(np.float32)
    for x, y, r in near:
        x0, x1 = max(bx0, int(x - r - win)), min(bx1, int(x + r + win) + 1)
        y0, y1 = max(by0, int(y - r - win)), min(by1, int(y + r + win) + 1)
        if x1 - x0 < 4 or y1 - y0 < 4:
            continue
        c = contrast_image(bg.correct(image, slice(y0, y1), slice(x0, x1)), level)
        c = cv2.GaussianBlur(c, (0, 0), 1.0)
        if c.ndim == 2:
            c = c[:, :, None]
        z = c * inv_bw
        best = np.full(z.shape[:2], np.inf, np.float32)
        lab = np.zeros(z.shape[:2], np.int16)
        for k in range(len(cz)):
            d2 = ((z - cz[k]) ** 2).sum(-1)
            closer = d2 < best
            best[closer] = d2[closer]
            lab[closer] = k
        sub = (lab >= n_off) & (allowed[y0 - by0 : y1 - by0, x0 - bx0 : x1 - bx0] > 0)
        yy, xx = np.ogrid[y0:y1, x0:x1]
        sub = _bridge_rims(sub, np.abs(np.hypot(xx - x, yy - y) - r) <= 4.0, 4)
        big[y0 - by0 : y1 - by0, x0 - bx0 : x1 - bx0] = sub
    big = cv2.morphologyEx(big, cv2.MORPH_OPEN, np.ones((3, 3), np.uint8))
    contours, _ = cv2.findContours(big, cv2.RETR_EXTERNAL, cv2.CHAIN_APPROX_SIMPLE)
    if not contours:
        return coarse
    cmax = max(contours, key=cv2.contourArea).reshape(-1, 2).astype(np.float64)
    if len(cmax) < 3:
        return coarse
    cmax[:, 0] += bx0
    cmax[:, 1] += by0
    return cmax


def _bridge_rims(mask: np.ndarray, rim: np.ndarray, half: int) -> np.ndarray:
    """A flake mask with the hole rims it covers closed (a disk of radius ``half``).

    Under a flake, the blurred edge of a hole mixes the flake's supported and suspended
    contrasts; with one channel the mixture can pass through the substrate's contrast and cut
    the suspended part off. Closing within the rims joins them again; elsewhere nothing changes.
    """
    k = cv2.getStructuringElement(cv2.MORPH_ELLIPSE, (2 * half + 1, 2 * half + 1))
    m = np.pad(mask.astype(np.uint8), half + 1)
    closed = cv2.morphologyEx(m, cv2.MORPH_CLOSE, k)[half + 1 : -half - 1, half + 1 : -half - 1]
    return mask | ((closed > 0) & rim)


def _bare_hole_pixels(
    cs: np.ndarray, sub_mask: np.ndarray, hole_w: list, thr: np.ndarray
) -> tuple[np.ndarray, np.ndarray | None]:
    """Pixels of bare holes (working grid) and the bare holes' contrast vector."""
    mask = np.zeros(cs.shape[:2], bool)
    if not hole_w:
        return mask, None
    rows, cols = mask.shape
    inner, bare = [], []
    for x, y, r in hole_w:
        x0, x1 = max(0, int(x - 1.6 * r - 3)), min(cols, int(x + 1.6 * r + 4))
        y0, y1 = max(0, int(y - 1.6 * r - 3)), min(rows, int(y + 1.6 * r + 4))
        if x1 <= x0 or y1 <= y0:
            inner.append(None)
            continue
        yy, xx = np.ogrid[y0:y1, x0:x1]
        d = np.hypot(xx - x, yy - y)
        core = d < 0.6 * r
        ring = (d > r + 1.5) & (d < 1.5 * r + 1.5)
        if not core.any():
            inner.append(None)
            continue
        c = np.median(cs[y0:y1, x0:x1][core], axis=0)
        inner.append(c)
        if ring.any() and np.mean(sub_mask[y0:y1, x0:x1][ring]) > 0.9:
            bare.append(c)
    if not bare:
        return mask, None
    cb = np.median(np.array(bare), axis=0)
    # Distance of each pixel's contrast from the segment [0, cb] (mixtures of substrate and bare
    # hole at the edge), in units of the detection threshold.
    nb = float(np.dot(cb / thr, cb / thr))
    for x, y, r in hole_w:
        x0, x1 = max(0, int(x - r - 3)), min(cols, int(x + r + 4))
        y0, y1 = max(0, int(y - r - 3)), min(rows, int(y + r + 4))
        if x1 <= x0 or y1 <= y0:
            continue
        yy, xx = np.ogrid[y0:y1, x0:x1]
        d = np.hypot(xx - x, yy - y)
        v = cs[y0:y1, x0:x1] / thr
        t = np.clip((v @ (cb / thr)) / max(nb, 1e-12), 0, 1)
        dist = np.sqrt(((v - t[..., None] * (cb / thr)) ** 2).sum(-1))
        # Mixtures of substrate and bare hole only on the rim, where the blurred edge makes
        # them: inside, a pixel is bare hole only near the bare holes' own contrast (with one
        # channel, every suspended flake darker than a bare hole lies on the segment).
        # The rim counts only where bare substrate lies just outside it: where a flake covers
        # the edge, mixtures of its supported and suspended parts can lie on the segment too.
        with np.errstate(invalid="ignore", divide="ignore"):
            ux, uy = (xx - x) / np.maximum(d, 1e-9), (yy - y) / np.maximum(d, 1e-9)
        oxs = np.clip(np.round(x + ux * (r + 3.5)).astype(int), 0, cols - 1)
        oys = np.clip(np.round(y + uy * (r + 3.5)).astype(int), 0, rows - 1)
        rim = (np.abs(d - r) <= 2.5) & sub_mask[oys, oxs]
        near_cb = np.sqrt(((v - cb / thr) ** 2).sum(-1)) < 1.5
        mask[y0:y1, x0:x1] |= (d <= r + 2.0) & (dist < 1.5) & (rim | near_cb)
    return mask, cb


def _over_hole(
    stat: np.ndarray,
    x0: int,
    y0: int,
    hole_w: list,
    labels: np.ndarray | None = None,
    label: int = 0,
) -> bool:
    """Whether a small component (crop stats; ``labels == label`` its pixels in the crop whose
    top-left is (x0, y0)) lies over a hole and fills a good part of it: at least 8% of the hole's area
    lies more than 1.5 px inside its edge (a sliver along the rim is an edge, not a membrane)."""
    if not hole_w:
        return False
    cx = x0 + stat[0] + stat[2] / 2.0
    cy = y0 + stat[1] + stat[3] / 2.0
    area = float(stat[cv2.CC_STAT_AREA])
    for x, y, r in hole_w:
        if np.hypot(cx - x, cy - y) >= r + 1.5 or area < max(6.0, 0.08 * np.pi * r * r):
            continue
        if labels is None:
            return True
        bx, by, bw_, bh = (int(v) for v in stat[:4])
        ys, xs = np.nonzero(labels[by : by + bh, bx : bx + bw_] == label)
        inside = np.hypot(xs + bx + x0 - x, ys + by + y0 - y) <= r - 1.5
        if np.count_nonzero(inside) >= max(6.0, 0.08 * np.pi * r * r):
            return True
    return False


def _work_gain(bg: Background, wr: int, wc: int, f: int) -> np.ndarray:
    """The background gain at working-pixel centres (float32 ``[row, col, ch]``)."""
    nch = len(bg.channels)
    if bg.method == "none":
        return np.ones((wr, wc, nch), np.float32)
    if bg.method == "reference":
        g = _grid.downsample(bg.reference_gain, f)[:wr, :wc]
        return g if g.ndim == 3 else g[:, :, None]
    from flakebook.imaging.background import _norm_coords, _terms

    y = _norm_coords(_grid.to_full(np.arange(wr, dtype=np.float64), f), bg.shape[0])
    x = _norm_coords(_grid.to_full(np.arange(wc, dtype=np.float64), f), bg.shape[1])
    terms = _terms(bg.degree)
    out = np.empty((wr, wc, nch), np.float32)
    for c in range(nch):
        s = np.zeros((wr, wc), np.float32)
        for j in range(bg.degree + 1):
            px = np.zeros_like(x)
            for t, (i, jj) in enumerate(terms):
                if jj == j:
                    px += bg.coefficients[c, t] * x**i
            s += np.outer((y**j).astype(np.float32), px.astype(np.float32))
        np.maximum(s, 1e-6, out=s)
        out[:, :, c] = np.float32(bg.level[c]) / s
    return out


def _measure_region(
    image: Micrograph,
    bg: Background,
    level: np.ndarray,
    rmask: np.ndarray,
    rx: int,
    ry: int,
    f: int,
    rid: int,
    fid: int,
    um_per_px: float,
    noise: dict,
    corr: dict,
    sub_rel: dict,
) -> Region | None:
    """Contrast, area, box, centroid and outline of one region at full resolution."""
    fy0, fx0 = ry * f, rx * f
    h = min(rmask.shape[0] * f, image.height - fy0)
    w = min(rmask.shape[1] * f, image.width - fx0)
    wy, wx = np.nonzero(rmask)
    if len(wy) == 0:
        return None
    # Area, box and centroid of the region's full-resolution pixels (blocks of f x f).
    area_px = int(len(wy)) * f * f
    cx = float(np.mean(wx)) * f + (f - 1) / 2.0 + fx0
    cy = float(np.mean(wy)) * f + (f - 1) / 2.0 + fy0
    bbox = (
        fx0 + int(wx.min()) * f,
        fy0 + int(wy.min()) * f,
        min(fx0 + int(wx.max()) * f + f - 1, image.width - 1),
        min(fy0 + int(wy.max()) * f + f - 1, image.height - 1),
    )
    # Interior: leave out pixels within max(2, f) px of the region's edge (blur, mixed pixels);
    # eroded on the working grid (one working pixel is f px) and expanded to full resolution.
    k = 5 if f == 1 else 3
    inner_w = cv2.erode(np.pad(rmask.astype(np.uint8), k // 2), np.ones((k, k), np.uint8))
    inner_w = inner_w[k // 2 : -(k // 2), k // 2 : -(k // 2)]
    if np.count_nonzero(inner_w) * f * f < 16:
        inner_w = rmask.astype(np.uint8)
    inner = _full_crop_mask(inner_w.astype(bool), f)[:h, :w]
    n_all = int(np.count_nonzero(inner))
    # Large regions are measured on a regular sub-grid of at most ~MAX_PIXELS interior pixels
    # (every k-th pixel in x and y); the standard error allows for it.
    k = max(1, int(np.ceil(np.sqrt(n_all / MAX_PIXELS))))
    rows, cols = slice(fy0, fy0 + h, k), slice(fx0, fx0 + w, k)
    inner = inner[::k, ::k] & ~image.saturated_crop(rows, cols)
    if np.count_nonzero(inner) < 4:
        return None
    crop = bg.correct(image, rows, cols)
    cvals = contrast_image(crop[inner], level)
    n = int(cvals.shape[0])
    contrast, err, sdd = {}, {}, {}
    neff = n
    # The fitted illumination surface is uncertain too (most where a large flake hides the
    # substrate); its relative error at the region scales with (1 - C).
    surf_rel = bg.relative_error(cx, cy)
    for c, name in enumerate(image.channels):
        m, sd = _robust_mean(cvals[:, c])
        # Correlation between sub-grid neighbours falls as the stride grows (about A_c / k^2).
        neff = max(1.0, min(n / max(1.0, corr[name] / k**2), n_all / corr[name]))
        contrast[name] = m
        sdd[name] = sd
        err[name] = float(
            np.sqrt((sd**2) / neff + ((1 - m) * sub_rel[name]) ** 2 + ((1 - m) * surf_rel[c]) ** 2)
        )
    return Region(
        id=rid,
        flake_id=fid,
        area_px=area_px,
        area_um2=float(area_px * um_per_px**2),
        bbox_px=bbox,
        centroid_px=(cx, cy),
        outline_px=_outline(rmask, rx, ry, f),
        contrast=contrast,
        contrast_err=err,
        contrast_sd=sdd,
        n_pixels=n,
        n_effective=float(neff),
    )
