"""Terrace classes within a flake: mean-shift modes of its contrast vectors.

The contrast vectors of a flake's interior are binned, the bins' weighted points shifted to the
modes of their density (flat kernel of radius one bandwidth), and modes closer than half a
bandwidth merged; each mode is a candidate terrace class.
"""

from __future__ import annotations

import numpy as np


def mean_shift_modes(points: np.ndarray, weights: np.ndarray, iters: int = 40) -> np.ndarray:
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
    found = np.zeros((len(x), pts.shape[1]))  # the centres so far are found[:m]
    m = 0
    label = np.empty(len(x), int)
    for i in order:
        if m:
            dd = ((found[:m] - x[i]) ** 2).sum(1)
            j = int(np.argmin(dd))
            if dd[j] <= 0.25:
                label[i] = j
                continue
        found[m] = x[i]
        label[i] = m
        m += 1
    return label, found[:m].copy()


def _unique_rows(key: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """``np.unique(key, axis=0, return_inverse=True, return_counts=True)`` for int64 rows, by
    one packed int64 per row (same order: the first column most significant) when it fits."""
    lo = key.min(axis=0)
    span = key.max(axis=0) - lo + 1
    if len(key) == 0 or float(np.prod(span.astype(np.float64))) >= 2.0**62:
        return np.unique(key, axis=0, return_inverse=True, return_counts=True)
    packed = np.zeros(len(key), np.int64)
    for c in range(key.shape[1]):
        packed = packed * span[c] + (key[:, c] - lo[c])
    _, first, inv, counts = np.unique(
        packed, return_index=True, return_inverse=True, return_counts=True
    )
    return key[first], inv, counts


def terrace_labels(
    cvec: np.ndarray, bandwidth: np.ndarray, max_points: int = 1200
) -> tuple[np.ndarray, np.ndarray]:
    """Cluster contrast vectors ([n, ch]) by mean shift; returns (label per vector, centres)."""
    z = cvec / bandwidth
    q = 2.5
    for _ in range(6):
        uniq, inv, counts = _unique_rows(np.floor(z * q).astype(np.int64))
        if len(uniq) <= max_points:
            break
        q /= 1.6
    inv = inv.ravel()
    pts = np.zeros((len(uniq), z.shape[1]))
    for c in range(z.shape[1]):
        pts[:, c] = np.bincount(inv, weights=z[:, c], minlength=len(uniq))
    pts /= counts[:, None]
    lab, centres = mean_shift_modes(pts, counts.astype(np.float64))
    return lab[inv], centres * bandwidth


def nearest_class(z: np.ndarray, table: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The nearest row of ``table`` ([k, ch]) to each vector of ``z`` ([n, ch]) in squared
    Euclidean distance (the first on a tie), and that distance; (int32 [n], [n]).

    Channel by channel on contiguous rows, in place: no [n, k, ch] array is made.
    """
    zt = np.ascontiguousarray(np.asarray(z).T)
    n = zt.shape[1]
    lab = np.zeros(n, np.int32)
    d = np.empty(n, zt.dtype)
    t = np.empty(n, zt.dtype)
    best = None
    for k in range(len(table)):
        c = table[k]
        np.subtract(zt[0], c[0], out=d)
        np.multiply(d, d, out=d)
        for j in range(1, zt.shape[0]):
            np.subtract(zt[j], c[j], out=t)
            np.multiply(t, t, out=t)
            d += t
        if best is None:
            best = d.copy()
            continue
        closer = d < best
        np.copyto(best, d, where=closer)
        lab[closer] = k
    if best is None:
        best = np.full(n, np.inf, zt.dtype)
    return lab, best
