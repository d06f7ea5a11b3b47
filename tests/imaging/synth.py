"""Synthetic micrographs for the imaging tests (drawn here, with known truth)."""

from __future__ import annotations

import math

import cv2
import numpy as np

from flakebook.imaging.io import linear_to_srgb


def disk_coverage(shape, cx, cy, r, ss=8):
    """Fraction of each pixel inside a disk, by supersampling ss x ss points per pixel.

    Pixel (x, y) covers [x - 0.5, x + 0.5] x [y - 0.5, y + 0.5] (origin at the top-left pixel's
    centre, INTERFACE.md).
    """
    rows, cols = shape
    out = np.zeros(shape, np.float64)
    x0, x1 = max(0, int(math.floor(cx - r - 1))), min(cols, int(math.ceil(cx + r + 2)))
    y0, y1 = max(0, int(math.floor(cy - r - 1))), min(rows, int(math.ceil(cy + r + 2)))
    if x1 <= x0 or y1 <= y0:
        return out
    off = (np.arange(ss) + 0.5) / ss - 0.5
    ys = (np.arange(y0, y1)[:, None] + off[None, :]).ravel()
    xs = (np.arange(x0, x1)[:, None] + off[None, :]).ravel()
    inside = ((xs[None, :] - cx) ** 2 + (ys[:, None] - cy) ** 2) <= r * r
    out[y0:y1, x0:x1] = inside.reshape(y1 - y0, ss, x1 - x0, ss).mean(axis=(1, 3))
    return out


def polygon_coverage(shape, poly, ss=4):
    """Fraction of each pixel inside a polygon (vertices in pixel coordinates), supersampled."""
    rows, cols = shape
    big = np.zeros((rows * ss, cols * ss), np.uint8)
    pts = np.round((np.asarray(poly, float) * ss + (ss - 1) / 2.0) * 16).astype(np.int32)
    cv2.fillPoly(big, [pts.reshape(-1, 1, 2)], 1, lineType=cv2.LINE_8, shift=4)
    return big.reshape(rows, ss, cols, ss).mean(axis=(1, 3))


def vignetting(shape, strength=0.2):
    rows, cols = shape
    yy, xx = np.mgrid[0:rows, 0:cols]
    u = (xx - cols / 2) / cols
    v = (yy - rows / 2) / rows
    return 1.0 - strength * 2 * (u**2 + v**2)


def render(
    shape,
    substrate_rgb,
    layers_masks,
    *,
    noise=0.02,
    vignette=0.2,
    dark=0.0,
    rng=None,
    blur_px=0.7,
):
    """Linear intensity [row, col, ch]: substrate * (1 - C) * vignetting + dark + noise.

    ``layers_masks``: list of (coverage fraction image, contrast vector) painted in order.
    """
    rng = rng or np.random.default_rng(0)
    sub = np.asarray(substrate_rgb, np.float64)
    c = np.zeros((*shape, len(sub)))
    for frac, cvec in layers_masks:
        c = c * (1 - frac[..., None]) + frac[..., None] * np.asarray(cvec)[None, None, :]
    img = sub[None, None, :] * (1 - c)
    if blur_px > 0:
        img = cv2.GaussianBlur(img, (0, 0), blur_px)
        if img.ndim == 2:
            img = img[:, :, None]
    img = img * vignetting(shape, vignette)[..., None]
    img = img * (1 + noise * rng.standard_normal(img.shape))
    return img + dark


def to_srgb8(lin):
    return np.clip(np.round(linear_to_srgb(np.clip(lin, 0, 1)) * 255), 0, 255).astype(np.uint8)
