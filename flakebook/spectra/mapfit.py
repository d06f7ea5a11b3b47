"""Fitting every spectrum of a Raman map at once: batched Levenberg-Marquardt in numpy.

The model is that of :func:`flakebook.spectra.peaks.fit_peaks` with Lorentzian lines on a linear
baseline, in the same fit regions (:func:`~flakebook.spectra.peaks.fit_regions`) and within the
same bounds, so that each spectrum's least-squares minimum is the one lmfit finds; but all
spectra are iterated together: analytic Jacobians for a block of spectra, the normal equations
J^T J solved for every spectrum in one batched ``numpy.linalg.solve``, a Marquardt damping
factor per spectrum (raised on a rejected step, lowered on an accepted one), and spectra leave the
iteration once converged. The per-spectrum covariance is (J^T J)^-1 scaled by the residual
variance (as lmfit's ``scale_covar``), which also gives the covariance of two lines' centres for
the error of their separation. A line with signal-to-noise below ``snr_threshold`` is not found
in that spectrum and the others are refitted without it, as in ``fit_peaks``.

Before the fit, a broad background can be removed from every spectrum with the vectorised
modified polynomial (:func:`~flakebook.spectra.processing.modpoly_batch`).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from flakebook.errors import InputError, check_cancel
from flakebook.spectra.peaks import PeakSpec, fit_regions

__all__ = ["MapFit", "fit_map"]


@dataclass(frozen=True)
class MapFit:
    """Per-spectrum results, arrays of shape ``map_shape + (len(modes),)`` (NaN where not found).

    ``center_cov`` has shape ``map_shape + (m, m)``: the covariance of the line centres (zero
    between lines of different fit regions). ``noise_sd`` is per spectrum and region, shape
    ``map_shape + (m,)`` (the residual s.d. of the region holding each line).
    """

    modes: tuple[str, ...]
    center: np.ndarray
    center_err: np.ndarray
    fwhm: np.ndarray
    fwhm_err: np.ndarray
    height: np.ndarray
    height_err: np.ndarray
    area: np.ndarray
    snr: np.ndarray
    found: np.ndarray
    noise_sd: np.ndarray
    center_cov: np.ndarray
    converged: np.ndarray
    baseline: str

    def _index(self, mode: str) -> int:
        try:
            return self.modes.index(mode)
        except ValueError:
            raise InputError(
                f"mode {mode!r} was not fitted; accepted: {', '.join(self.modes)}"
            ) from None

    def position(self, mode: str) -> tuple[np.ndarray, np.ndarray]:
        """Map of ``mode``'s centre and its standard error."""
        i = self._index(mode)
        return self.center[..., i], self.center_err[..., i]

    def separation(self, mode_a: str, mode_b: str) -> tuple[np.ndarray, np.ndarray]:
        """Map of centre(b) - centre(a) and its standard error (with their covariance)."""
        i, j = self._index(mode_a), self._index(mode_b)
        sep = self.center[..., j] - self.center[..., i]
        cov = self.center_cov
        var = cov[..., i, i] + cov[..., j, j] - 2 * cov[..., i, j]
        return sep, np.sqrt(np.maximum(var, 0.0))


def _lorentz(x, theta, n_lines):
    """Model and Jacobian: theta (N, 3 L + 2) = [h, c, w]*L + [slope, intercept]."""
    n = theta.shape[0]
    f = theta[:, -2, None] * x[None, :] + theta[:, -1, None]
    jac = np.empty((n, x.size, theta.shape[1]))
    jac[:, :, -2] = x[None, :]
    jac[:, :, -1] = 1.0
    for k in range(n_lines):
        h, c, w = theta[:, 3 * k, None], theta[:, 3 * k + 1, None], theta[:, 3 * k + 2, None]
        u = 2 * (x[None, :] - c) / w
        d = 1.0 / (1.0 + u * u)
        f = f + h * d
        hud2 = h * u * d * d
        jac[:, :, 3 * k] = d
        jac[:, :, 3 * k + 1] = 4 * hud2 / w
        jac[:, :, 3 * k + 2] = 2 * hud2 * u / w
    return f, jac


