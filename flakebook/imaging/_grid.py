"""Working copies of an image: block-averaged downsampling and the pixel mapping back.

A working pixel (i, j) at factor f is the mean of full-resolution rows f*i .. f*i+f-1 and columns
f*j .. f*j+f-1, so its centre is at full-resolution coordinate f*j + (f-1)/2 (x) and
f*i + (f-1)/2 (y), with the origin at the top-left pixel's centre (INTERFACE.md).
"""

from __future__ import annotations

import math

import cv2
import numpy as np


def choose_factor(shape: tuple[int, int], target_pixels: float = 7.5e5) -> int:
    """A whole downsampling factor bringing an image to about ``target_pixels`` or fewer."""
    n = float(shape[0]) * float(shape[1])
    return max(1, int(math.ceil(math.sqrt(n / target_pixels) - 1e-9)))


def downsample(a: np.ndarray, f: int) -> np.ndarray:
    """Block means of ``a`` ([row, col] or [row, col, ch]) over f x f blocks (edges cropped)."""
    if f == 1:
        return a
    rows, cols = a.shape[0] // f, a.shape[1] // f
    src = a[: rows * f, : cols * f]
    out = cv2.resize(src, (cols, rows), interpolation=cv2.INTER_AREA)
    if a.ndim == 3 and out.ndim == 2:
        out = out[:, :, None]
    return out


def block_max(mask: np.ndarray, f: int, fx: int | None = None) -> np.ndarray:
    """True where any pixel of an f x fx block (fx defaults to f) is nonzero (exact)."""
    fx = f if fx is None else fx
    if f == 1 and fx == 1:
        return mask.astype(bool, copy=False)
    rows, cols = mask.shape[0] // f, mask.shape[1] // fx
    src = mask[: rows * f, : cols * fx]
    src = src.view(np.uint8) if src.dtype == bool else src
    d = cv2.dilate(np.ascontiguousarray(src), np.ones((f, fx), np.uint8), anchor=(0, 0))
    return d[::f, ::fx][:rows, :cols] > 0


