"""Flakes and holes: bare-hole pixels, suspended parts, closed rims and edges traced near holes.

A bare hole is not flake: its pixels (contrast between the substrate's and that of holes with bare
substrate around them, on the rim only where bare substrate lies just outside) are taken out of
the flakes. A small component over a hole is a suspended terrace only when it fills a good part
of the hole. Under a flake, a hole's blurred rim mixes supported and suspended contrast; closing
within the rim joins the two. Where a flake meets a hole its outline is traced at full resolution.
"""

from __future__ import annotations

import cv2
import numpy as np

from flakebook.imaging import _grid
from flakebook.imaging._grid import outline
from flakebook.imaging.background import Background
from flakebook.imaging.contrast import contrast_image
from flakebook.imaging.io import Micrograph
from flakebook.imaging.modes import nearest_class


def flake_outline(
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
    coarse = outline(crop, wx0, wy0, f)
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
        ok = allowed[y0 - by0 : y1 - by0, x0 - bx0 : x1 - bx0] > 0
        if not ok.any():
            continue  # no part of the flake here: the window keeps the coarse mask's zeros
        c = contrast_image(bg.correct(image, slice(y0, y1), slice(x0, x1)), level)
        c = cv2.GaussianBlur(c, (0, 0), 1.0)
        if c.ndim == 2:
            c = c[:, :, None]
        # Only pixels the flake may reach are classed (the others are not flake anyway).
        lab, _ = nearest_class(c[ok] * inv_bw, cz)
        sub = np.zeros(ok.shape, bool)
        sub[ok] = lab >= n_off
        yy, xx = np.ogrid[y0:y1, x0:x1]
        d = np.hypot(xx - x, yy - y)
        sub = bridge_rims(sub, np.abs(d - r) <= 4.0, 4)
        if np.count_nonzero(sub & (d < r - RIM_DEPTH_PX)) < RIM_MIN_PX:
            sub &= d >= r + 0.5  # the flake only meets the rim (see rim_contacts)
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


RIM_DEPTH_PX = 3.0  # full-resolution pixels: a flake reaching no deeper into a hole meets its rim
RIM_MIN_PX = 3  # pixels that must lie that deep for a flake to count as over a hole


def rim_contacts(mask: np.ndarray, x0: int, y0: int, holes: list, f: int = 1) -> np.ndarray:
    """Pixels of a flake mask that only touch a hole's rim: bool, same shape as ``mask``.

    ``mask`` is a crop whose top-left pixel is (x0, y0) on a grid of factor ``f``; ``holes``
    are disks (x, y, r) on that grid. A hole's blurred rim mixes the substrate's, the bare
    hole's and a nearby flake's contrasts, so a flake whose edge runs along the rim seems to
    reach a pixel or two into the hole. Unless at least ``RIM_MIN_PX`` of its pixels lie more
    than ``RIM_DEPTH_PX`` full-resolution pixels inside the hole's edge (the flake truly covers
    part of it), its pixels inside the edge are rim, not flake: a flake edge within that depth
    of a rim cannot be told from the rim's blur.
    """
    out = np.zeros(mask.shape, bool)
    h, w = mask.shape
    depth = max(1.0, RIM_DEPTH_PX / f)
    for x, y, r in holes:
        cx, cy = x - x0, y - y0
        i0, i1 = max(0, int(cy - r - 2)), min(h, int(cy + r + 3))
        j0, j1 = max(0, int(cx - r - 2)), min(w, int(cx + r + 3))
        if i1 <= i0 or j1 <= j0:
            continue
        m = mask[i0:i1, j0:j1]
        if not m.any():
            continue
        yy, xx = np.ogrid[i0:i1, j0:j1]
        d = np.hypot(xx - cx, yy - cy)
        if np.count_nonzero(m & (d < r - depth)) >= RIM_MIN_PX:
            continue
        out[i0:i1, j0:j1] |= m & (d < r + 0.5)
    return out


def bridge_rims(mask: np.ndarray, rim: np.ndarray, half: int) -> np.ndarray:
    """A flake mask with the hole rims it covers closed (a disk of radius ``half``).

    Under a flake, the blurred edge of a hole mixes the flake's supported and suspended
    contrasts; with one channel the mixture can pass through the substrate's contrast and cut
    the suspended part off. Closing within the rims joins them again; elsewhere nothing changes.
    """
    k = cv2.getStructuringElement(cv2.MORPH_ELLIPSE, (2 * half + 1, 2 * half + 1))
    m = np.pad(mask.astype(np.uint8), half + 1)
    closed = cv2.morphologyEx(m, cv2.MORPH_CLOSE, k)[half + 1 : -half - 1, half + 1 : -half - 1]
    return mask | ((closed > 0) & rim)


def bare_hole_pixels(
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


def over_hole(
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
        ys, xs = _grid.nonzero(labels[by : by + bh, bx : bx + bw_] == label)
        inside = np.hypot(xs + bx + x0 - x, ys + by + y0 - y) <= r - 1.5
        if np.count_nonzero(inside) >= max(6.0, 0.08 * np.pi * r * r):
            return True
    return False
