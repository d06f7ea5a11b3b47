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

The parts live by concern: ``records`` (Region, Flake, Segmentation), ``contrast`` (substrate
colour, contrast image, noise correlation, region measurement), ``modes`` (terrace classes by
mean shift) and ``rims`` (bare holes, suspended parts, closed rims, edges traced near holes).
"""

from __future__ import annotations

import cv2
import numpy as np

from flakebook.errors import InputError, check_cancel
from flakebook.imaging import _grid
from flakebook.imaging._threads import with_one_blas_thread
from flakebook.imaging.background import Background, fit_background
from flakebook.imaging.contrast import (
    MAX_PIXELS,
    contrast_image,
    correlation_area,
    measure_region,
    substrate_colour,
    substrate_patches,
    work_gain,
)
from flakebook.imaging.io import Micrograph
from flakebook.imaging.modes import nearest_class, terrace_labels
from flakebook.imaging.records import Flake, Region, Segmentation
from flakebook.imaging.rims import (
    bare_hole_pixels,
    bridge_rims,
    flake_outline,
    over_hole,
    rim_contacts,
)

__all__ = [
    "MAX_PIXELS",
    "Flake",
    "Region",
    "Segmentation",
    "contrast_image",
    "correlation_area",
    "segment",
    "substrate_colour",
]


@with_one_blas_thread
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
        wgain = work_gain(background, wr, wc, f)
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
        # A saturated pixel is not bare substrate: it belongs to a flake (a thick, bright piece
        # is still a flake, reported and flagged), though its value is left out of contrasts.
        fg = (np.any(np.abs(cs) > thr, axis=2) & valid) | ~valid
        if exclude is not None:
            fg &= ~exclude[:wr, :wc]
        bare_mask, bare_c = bare_hole_pixels(cs, sub_mask, hole_w, thr)
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
            change = np.abs(work_gain(refit, wr, wc, f)[::4, ::4] / wgain[::4, ::4] - 1)
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
        corners = substrate_patches(sub_mask, f, psize)
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
    usable = ~bare_mask  # saturated pixels too: they are classed by their (clipped) contrast
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
        lab, centres = terrace_labels(vecs, bw)
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
        # Only the pixels near the component are classed (the rest of its box stays 0).
        zn = cs[py0:py1, px0:px1][near] / bw
        cz = np.vstack([np.zeros((1, zn.shape[1])), centres / bw])
        cls, dmin = nearest_class(zn, cz)
        if bare_c is not None and hole_disks is not None:
            # Over a hole, a pixel nearer to the bare hole's contrast than to every class is
            # bare hole (a flake edge across the hole then lies half-way, as on substrate).
            db = ((zn - (bare_c / bw)) ** 2).sum(-1)
            cls[(db < dmin) & (hole_zone[py0:py1, px0:px1][near] > 0)] = 0
        tl = np.zeros(near.shape, np.int32)
        tl[near] = cls
        fmask = tl > 0
        if hole_disks is not None:
            fmask = bridge_rims(fmask, hole_zone[py0:py1, px0:px1] > 0, 3)
            rim_only = rim_contacts(fmask, px0, py0, hole_w, f)
            fmask &= ~rim_only
            tl[rim_only] = 0
        if np.count_nonzero(fmask) < min_px_work:
            continue
        fid = len(flakes) + 1
        flake_labels[py0:py1, px0:px1][fmask] = fid
        rids = []
        # Each terrace class is opened and labelled within its own box (plus a margin of 2,
        # beyond the opening's reach), not the flake's: the same components, found faster.
        ty, tx = _grid.nonzero(tl)
        tcls = tl[ty, tx]
        ncls = len(cz)
        counts = np.bincount(tcls, minlength=ncls)
        big = np.iinfo(np.int64).max
        ylo, xlo = np.full(ncls, big), np.full(ncls, big)
        yhi, xhi = np.full(ncls, -1), np.full(ncls, -1)
        np.minimum.at(ylo, tcls, ty)
        np.minimum.at(xlo, tcls, tx)
        np.maximum.at(yhi, tcls, ty)
        np.maximum.at(xhi, tcls, tx)
        for t in range(1, ncls):
            if counts[t] < 6:
                continue
            # (an even origin: the labelling scans 2 x 2 blocks, whose order numbers the parts)
            oy, ox = max(0, int(ylo[t]) - 2) & ~1, max(0, int(xlo[t]) - 2) & ~1
            ey, ex = min(tl.shape[0], int(yhi[t]) + 3), min(tl.shape[1], int(xhi[t]) + 3)
            tm = (tl[oy:ey, ox:ex] == t).astype(np.uint8)
            tm = cv2.morphologyEx(tm, cv2.MORPH_OPEN, kernel)
            # (small masks: the sequential labelling, with the same labels as the default, is
            # several times faster than spreading a few thousand pixels over threads)
            n2, lab2, st2, _ = cv2.connectedComponentsWithStatsWithAlgorithm(
                tm, 8, cv2.CV_32S, cv2.CCL_SPAGHETTI
            )
            cx0, cy0 = px0 + ox, py0 + oy  # the crop's top-left on the working grid
            for j in range(1, n2):
                if st2[j, cv2.CC_STAT_AREA] < min_px_work and not over_hole(
                    st2[j], cx0, cy0, hole_w, lab2, j
                ):
                    continue
                rx, ry, rw, rh = (int(v) for v in st2[j, :4])
                rmask = lab2[ry : ry + rh, rx : rx + rw] == j
                rid = len(regions) + 1
                reg = measure_region(
                    image,
                    background,
                    level,
                    rmask,
                    cx0 + rx,
                    cy0 + ry,
                    f,
                    rid,
                    fid,
                    um_per_px,
                    noise,
                    corr,
                    sub_rel,
                )
                if reg is not None:
                    labels[cy0 + ry : cy0 + ry + rh, cx0 + rx : cx0 + rx + rw][rmask] = rid
                    regions.append(reg)
                    rids.append(rid)
        ys, xs = _grid.nonzero(fmask)
        bx0, bx1, by0, by1 = xs.min(), xs.max(), ys.min(), ys.max()
        crop = fmask[by0 : by1 + 1, bx0 : bx1 + 1]
        # Area and centroid of the full-resolution pixels (f x f per working pixel), in whole
        # numbers: working pixel j covers full columns f j .. f j + f - 1, each in f rows.
        n_work = len(xs)
        area_px = n_work * f * f
        sum_x = f**3 * int((xs - bx0).sum()) + n_work * f * f * (f - 1) // 2
        sum_y = f**3 * int((ys - by0).sum()) + n_work * f * f * (f - 1) // 2
        ox, oy = (px0 + bx0) * f, (py0 + by0) * f
        flakes.append(
            Flake(
                id=fid,
                area_px=area_px,
                area_um2=float(area_px * um_per_px**2),
                bbox_px=(ox, oy, ox + crop.shape[1] * f - 1, oy + crop.shape[0] * f - 1),
                centroid_px=(float(sum_x / area_px + ox), float(sum_y / area_px + oy)),
                outline_px=flake_outline(
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
