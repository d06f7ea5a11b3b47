"""Contrast against the bare substrate: the substrate's colour, C = 1 - I / I_substrate, the
noise and its correlation on bare substrate, and each region's measurement at full resolution.

Optical contrast per channel is C = 1 - I / I_substrate (DESIGN.md: positive when the flake is
darker than the bare substrate of the same image). A region's contrast is a robust mean of its
interior pixels (edges left out) with a standard error that allows for spatially correlated pixel
noise: the effective number of independent pixels is n / A_c, with A_c the integral of the noise
autocorrelation measured on bare substrate.
"""

from __future__ import annotations

import cv2
import numpy as np

from flakebook.errors import InputError
from flakebook.imaging import _grid
from flakebook.imaging._grid import full_crop_mask, outline
from flakebook.imaging.background import Background
from flakebook.imaging.io import Micrograph
from flakebook.imaging.records import Region

MAX_PIXELS = 40_000  # interior pixels measured per region (a sub-grid beyond this)


# ---- substrate ---------------------------------------------------------------------------------


def box3_mean(a: np.ndarray) -> np.ndarray:
    """Mean over a 3-wide window along every axis in turn, zero outside the array (float64).

    The running sum of scipy.ndimage.uniform_filter(a, 3, mode="constant"), step for step, so
    that it gives the same values (tests/imaging/test_speed_paths.py checks it against scipy):
    a survey then needs no scipy.ndimage, whose import costs a few hundred ms.
    """
    out = np.array(a, np.float64)
    for axis in range(out.ndim):
        x = np.moveaxis(out, axis, 0)
        n = x.shape[0]
        pad = np.zeros((n + 2, *x.shape[1:]))
        pad[1:-1] = x
        res = np.empty_like(x)
        tmp = pad[0] + pad[1]
        tmp += pad[2]
        res[0] = tmp / 3.0
        for i in range(1, n):
            tmp += pad[i + 2] - pad[i - 1]
            res[i] = tmp / 3.0
        out = np.ascontiguousarray(np.moveaxis(res, 0, axis))
    return out


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
    mass = box3_mean(counts)
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


def substrate_patches(
    sub_mask_work: np.ndarray, f: int, size: int, want: int = 8
) -> list[tuple[int, int]]:
    """Top-left full-resolution corners of size x size patches lying wholly on substrate."""
    bw = max(1, int(np.ceil(size / f)))
    rows, cols = sub_mask_work.shape
    if rows < bw or cols < bw:
        return []
    m = sub_mask_work.astype(np.uint8)
    er = cv2.erode(m, np.ones((bw + 2, bw + 2), np.uint8), anchor=(0, 0), borderValue=0)
    ys, xs = _grid.nonzero(er[: rows - bw - 1, : cols - bw - 1] if rows > bw + 1 else er)
    if len(ys) == 0:
        return []
    pick = np.linspace(0, len(ys) - 1, min(want, len(ys))).astype(int)
    return [(int(ys[i] * f + f), int(xs[i] * f + f)) for i in pick]


def robust_mean(v: np.ndarray) -> tuple[float, float]:
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


def work_gain(bg: Background, wr: int, wc: int, f: int) -> np.ndarray:
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


def measure_region(
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
    wy, wx = _grid.nonzero(rmask)
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
    inner = full_crop_mask(inner_w.astype(bool), f)[:h, :w]
    n_all = int(np.count_nonzero(inner))
    # Large regions are measured on a regular sub-grid of at most ~MAX_PIXELS interior pixels
    # (every k-th pixel in x and y); the standard error allows for it.
    k = max(1, int(np.ceil(np.sqrt(n_all / MAX_PIXELS))))
    rows, cols = slice(fy0, fy0 + h, k), slice(fx0, fx0 + w, k)
    inner = inner[::k, ::k] & ~image.saturated_crop(rows, cols)
    if np.count_nonzero(inner) < 4:
        return None
    iy, ix = _grid.nonzero(inner)  # the order of crop[inner]
    cvals = contrast_image(bg.correct_at(image, rows, cols, iy, ix), level)
    n = int(cvals.shape[0])
    contrast, err, sdd = {}, {}, {}
    neff = n
    # The fitted illumination surface is uncertain too (most where a large flake hides the
    # substrate); its relative error at the region scales with (1 - C).
    surf_rel = bg.relative_error(cx, cy)
    for c, name in enumerate(image.channels):
        m, sd = robust_mean(cvals[:, c])
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
        outline_px=outline(rmask, rx, ry, f),
        contrast=contrast,
        contrast_err=err,
        contrast_sd=sdd,
        n_pixels=n,
        n_effective=float(neff),
    )
