"""Background: the camera's dark offset and uneven illumination.

The dark offset (the value the optics calibration stored, in linear intensity as a fraction of
full scale, one per channel or one for all) is subtracted once. Uneven illumination (vignetting,
a tilted lamp) is then corrected either by a smooth surface, a low-order 2-D polynomial fitted
robustly (Tukey biweight, iteratively reweighted) to the bare-substrate pixels, or by dividing by a
blank reference image of the same chip. The correction is a gain per pixel and channel scaled so
that the substrate keeps its mean level; a :class:`Background` can correct the whole image or any
crop of it, so that a survey need not build a corrected copy of a large image.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import cv2
import numpy as np

from flakebook.errors import InputError
from flakebook.imaging import _grid
from flakebook.imaging.io import Micrograph, with_intensity


def _terms(degree: int) -> list[tuple[int, int]]:
    return [(i, j) for total in range(degree + 1) for j in range(total + 1) for i in [total - j]]


def _norm_coords(x: np.ndarray, n: int) -> np.ndarray:
    return (2.0 * x / max(n - 1, 1) - 1.0) if n > 1 else np.zeros_like(x, dtype=np.float64)


@dataclass(frozen=True, eq=False)
class Background:
    """What was done to an image's background, and the per-pixel gain that does it.

    Attributes:
        method: ``"polynomial"`` (surface fitted to substrate pixels), ``"reference"`` (blank
            image) or ``"none"``.
        dark_offset: subtracted per channel (fraction of full scale).
        channels: channel names.
        shape: (rows, cols) of the full-resolution image.
        degree: polynomial degree (``"polynomial"`` only).
        coefficients: float64 ``[channel, term]`` of the surface in coordinates normalised to
            [-1, 1] across the image (``"polynomial"`` only).
        level: the substrate's mean level per channel after correction.
        residual_rms: relative rms scatter of substrate pixels about the surface, per channel
            (working resolution), or None.
        reference_gain: the gain image ``[row, col, ch]`` (``"reference"`` only).
        warnings: messages for the user.
        coefficient_cov: covariance of ``coefficients`` per channel (``"polynomial"`` only).
    """

    method: str
    dark_offset: tuple[float, ...]
    channels: tuple[str, ...]
    shape: tuple[int, int]
    degree: int | None = None
    coefficients: np.ndarray | None = None
    level: tuple[float, ...] = ()
    residual_rms: tuple[float, ...] | None = None
    reference_gain: np.ndarray | None = None
    warnings: tuple[str, ...] = ()
    coefficient_cov: np.ndarray | None = None

    def relative_error(self, x_px: float, y_px: float) -> np.ndarray:
        """Standard error of the fitted surface at (x, y), relative to it, per channel (0 for a
        reference image or no correction)."""
        nch = len(self.channels)
        if self.method != "polynomial" or self.coefficient_cov is None:
            return np.zeros(nch)
        x = _norm_coords(np.array([float(x_px)]), self.shape[1])[0]
        y = _norm_coords(np.array([float(y_px)]), self.shape[0])[0]
        ap = np.array([x**i * y**j for i, j in _terms(self.degree)])
        val = self.coefficients @ ap
        var = np.einsum("t,ctu,u->c", ap, self.coefficient_cov, ap)
        return np.sqrt(np.maximum(var, 0.0)) / np.maximum(np.abs(val), 1e-12)

    def surface(self, rows: slice = slice(None), cols: slice = slice(None)) -> np.ndarray:
        """The fitted illumination surface over a crop, float32 ``[row, col, ch]``."""
        r0, r1, rs = rows.indices(self.shape[0])
        c0, c1, cs = cols.indices(self.shape[1])
        if self.method != "polynomial":
            raise InputError("surface() is only defined for the polynomial background")
        y = _norm_coords(np.arange(r0, r1, rs, dtype=np.float64), self.shape[0])
        x = _norm_coords(np.arange(c0, c1, cs, dtype=np.float64), self.shape[1])
        terms = _terms(self.degree or 0)
        ypow = [(y**k).astype(np.float32) for k in range(self.degree + 1)]
        xpow = [x**k for k in range(self.degree + 1)]
        planes = []
        for c in range(len(self.channels)):
            plane = np.zeros((len(y), len(x)), np.float32)
            for j in range(self.degree + 1):
                # sum over i of a_ij x^i, times y^j
                px = np.zeros_like(x)
                for t, (i, jj) in enumerate(terms):
                    if jj == j:
                        px += self.coefficients[c, t] * xpow[i]
                plane += np.outer(ypow[j], px.astype(np.float32))
            planes.append(plane)
        return np.stack(planes, axis=-1)

    def gain(self, rows: slice = slice(None), cols: slice = slice(None)) -> np.ndarray:
        """The per-pixel gain over a crop (float32 ``[row, col, ch]``), 1 where uncorrected.

        ``rows`` and ``cols`` may have a step (a sub-grid)."""
        r0, r1, rs = rows.indices(self.shape[0])
        c0, c1, cs = cols.indices(self.shape[1])
        nch = len(self.channels)
        if self.method == "none":
            return np.ones((len(range(r0, r1, rs)), len(range(c0, c1, cs)), nch), np.float32)
        if self.method == "reference":
            return self.reference_gain[r0:r1:rs, c0:c1:cs]
        s = self.surface(slice(r0, r1, rs), slice(c0, c1, cs))
        lv = np.asarray(self.level, np.float32)
        return lv / np.maximum(s, 1e-6)

    def correct(
        self, intensity, rows: slice = slice(None), cols: slice = slice(None)
    ) -> np.ndarray:
        """Corrected intensity of the crop ``[rows, cols]`` of an array or a Micrograph (a new
        float32 array)."""
        crop = (
            intensity.crop(rows, cols)
            if isinstance(intensity, Micrograph)
            else intensity[rows, cols]
        )
        off = np.asarray(self.dark_offset, np.float32)
        return (crop - off) * self.gain(rows, cols)

    def correct_at(
        self, intensity, rows: slice, cols: slice, iy: np.ndarray, ix: np.ndarray
    ) -> np.ndarray:
        """``correct(intensity, rows, cols)[iy, ix]`` as ``[point, ch]`` (float32, the same
        values), computed at those points of the crop only."""
        r0, r1, rs = rows.indices(self.shape[0])
        c0, c1, cs = cols.indices(self.shape[1])
        ys, xs = r0 + iy * rs, c0 + ix * cs
        if isinstance(intensity, Micrograph):
            vals = intensity.crop_at(ys, xs)
        else:
            vals = intensity[ys, xs]
            vals = vals.reshape(len(ys), -1)
        off = np.asarray(self.dark_offset, np.float32)
        return (vals - off) * self._gain_at(rows, cols, iy, ix)

    def _gain_at(self, rows: slice, cols: slice, iy: np.ndarray, ix: np.ndarray) -> np.ndarray:
        """``gain(rows, cols)[iy, ix]`` (the same arithmetic per point)."""
        r0, r1, rs = rows.indices(self.shape[0])
        c0, c1, cs = cols.indices(self.shape[1])
        nch = len(self.channels)
        if self.method == "none":
            return np.ones((len(iy), nch), np.float32)
        if self.method == "reference":
            g = self.reference_gain[r0 + iy * rs, c0 + ix * cs]
            return g.reshape(len(iy), -1)
        y = _norm_coords(np.arange(r0, r1, rs, dtype=np.float64), self.shape[0])
        x = _norm_coords(np.arange(c0, c1, cs, dtype=np.float64), self.shape[1])
        terms = _terms(self.degree or 0)
        ypow = [(y**k).astype(np.float32)[iy] for k in range(self.degree + 1)]
        xpow = [x**k for k in range(self.degree + 1)]
        s = np.empty((len(iy), nch), np.float32)
        for c in range(nch):
            plane = np.zeros(len(iy), np.float32)
            for j in range(self.degree + 1):
                px = np.zeros_like(x)
                for t, (i, jj) in enumerate(terms):
                    if jj == j:
                        px += self.coefficients[c, t] * xpow[i]
                plane += ypow[j] * px.astype(np.float32)[ix]
            s[:, c] = plane
        lv = np.asarray(self.level, np.float32)
        return lv / np.maximum(s, 1e-6)

    def describe(self) -> str:
        """A sentence saying what was done."""
        parts = []
        if any(self.dark_offset):
            parts.append(
                "dark offset "
                + ", ".join(f"{c}={v:.4g}" for c, v in zip(self.channels, self.dark_offset))
                + " subtracted"
            )
        if self.method == "polynomial":
            rms = (
                ", residual "
                + ", ".join(f"{c}={100 * v:.2g}%" for c, v in zip(self.channels, self.residual_rms))
                if self.residual_rms
                else ""
            )
            parts.append(
                f"illumination flattened by a degree-{self.degree} polynomial surface fitted "
                f"robustly to substrate pixels{rms}"
            )
        elif self.method == "reference":
            parts.append("illumination flattened by dividing by a blank reference image")
        else:
            parts.append("no illumination correction")
        return "; ".join(parts)

    def to_dict(self) -> dict:
        return {
            "method": self.method,
            "dark_offset": list(self.dark_offset),
            "degree": self.degree,
            "coefficients": None if self.coefficients is None else self.coefficients.tolist(),
            "level": list(self.level),
            "residual_rms": None if self.residual_rms is None else list(self.residual_rms),
            "description": self.describe(),
            "warnings": list(self.warnings),
        }


def _offsets(dark_offset, channels: tuple[str, ...]) -> tuple[float, ...]:
    if isinstance(dark_offset, dict):
        missing = [c for c in channels if c not in dark_offset]
        if missing:
            raise InputError(
                f"dark offset lacks channel(s) {', '.join(missing)}; accepted: one value or one "
                f"per channel ({', '.join(channels)})"
            )
        vals = tuple(float(dark_offset[c]) for c in channels)
    else:
        vals = (float(dark_offset),) * len(channels)
    for v in vals:
        if not (np.isfinite(v) and 0 <= v < 1):
            raise InputError(
                f"dark offset {v!r}; accepted: a number from 0 to below 1 (fraction of full scale)"
            )
    return vals


def _robust_polyfit(
    x: np.ndarray, y: np.ndarray, z: np.ndarray, degree: int, iterations: int = 4, l1: int = 6
) -> tuple[np.ndarray, float]:
    """Robust fit of a 2-D polynomial; returns coefficients and relative rms.

    Least absolute deviations first (iteratively reweighted; robust to a large share of flake
    pixels), then Tukey's biweight for efficiency on the substrate pixels.
    """
    terms = _terms(degree)
    a = np.stack([x**i * y**j for i, j in terms], axis=1)
    w = np.ones_like(z)
    coef = np.zeros(len(terms))
    scale = 1.0
    eps = 1e-6 * max(float(np.median(np.abs(z))), 1e-12)
    for _ in range(l1):
        aw = a * w[:, None]
        coef = np.linalg.lstsq(aw.T @ a, aw.T @ z, rcond=None)[0]
        w = 1.0 / np.maximum(np.abs(z - a @ coef), eps)
    if l1 == 0:
        coef = np.linalg.lstsq(a.T @ a, a.T @ z, rcond=None)[0]
    r = z - a @ coef
    scale = 1.4826 * np.median(np.abs(r))
    w = np.ones_like(z) if scale <= 0 else np.where(np.abs(r) < 4.685 * scale, 1.0, 0.0)
    for _ in range(iterations):
        aw = a * w[:, None]
        coef = np.linalg.lstsq(aw.T @ a, aw.T @ z, rcond=None)[0]
        r = z - a @ coef
        scale = 1.4826 * np.median(np.abs(r[w > 0])) if np.any(w > 0) else 0.0
        if scale <= 0:
            break
        u = r / (4.685 * scale)
        w = np.where(np.abs(u) < 1, (1 - u**2) ** 2, 0.0)
    level = float(np.mean(a @ coef))
    return coef, (scale / level if level > 0 else float("nan"))


def _coefficient_covariance(
    a: np.ndarray, vals: np.ndarray, coefs: np.ndarray, used: np.ndarray, grid_shape: tuple
) -> np.ndarray:
    """Covariance of the surface coefficients per channel, ``[channel, term, term]``.

    s^2 (A^T A)^-1 from the robust residual scale s of the fitted points, inflated for the
    correlation between points on the fit grid by (1 + 2 sum_k rho_x(k)) (1 + 2 sum_k rho_y(k)),
    the residuals' autocorrelation summed along x and y while it exceeds 0.05 (a separable
    effective-sample-size factor; common practice, no source).
    """
    au = a[used]
    g_inv = np.linalg.pinv(au.T @ au)
    nch = vals.shape[1]
    out = np.zeros((nch, a.shape[1], a.shape[1]))
    idx = np.flatnonzero(used)
    for c in range(nch):
        r = vals[used, c] - au @ coefs[c]
        sc = 1.4826 * float(np.median(np.abs(r - np.median(r)))) if r.size else 0.0
        grid = np.full(int(np.prod(grid_shape)), np.nan)
        grid[idx] = r
        grid = grid.reshape(grid_shape)
        kappa = 1.0
        for axis in (1, 0):
            factor = 1.0
            for lag in range(1, 9):
                if grid.shape[axis] <= lag:
                    break
                g0 = grid[:, :-lag] if axis == 1 else grid[:-lag, :]
                g1 = grid[:, lag:] if axis == 1 else grid[lag:, :]
                m = np.isfinite(g0) & np.isfinite(g1)
                if np.count_nonzero(m) <= 10:
                    break
                rho = float(np.corrcoef(g0[m], g1[m])[0, 1])
                if not np.isfinite(rho) or rho < 0.05:
                    break
                factor += 2.0 * rho
            kappa *= factor
        out[c] = sc**2 * kappa * g_inv
    return out


def _initial_substrate(
    img: np.ndarray, blocks: int = 16, bins: int = 40, tol: float = 0.04
) -> np.ndarray:
    """Plausible bare-substrate pixels for a first illumination fit.

    The image is cut into about ``blocks`` x ``blocks`` tiles; each tile's modal colour (per
    channel, log intensity) is found, and tiles are joined by flood fill from the tile nearest the
    image's dominant colour, stepping only between neighbours whose modes differ by less than
    ``tol`` (illumination changes slowly, a flake's edge is a step). Pixels near their accepted
    tile's mode are returned (bool ``[row, col]``).
    """
    from collections import deque

    rows, cols, nch = img.shape
    lg = np.log(np.maximum(img, 1e-6)).astype(np.float64)
    bsz = max(2, int(np.ceil(max(rows, cols) / blocks)))
    by = np.minimum(np.arange(rows) // bsz, (rows - 1) // bsz)
    bx = np.minimum(np.arange(cols) // bsz, (cols - 1) // bsz)
    nby, nbx = int(by[-1]) + 1, int(bx[-1]) + 1
    bidx = (by[:, None] * nbx + bx[None, :]).ravel()
    nb = nby * nbx
    modes = np.zeros((nb, nch))
    purity = np.ones(nb)
    near_all = np.ones(rows * cols, bool)
    for c in range(nch):
        v = lg[:, :, c].ravel()
        lo, hi = np.percentile(v, [0.5, 99.5])
        width = max((hi - lo) / bins, 1e-6)
        q = np.clip(((v - lo) / width).astype(np.int64), 0, bins - 1)
        hist = np.bincount(bidx * bins + q, minlength=nb * bins).reshape(nb, bins).astype(float)
        sm = hist.copy()
        sm[:, 1:] += hist[:, :-1]
        sm[:, :-1] += hist[:, 1:]
        mb = np.argmax(sm, axis=1)
        near = np.abs(q - mb[bidx]) <= 1
        cnt = np.bincount(bidx, weights=near, minlength=nb)
        tot = np.bincount(bidx, minlength=nb)
        modes[:, c] = np.bincount(bidx, weights=np.where(near, v, 0.0), minlength=nb) / np.maximum(
            cnt, 1
        )
        purity = np.minimum(purity, cnt / np.maximum(tot, 1))
        near_all &= np.abs(q - mb[bidx]) <= 2
    # Start from the tile whose mode is the most common among the tiles (dominant colour).
    d = np.abs(modes[:, None, :] - modes[None, :, :]).max(-1)
    support = ((d < tol) * (purity[None, :] > 0.3)).sum(1)
    start = int(np.argmax(support + purity))
    accepted = np.zeros(nb, bool)
    accepted[start] = True
    queue = deque([start])
    while queue:
        i = queue.popleft()
        iy, ix = divmod(i, nbx)
        for jy, jx in ((iy - 1, ix), (iy + 1, ix), (iy, ix - 1), (iy, ix + 1)):
            if 0 <= jy < nby and 0 <= jx < nbx:
                j = jy * nbx + jx
                if not accepted[j] and purity[j] > 0.3 and d[i, j] < tol:
                    accepted[j] = True
                    queue.append(j)
    return (accepted[bidx] & near_all).reshape(rows, cols)


def fit_background(
    image: Micrograph,
    *,
    dark_offset: float | dict[str, float] = 0.0,
    method: str = "polynomial",
    degree: int = 2,
    reference: Micrograph | None = None,
    reference_smooth_px: float = 2.0,
    substrate_mask: np.ndarray | None = None,
    work: np.ndarray | None = None,
    factor: int | None = None,
    exclude_work: np.ndarray | None = None,
    _refit: bool = False,
) -> Background:
    """Fit the background correction of ``image``.

    Args:
        image: the micrograph (linear intensity).
        dark_offset: the camera's dark offset, one value or one per channel (fraction of full
            scale), subtracted once; refused if the image already had one subtracted.
        method: ``"polynomial"`` (a smooth surface fitted to substrate pixels), ``"reference"``
            (divide by ``reference``, a blank image of the same chip) or ``"none"``.
        degree: polynomial degree (0 to 4).
        reference: the blank reference micrograph (method ``"reference"``).
        reference_smooth_px: Gaussian smoothing of the reference (standard deviation, px) so that
            its noise is not copied into the image.
        substrate_mask: optional bool ``[row, col]`` at full resolution of known bare substrate;
            by default substrate pixels are found as those close to a robust smooth surface.
        work, factor: a block-averaged working copy of ``image.intensity`` and its factor (see
            :mod:`flakebook.imaging._grid`), if the caller has one already.
        exclude_work: bool mask on the working grid of pixels known not to be bare substrate.

    Returns:
        A :class:`Background`; apply it with :func:`apply_background` or crop by crop with
        :meth:`Background.correct`.
    """
    if not _refit and any(c.startswith("dark offset") for c in image.corrections):
        raise InputError(
            f"{image.path or 'image'}: the dark offset was already subtracted; accepted: "
            "subtract it once (pass dark_offset=0 for an already corrected image)"
        )
    offs = _offsets(dark_offset, image.channels)
    rows, cols = image.shape
    nch = len(image.channels)
    if method == "none":
        small = image.working(_grid.choose_factor((rows, cols), 2.5e5))
        lv = tuple(float(np.median(small[:, :, c]) - offs[c]) for c in range(nch))
        return Background("none", offs, image.channels, (rows, cols), level=lv)
    if method == "reference":
        if reference is None:
            raise InputError("method 'reference' needs a blank reference image of the same chip")
        if reference.shape != image.shape or reference.channels != image.channels:
            raise InputError(
                f"reference image {reference.path or ''} is {reference.shape} {reference.channels}; "
                f"accepted: the same size and channels as the image {image.shape} {image.channels}"
            )
        ref = np.asarray(reference.intensity, np.float32) - np.asarray(offs, np.float32)
        if reference_smooth_px > 0:
            ref = cv2.GaussianBlur(ref, (0, 0), reference_smooth_px)
            if ref.ndim == 2:
                ref = ref[:, :, None]
        lv = np.array([np.median(ref[::4, ::4, c]) for c in range(nch)], np.float32)
        if np.any(lv <= 0) or np.mean(ref <= 0) > 0.01:
            raise InputError(
                f"reference image {reference.path or ''} is black after the dark offset; "
                "accepted: a blank, evenly lit image of the bare chip"
            )
        gain = (lv / np.maximum(ref, lv * 1e-3)).astype(np.float32)
        gain.setflags(write=False)
        return Background(
            "reference",
            offs,
            image.channels,
            (rows, cols),
            level=tuple(map(float, lv)),
            reference_gain=gain,
        )
    if method != "polynomial":
        raise InputError(f"background method {method!r}; accepted: polynomial, reference, none")
    if not (0 <= int(degree) <= 4):
        raise InputError(f"polynomial degree {degree!r}; accepted: 0 to 4")
    degree = int(degree)
    if work is None:
        factor = _grid.choose_factor((rows, cols), 4e5)
        work = image.working(factor)
    f = factor or 1
    wr, wc = work.shape[:2]
    sat = image.saturated_working(f)[:wr, :wc]
    # Subsample the working grid to at most ~60k points for the fit.
    step = max(1, int(np.ceil(np.sqrt(wr * wc / 1e4))))
    gy, gx = np.mgrid[0:wr:step, 0:wc:step]
    yy = _norm_coords(_grid.to_full(gy.ravel(), f), rows)
    xx = _norm_coords(_grid.to_full(gx.ravel(), f), cols)
    # Fit to a lightly smoothed copy: its lower noise separates substrate from faint flakes.
    smooth = cv2.GaussianBlur(np.ascontiguousarray(work, np.float32), (0, 0), 1.5)
    if smooth.ndim == 2:
        smooth = smooth[:, :, None]
    vals = smooth[::step, ::step].reshape(-1, nch).astype(np.float64) - np.asarray(offs)
    ok = ~sat[::step, ::step].ravel()
    if substrate_mask is not None:
        sm = _grid.block_max(~np.asarray(substrate_mask, bool), f)[:wr, :wc]
        ok &= ~sm[::step, ::step].ravel()
    if exclude_work is not None:
        ok &= ~np.asarray(exclude_work, bool)[:wr:step, :wc:step].ravel()
    elif substrate_mask is None:
        init = _initial_substrate(smooth[::step, ::step] - np.asarray(offs, np.float32))
        if np.count_nonzero(ok & init.ravel()) >= 3 * len(_terms(degree)):
            ok &= init.ravel()
    warnings: list[str] = []
    if np.count_nonzero(ok) < 3 * len(_terms(degree)):
        raise InputError(
            f"{image.path or 'image'}: too few unsaturated substrate pixels to fit the "
            "illumination; accepted: an image showing bare substrate, or method 'none'"
        )
    # A first robust fit to all pixels (flakes are outliers), then refits to the pixels that
    # agree with the surface in every channel.
    coefs = np.zeros((nch, len(_terms(degree))))
    rms = [0.0] * nch
    use = ok.copy()
    a = np.stack([xx**i * yy**j for i, j in _terms(degree)], axis=1)
    used_last = use
    for _pass in range(2):
        keep = np.ones_like(use)
        used_last = use
        for c in range(nch):
            # The second pass fits pixels already agreeing with the surface: no L1 start needed.
            coefs[c], rms[c] = _robust_polyfit(
                xx[use], yy[use], vals[use, c], degree, l1=0 if (_pass or _refit) else 6
            )
            model = a @ coefs[c]
            rel = vals[:, c] / np.maximum(model, 1e-9) - 1
            tol = max(4 * rms[c], 0.005) if np.isfinite(rms[c]) else 0.05
            keep &= np.abs(rel) < tol
        use = ok & keep
        if np.count_nonzero(use) < 3 * len(_terms(degree)):
            use = ok
            warnings.append("little bare substrate found: the illumination fit is uncertain")
            break
    cov = _coefficient_covariance(a, vals, coefs, used_last, gy.shape)
    bg = Background(
        "polynomial",
        offs,
        image.channels,
        (rows, cols),
        degree=degree,
        coefficients=coefs,
        level=(0.0,) * nch,
        residual_rms=tuple(float(r) for r in rms),
        warnings=tuple(warnings),
        coefficient_cov=cov,
    )
    # Normalise to the mean of the surface over the image (on a coarse grid).
    gy2 = np.arange(0, rows, max(1, rows // 64))
    gx2 = np.arange(0, cols, max(1, cols // 64))
    s = _coarse_surface(bg, gy2, gx2)
    level = tuple(float(np.mean(s[:, :, c])) for c in range(nch))
    if any(v <= 0 for v in level):
        raise InputError(
            f"{image.path or 'image'}: the substrate is black after the dark offset; accepted: "
            "an exposed image with a dark offset below the substrate level"
        )
    return replace(bg, level=level)


def _coarse_surface(bg: Background, gy: np.ndarray, gx: np.ndarray) -> np.ndarray:
    y = _norm_coords(gy.astype(np.float64), bg.shape[0])
    x = _norm_coords(gx.astype(np.float64), bg.shape[1])
    yy, xx = np.meshgrid(y, x, indexing="ij")
    a = np.stack([xx**i * yy**j for i, j in _terms(bg.degree)], axis=-1)
    return a @ bg.coefficients.T


def apply_background(image: Micrograph, background: Background) -> Micrograph:
    """A new :class:`Micrograph` with the dark offset subtracted and the illumination flattened.

    The result records what was done in ``corrections``; the input is not changed.
    """
    if background.shape != image.shape or background.channels != image.channels:
        raise InputError("the background was fitted to an image of another size or channels")
    if any(background.dark_offset) and any(c.startswith("dark offset") for c in image.corrections):
        raise InputError(
            f"{image.path or 'image'}: the dark offset was already subtracted; accepted: "
            "subtract it once"
        )
    out = background.correct(image)
    done = list(image.corrections)
    if any(background.dark_offset):
        done.append("dark offset " + ",".join(f"{v:.6g}" for v in background.dark_offset))
    if background.method != "none":
        done.append(f"flat field ({background.method})")
    return with_intensity(image, out, corrections=tuple(done))