def nonzero(mask: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """``np.nonzero`` of a 2-D array as (rows, cols), in the same order; through the flat
    index, which numpy finds several times faster than the 2-D one."""
    flat = np.flatnonzero(mask)
    return np.divmod(flat, mask.shape[1])


def close_pairs(points: np.ndarray, radius: float, ordered: bool = True) -> np.ndarray:
    """Index pairs ``[m, 2]`` (i < j, sorted by i then j unless ``ordered`` is False) of points
    ``[n, 2]`` whose squared distance ``dx*dx + dy*dy`` is at most ``radius**2``: points binned
    into cells of side ``radius``, each compared with its own cell and the neighbouring ones
    (no k-d tree, so no scipy.spatial to import)."""
    p = np.asarray(points, np.float64).reshape(-1, 2)
    n = len(p)
    if n < 2 or not radius > 0:
        return np.zeros((0, 2), np.int64)
    cell = np.floor((p - p.min(0)) / radius).astype(np.int64)
    span = int(cell[:, 1].max()) + 3
    key = (cell[:, 0] + 1) * span + (cell[:, 1] + 1)
    order = np.argsort(key, kind="stable")
    skey = key[order]
    found = []
    for dx, dy in ((0, 0), (1, -1), (1, 0), (1, 1), (0, 1)):
        target = skey + dx * span + dy
        lo = np.searchsorted(skey, target, "left")
        hi = np.searchsorted(skey, target, "right")
        if dx == 0 and dy == 0:
            lo = np.arange(n) + 1  # later points of the same cell only
        cnt = np.maximum(hi - lo, 0)
        if not cnt.any():
            continue
        a = np.repeat(np.arange(n), cnt)
        start = np.repeat(lo - np.concatenate([[0], np.cumsum(cnt)[:-1]]), cnt)
        b = start + np.arange(len(a))
        found.append(np.column_stack([order[a], order[b]]))
    if not found:
        return np.zeros((0, 2), np.int64)
    pairs = np.concatenate(found)
    pairs = np.column_stack([pairs.min(1), pairs.max(1)])
    d = p[pairs[:, 0]] - p[pairs[:, 1]]
    pairs = pairs[d[:, 0] * d[:, 0] + d[:, 1] * d[:, 1] <= radius * radius]
    return pairs[np.lexsort((pairs[:, 1], pairs[:, 0]))] if ordered else pairs


def cross_pairs(
    p: np.ndarray, q: np.ndarray, radius: float, dense: bool | None = None
) -> np.ndarray:
    """Index pairs ``[m, 2]`` (into ``p``, into ``q``; in no set order) of points ``p [n, 2]``
    and ``q [k, 2]`` with squared distance ``dx*dx + dy*dy`` at most ``radius**2`` (``q``
    binned into cells of side ``radius``, each point of ``p`` compared with its 9 cells).

    The cells of ``q`` are found in a table of every cell (``dense``; the default when the
    table is not much larger than the points) or by binary search in the sorted cell keys:
    the same pairs in the same order either way."""
    p = np.asarray(p, np.float64).reshape(-1, 2)
    q = np.asarray(q, np.float64).reshape(-1, 2)
    if not len(p) or not len(q) or not radius > 0:
        return np.zeros((0, 2), np.int64)
    base = np.minimum(p.min(0), q.min(0))
    cq = np.floor((q - base) / radius).astype(np.int64)
    cp = np.floor((p - base) / radius).astype(np.int64)
    span = int(max(cq[:, 1].max(), cp[:, 1].max())) + 3
    key = (cq[:, 0] + 1) * span + (cq[:, 1] + 1)
    order = np.argsort(key, kind="stable")
    skey = key[order]
    pkey = (cp[:, 0] + 1) * span + (cp[:, 1] + 1)
    n_cells = (int(max(cq[:, 0].max(), cp[:, 0].max())) + 3) * span
    if dense is None:
        dense = n_cells <= 8 * (len(p) + len(q)) + 65536
    if dense:
        # counts[key] and the first index of each key in the sorted keys (what the binary
        # search returns: the number of keys below it); every target lies in the table.
        counts = np.bincount(key, minlength=n_cells)
        starts = np.cumsum(counts) - counts
    found = []
    for dx in (-1, 0, 1):
        for dy in (-1, 0, 1):
            target = pkey + dx * span + dy
            if dense:
                lo = starts[target]
                cnt = counts[target]
            else:
                lo = np.searchsorted(skey, target, "left")
                cnt = np.searchsorted(skey, target, "right") - lo
            if not cnt.any():
                continue
            a = np.repeat(np.arange(len(p)), cnt)
            b = np.repeat(lo - np.concatenate([[0], np.cumsum(cnt)[:-1]]), cnt) + np.arange(len(a))
            found.append(np.column_stack([a, order[b]]))
    if not found:
        return np.zeros((0, 2), np.int64)
    pairs = np.concatenate(found)
    # (gathers from contiguous columns: the same differences as from the rows)
    dx = np.ascontiguousarray(p[:, 0])[pairs[:, 0]] - np.ascontiguousarray(q[:, 0])[pairs[:, 1]]
    dy = np.ascontiguousarray(p[:, 1])[pairs[:, 0]] - np.ascontiguousarray(q[:, 1])[pairs[:, 1]]
    return pairs[dx * dx + dy * dy <= radius * radius]


def to_full(x: np.ndarray | float, f: int) -> np.ndarray | float:
    """Working-pixel coordinate to full-resolution coordinate (same for x and y)."""
    return f * np.asarray(x, dtype=np.float64) + (f - 1) / 2.0 if f != 1 else x


def to_work(x: np.ndarray | float, f: int) -> np.ndarray | float:
    """Full-resolution coordinate to working-pixel coordinate."""
    return (np.asarray(x, dtype=np.float64) - (f - 1) / 2.0) / f if f != 1 else x


def outline(mask: np.ndarray, x0: int, y0: int, f: int) -> np.ndarray:
    """Largest external contour of a working-resolution crop mask, in full-res pixel coords."""
    m = np.pad(mask.astype(np.uint8), 1)
    contours, _ = cv2.findContours(m, cv2.RETR_EXTERNAL, cv2.CHAIN_APPROX_SIMPLE)
    if not contours:
        return np.zeros((0, 2))
    c = max(contours, key=cv2.contourArea).reshape(-1, 2).astype(np.float64)
    c -= 1
    c[:, 0] += x0
    c[:, 1] += y0
    return np.column_stack([to_full(c[:, 0], f), to_full(c[:, 1], f)])


def full_crop_mask(mask_work: np.ndarray, f: int) -> np.ndarray:
    if f == 1:
        return mask_work
    return np.repeat(np.repeat(mask_work, f, axis=0), f, axis=1)