def _start(x, y, specs):
    """Start values as in peaks._fit_group: baseline through the edges, lines at the maxima."""
    n = x.size
    edge = max(2, n // 10)
    ya, yb = np.median(y[:, :edge], axis=1), np.median(y[:, -edge:], axis=1)
    xa, xb = np.median(x[:edge]), np.median(x[-edge:])
    slope = (yb - ya) / (xb - xa)
    b0 = ya[:, None] + slope[:, None] * (x[None, :] - xa)
    resid = y - b0
    theta = np.empty((y.shape[0], 3 * len(specs) + 2))
    for k, s in enumerate(specs):
        sel = np.flatnonzero(np.abs(x - s.center_cm1) <= s.window_cm1)
        if sel.size:
            j = sel[np.argmax(resid[:, sel], axis=1)]
            c0 = x[j]
            h0 = np.maximum(resid[np.arange(y.shape[0]), j], 1e-12)
        else:
            c0 = np.full(y.shape[0], s.center_cm1)
            h0 = np.maximum(resid.max(axis=1), 1e-12)
        theta[:, 3 * k] = h0
        theta[:, 3 * k + 1] = c0
        theta[:, 3 * k + 2] = s.fwhm_cm1
    theta[:, -2] = slope
    theta[:, -1] = ya - slope * xa
    return theta


def _bounds(x, specs):
    p = 3 * len(specs) + 2
    lo, hi = np.full(p, -np.inf), np.full(p, np.inf)
    step = float(np.median(np.diff(x)))
    for k, s in enumerate(specs):
        fw_min = min(max(s.fwhm_cm1 / 4, 2 * step), s.fwhm_cm1)
        lo[3 * k : 3 * k + 3] = (0.0, s.center_cm1 - s.window_cm1, fw_min)
        hi[3 * k : 3 * k + 3] = (
            np.inf,
            s.center_cm1 + s.window_cm1,
            s.fwhm_max_cm1 or 10 * s.fwhm_cm1,
        )
    return lo, hi


def _lm(x, y, specs, max_iter=200, ftol=1e-12):
    """Batched Levenberg-Marquardt; returns theta, covariance, residual variance, converged."""
    n_lines = len(specs)
    theta = _start(x, y, specs)
    lo, hi = _bounds(x, specs)
    f, jac = _lorentz(x, theta, n_lines)
    r = y - f
    cost = np.einsum("nk,nk->n", r, r)
    lam = np.full(y.shape[0], 1e-3)
    done = np.zeros(y.shape[0], bool)
    p = theta.shape[1]
    eye = np.eye(p, dtype=bool)
    for _ in range(max_iter):
        act = np.flatnonzero(~done)
        if act.size == 0:
            break
        ja, ra = jac[act], r[act]
        jtj = np.einsum("nkp,nkq->npq", ja, ja)
        g = np.einsum("nkp,nk->np", ja, ra)
        a = jtj.copy()
        diag = np.where(eye, jtj, 0.0).sum(axis=2)
        a[:, eye] += lam[act, None] * np.maximum(diag, 1e-30)
        try:
            delta = np.linalg.solve(a, g[..., None])[..., 0]
        except np.linalg.LinAlgError:
            delta = np.einsum("npq,nq->np", np.linalg.pinv(a), g)
        t_new = np.clip(theta[act] + delta, lo, hi)
        f_new, j_new = _lorentz(x, t_new, n_lines)
        r_new = y[act] - f_new
        c_new = np.einsum("nk,nk->n", r_new, r_new)
        better = c_new < cost[act]
        small = np.abs(cost[act] - c_new) <= ftol * np.maximum(cost[act], 1e-300)
        small |= np.all(np.abs(t_new - theta[act]) <= 1e-10 * (np.abs(theta[act]) + 1e-10), axis=1)
        ok = act[better]
        theta[ok], f[ok], jac[ok], r[ok], cost[ok] = (
            t_new[better],
            f_new[better],
            j_new[better],
            r_new[better],
            c_new[better],
        )
        lam[act] = np.where(better, lam[act] / 3, lam[act] * 4)
        done[act[small | (lam[act] > 1e12)]] = True
    dof = max(x.size - p, 1)
    var = cost / dof
    jtj = np.einsum("nkp,nkq->npq", jac, jac)
    try:
        cov = np.linalg.inv(jtj) * var[:, None, None]
    except np.linalg.LinAlgError:
        cov = np.linalg.pinv(jtj) * var[:, None, None]
    return theta, cov, var, done


def fit_map(
    x,
    spectra,
    specs,
    *,
    baseline: str = "modpoly",
    poly_order: int = 3,
    snr_threshold: float = 3.0,
    margin_fwhm: float = 3.0,
    block: int = 1000,
    progress=None,
    cancel=None,
) -> MapFit:
    """Fit Lorentzian lines ``specs`` (single PeakSpec lines) in every spectrum of a map.

    ``spectra`` has shape ``map_shape + (x.size,)`` on the ascending axis ``x``. ``baseline``:
    ``modpoly`` (default; the vectorised modified polynomial of order ``poly_order`` over the
    whole spectrum, removed first) or ``none``; in both cases a linear baseline is fitted with
    the lines in each region. ``block`` spectra are iterated together. ``progress(fraction,
    message)`` and ``cancel`` (a threading.Event) as everywhere in the core.
    """
    from flakebook.spectra.processing import modpoly_batch

    x = np.asarray(x, dtype=float)
    data = np.asarray(spectra, dtype=float)
    specs = list(specs)
    if data.shape[-1] != x.size or x.ndim != 1:
        raise InputError(
            f"fit_map: spectra of {data.shape[-1]} points on an axis of {x.size}; accepted: "
            "spectra[..., n] on x[n]"
        )
    if np.any(np.diff(x) <= 0):
        raise InputError("fit_map: x must be strictly ascending; accepted: a checked map")
    if not specs or any(not isinstance(s, PeakSpec) or s.is_doublet for s in specs):
        raise InputError(
            "fit_map: accepted: a list of single-line PeakSpec (doublets: fit with fit_peaks)"
        )
    if any((s.model or "lorentzian") != "lorentzian" for s in specs):
        raise InputError("fit_map: fits Lorentzian lines only; accepted: model None or lorentzian")
    if baseline not in ("modpoly", "none"):
        raise InputError(f"fit_map: baseline {baseline!r}; accepted: modpoly, none")
    map_shape = data.shape[:-1]
    flat = data.reshape(-1, x.size)
    if not np.all(np.isfinite(flat)):
        raise InputError("fit_map: the map holds NaN or infinite values; accepted: finite counts")
    n_spec, m = flat.shape[0], len(specs)
    if baseline == "modpoly":
        flat = flat - modpoly_batch(x, flat, poly_order=poly_order)
    out = {k: np.full((n_spec, m), np.nan) for k in ("c", "ce", "w", "we", "h", "he", "a", "snr")}
    noise = np.full((n_spec, m), np.nan)
    ccov = np.zeros((n_spec, m, m))
    found = np.zeros((n_spec, m), bool)
    conv = np.ones(n_spec, bool)
    groups = fit_regions(specs, margin_fwhm)
    total_work, work_done = len(groups) * n_spec, 0
    for (lo, hi), idx in groups:
        sel = (x >= lo) & (x <= hi)
        xs, ys = x[sel], flat[:, sel]
        # spectra still to fit, keyed by the lines active in them
        pending = {tuple(idx): np.arange(n_spec)}
        while pending:
            lines, rows = pending.popitem()
            sub = [specs[i] for i in lines]
            if xs.size < 3 * len(sub) + 5:
                raise InputError(
                    f"fit_map: only {xs.size} points in {lo:g}-{hi:g}; accepted: spectra covering "
                    "the lines with enough points"
                )
            for start in range(0, rows.size, block):
                check_cancel(cancel)
                rr = rows[start : start + block]
                theta, cov, var, done = _lm(xs, ys[rr], sub)
                sd = np.sqrt(var)
                snr = theta[:, 0 : 3 * len(sub) : 3] / sd[:, None]
                weak = snr < snr_threshold
                strong = ~weak.any(axis=1)
                keep = rr[strong]
                for k, i in enumerate(lines):
                    t = theta[strong]
                    out["h"][keep, i] = t[:, 3 * k]
                    out["c"][keep, i] = t[:, 3 * k + 1]
                    out["w"][keep, i] = t[:, 3 * k + 2]
                    d = np.sqrt(np.abs(np.diagonal(cov[strong], axis1=1, axis2=2)))
                    out["he"][keep, i], out["ce"][keep, i], out["we"][keep, i] = (
                        d[:, 3 * k],
                        d[:, 3 * k + 1],
                        d[:, 3 * k + 2],
                    )
                    out["a"][keep, i] = np.pi / 2 * t[:, 3 * k] * t[:, 3 * k + 2]
                    noise[keep, i] = sd[strong]
                    found[keep, i] = True
                    for q, j in enumerate(lines):
                        ccov[keep, i, j] = cov[strong][:, 3 * k + 1, 3 * q + 1]
                for k, i in enumerate(lines):
                    out["snr"][rr, i] = snr[:, k]
                    noise[rr[~strong], i] = sd[~strong]
                conv[rr[strong]] &= done[strong]
                for row in np.flatnonzero(~strong):
                    rest = tuple(i for k, i in enumerate(lines) if not weak[row, k])
                    if rest:
                        prev = pending.get(rest, np.empty(0, int))
                        pending[rest] = np.concatenate([prev, rr[row : row + 1]])
                work_done += rr.size if len(lines) == len(idx) else 0
                if progress is not None:
                    progress(min(work_done / total_work, 1.0), "fitting map spectra")
    shape = map_shape + (m,)
    return MapFit(
        tuple(s.mode for s in specs),
        out["c"].reshape(shape),
        out["ce"].reshape(shape),
        out["w"].reshape(shape),
        out["we"].reshape(shape),
        out["h"].reshape(shape),
        out["he"].reshape(shape),
        out["a"].reshape(shape),
        out["snr"].reshape(shape),
        found.reshape(shape),
        noise.reshape(shape),
        ccov.reshape(map_shape + (m, m)),
        conv.reshape(map_shape),
        baseline,
    )
