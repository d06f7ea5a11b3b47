"""Peak fits with lmfit: Lorentzian, Gaussian, Voigt and pseudo-Voigt lines on a baseline.

The caller says which lines to look for with a list of :class:`PeakSpec` (mode name, expected
centre, how far the centre may move, expected width; a minimum separation makes it a doublet,
two components such as the Davydov-split A1g of MoSe2 with N >= 3). Lines whose fit regions
(centre +/- window, widened by ``margin_fwhm`` widths) overlap are fitted together on one
baseline; the others separately.

A line whose signal-to-noise (height / noise standard deviation) is below ``snr_threshold``
(default 3) is reported ``found=False`` and the remaining lines are refitted without it: absence
is evidence too (the B2g mode of a monolayer), and a line is not fitted into the noise. The
noise is the caller's ``noise_sd`` if given, else the s.d. of the data in a quiet
``noise_region`` if given, else the s.d. of the fit residual.

Uncertainties are lmfit's (the covariance of the least-squares fit); when the noise is not
given by the caller it is estimated from the data and the covariance is scaled by the reduced
chi-square (lmfit's ``scale_covar``). Noise that grows with the signal (the shot noise of
detector counts) is found from the residuals and the fit repeated with weights, so a strong
line's centre error is not set by the quieter baseline. Centres, widths and areas are in the units of the x axis
given (cm^-1 for Raman shift).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from flakebook.errors import InputError

__all__ = [
    "PEAK_MODELS",
    "BASELINES",
    "PeakSpec",
    "PeakResult",
    "FitRegion",
    "PeakFit",
    "fit_regions",
    "fit_peaks",
    "shot_noise_variance",
]

PEAK_MODELS = ("lorentzian", "gaussian", "voigt", "pseudo-voigt")
BASELINES = ("linear", "constant", "quadratic", "none")
# area / (height * fwhm) of each line shape (Voigt and pseudo-Voigt: a rough start value)
_AREA_FACTOR = {"lorentzian": math.pi / 2, "gaussian": 1.0644670, "voigt": 1.3, "pseudo-voigt": 1.3}
# fwhm / sigma of lmfit's parametrisation (Voigt with gamma = sigma)
_FWHM_PER_SIGMA = {"lorentzian": 2.0, "gaussian": 2.3548200, "voigt": 3.6013, "pseudo-voigt": 2.0}


@dataclass(frozen=True)
class PeakSpec:
    """A line to look for, all in x-axis units (cm^-1 for Raman).

    ``center_cm1`` the expected centre; the fitted centre stays within +/- ``window_cm1`` of it.
    ``fwhm_cm1`` the expected full width at half maximum (start value; the fit keeps it between
    ``fwhm_cm1 / 4`` (or two sampling steps) and ``fwhm_cm1 * 10``, or ``fwhm_max_cm1`` if given). ``model`` overrides
    the fit's line shape for this line. ``min_separation_cm1`` makes it a doublet of two
    components at least that far apart (and at most ``max_separation_cm1`` if given).
    """

    mode: str
    center_cm1: float
    window_cm1: float
    fwhm_cm1: float
    model: str | None = None
    min_separation_cm1: float | None = None
    max_separation_cm1: float | None = None
    fwhm_max_cm1: float | None = None

    def __post_init__(self) -> None:
        for name in ("center_cm1", "window_cm1", "fwhm_cm1"):
            v = getattr(self, name)
            if not (isinstance(v, int | float) and math.isfinite(v)):
                raise InputError(f"peak {self.mode!r}: {name} = {v!r}; accepted: a finite number")
        if self.window_cm1 <= 0 or self.fwhm_cm1 <= 0:
            raise InputError(
                f"peak {self.mode!r}: window_cm1 = {self.window_cm1:g}, fwhm_cm1 = "
                f"{self.fwhm_cm1:g}; accepted: both positive"
            )
        if self.model is not None and self.model not in PEAK_MODELS:
            raise InputError(
                f"peak {self.mode!r}: model {self.model!r} is not known; accepted: "
                f"{', '.join(PEAK_MODELS)}"
            )
        if self.min_separation_cm1 is not None and self.min_separation_cm1 <= 0:
            raise InputError(
                f"peak {self.mode!r}: min_separation_cm1 = {self.min_separation_cm1:g}; "
                "accepted: a positive separation (or None for a single line)"
            )

    @property
    def is_doublet(self) -> bool:
        """True when the line is fitted as two components."""
        return self.min_separation_cm1 is not None

    def extent(self, margin_fwhm: float) -> tuple[float, float]:
        """The x range this line's fit uses."""
        half = self.window_cm1 + margin_fwhm * self.fwhm_cm1
        if self.is_doublet:
            half += (self.max_separation_cm1 or 2 * self.min_separation_cm1) / 2
        return self.center_cm1 - half, self.center_cm1 + half


@dataclass(frozen=True)
class PeakResult:
    """One fitted line (or one component of a doublet), in x-axis units.

    ``component`` is 0 for a single line, 1 (lower centre) and 2 (higher) for a doublet.
    ``found`` False means its signal-to-noise ``snr`` fell below the threshold; its centre,
    width, height and area are then NaN, and ``height_limit`` (threshold x noise) is the
    height it would have needed. ``area`` is the integral of the line shape.
    """

    mode: str
    component: int
    found: bool
    center: float
    center_err: float
    fwhm: float
    fwhm_err: float
    height: float
    height_err: float
    area: float
    area_err: float
    snr: float
    noise_sd: float
    height_limit: float
    model: str
    note: str = ""


@dataclass(frozen=True)
class FitRegion:
    """One jointly fitted region: data, model curve, its baseline part, and fit statistics."""

    x: np.ndarray
    y: np.ndarray
    best_fit: np.ndarray
    baseline: np.ndarray
    modes: tuple[str, ...]
    noise_sd: float
    reduced_chi2: float
    success: bool
    message: str


@dataclass(frozen=True)
class PeakFit:
    """All lines of one spectrum: ``peaks`` in the order of the specs (doublets as two)."""

    peaks: tuple[PeakResult, ...]
    regions: tuple[FitRegion, ...]
    model: str
    baseline: str
    snr_threshold: float
    noise_source: str
    warnings: tuple[str, ...] = field(default=())

    def peak(self, mode: str, component: int | None = None) -> PeakResult:
        """The result for ``mode`` (its first component unless ``component`` is given)."""
        for p in self.peaks:
            if p.mode == mode and (component is None or p.component == component):
                return p
        raise KeyError(mode)


def fit_regions(specs, margin_fwhm: float = 3.0) -> list[tuple[tuple[float, float], list[int]]]:
    """Group specs whose fit ranges overlap: a list of ((lo, hi), [spec indices])."""
    order = sorted(range(len(specs)), key=lambda i: specs[i].extent(margin_fwhm)[0])
    groups: list[tuple[list[float], list[int]]] = []
    for i in order:
        lo, hi = specs[i].extent(margin_fwhm)
        if groups and lo <= groups[-1][0][1]:
            groups[-1][0][1] = max(groups[-1][0][1], hi)
            groups[-1][1].append(i)
        else:
            groups.append(([lo, hi], [i]))
    return [((g[0][0], g[0][1]), sorted(g[1])) for g in groups]


def _line_model(kind: str, prefix: str):
    import lmfit.models as lm

    cls = {
        "lorentzian": lm.LorentzianModel,
        "gaussian": lm.GaussianModel,
        "voigt": lm.VoigtModel,
        "pseudo-voigt": lm.PseudoVoigtModel,
    }[kind]
    return cls(prefix=prefix)


def _baseline_model(kind: str):
    import lmfit.models as lm

    return {
        "linear": lambda: lm.LinearModel(prefix="bl_"),
        "constant": lambda: lm.ConstantModel(prefix="bl_"),
        "quadratic": lambda: lm.QuadraticModel(prefix="bl_"),
    }[kind]()


def _err(param) -> float:
    return float(param.stderr) if param.stderr is not None else float("nan")


def _quiet_noise(x, y, region) -> float:
    lo, hi = region
    sel = (x >= lo) & (x <= hi)
    if sel.sum() < 5:
        raise InputError(
            f"noise_region {lo:g}-{hi:g}: only {int(sel.sum())} points; accepted: a quiet range "
            "of at least 5 points inside the spectrum"
        )
    coef = np.polyfit(x[sel], y[sel], 1)
    return float(np.std(y[sel] - np.polyval(coef, x[sel]), ddof=2))


def _fit_group(x, y, items, model, baseline, noise_sd, variance=None):
    """Fit items [(index, spec, doublet?)] jointly; return (lmfit result, [(index, comp, prefix, kind)])."""
    from lmfit import Parameters

    n = x.size
    edge = max(2, n // 10)
    if baseline == "none":
        b0 = np.zeros(n)
    else:
        ya, yb = np.median(y[:edge]), np.median(y[-edge:])
        xa, xb = np.median(x[:edge]), np.median(x[-edge:])
        slope = (yb - ya) / (xb - xa) if xb != xa else 0.0
        b0 = ya + slope * (x - xa)
    params = Parameters()
    total = None
    if baseline != "none":
        total = _baseline_model(baseline)
        params.update(total.make_params())
        if baseline == "constant":
            params["bl_c"].set(value=float(np.median(b0)))
        elif baseline == "linear":
            params["bl_slope"].set(value=float(slope))
            params["bl_intercept"].set(value=float(ya - slope * xa))
        else:
            params["bl_a"].set(value=0.0)
            params["bl_b"].set(value=float(slope))
            params["bl_c"].set(value=float(ya - slope * xa))
    parts = []
    resid = y - b0
    for k, (index, spec, doublet) in enumerate(items):
        kind = spec.model or model
        sel = np.abs(x - spec.center_cm1) <= spec.window_cm1
        if sel.any():
            j = np.flatnonzero(sel)[np.argmax(resid[sel])]
            c0, h0 = float(x[j]), max(float(resid[j]), 1e-12)
        else:
            c0, h0 = spec.center_cm1, max(float(np.max(resid)), 1e-12)
        fw = spec.fwhm_cm1
        fw_max = spec.fwhm_max_cm1 or 10 * fw
        fw_min = min(max(fw / 4, 2 * float(np.median(np.diff(x)))), fw)
        comps = [1, 2] if doublet else [0]
        if doublet:
            sep_max = spec.max_separation_cm1
            sep0 = (
                spec.min_separation_cm1 * 1.5
                if sep_max is None
                else 0.5 * (spec.min_separation_cm1 + sep_max)
            )
        for comp in comps:
            pre = f"p{k}_{comp}_"
            m = _line_model(kind, pre)
            total = m if total is None else total + m
            sig0 = fw / _FWHM_PER_SIGMA[kind]
            hh = h0 / 2 if doublet else h0
            cc = c0 if not doublet else c0 + (-0.5 if comp == 1 else 0.5) * sep0
            params.update(m.make_params())
            params[f"{pre}amplitude"].set(value=hh * fw * _AREA_FACTOR[kind], min=0.0)
            params[f"{pre}sigma"].set(
                value=sig0, min=fw_min / _FWHM_PER_SIGMA[kind], max=fw_max / _FWHM_PER_SIGMA[kind]
            )
            if kind == "pseudo-voigt":
                params[f"{pre}fraction"].set(value=0.5, min=0.0, max=1.0)
            lo, hi = spec.center_cm1 - spec.window_cm1, spec.center_cm1 + spec.window_cm1
            if comp == 2:
                params.add(
                    f"{pre}sep",
                    value=sep0,
                    min=spec.min_separation_cm1,
                    max=spec.max_separation_cm1 if spec.max_separation_cm1 else np.inf,
                )
                params[f"{pre}center"].set(expr=f"p{k}_1_center + {pre}sep")
            else:
                params[f"{pre}center"].set(value=min(max(cc, lo), hi), min=lo, max=hi)
            parts.append((index, comp, pre, kind))
    if noise_sd is not None:
        result = total.fit(y, params, x=x, weights=np.full(n, 1.0 / noise_sd), scale_covar=False)
    elif variance is not None:
        result = total.fit(y, params, x=x, weights=1.0 / np.sqrt(variance))
    else:
        result = total.fit(y, params, x=x)
        for _ in range(2):  # noise that grows with the signal: refit weighted (twice)
            sd = _noise_model(y - result.best_fit, result.best_fit)
            if sd is None:
                break
            result = total.fit(y, result.params, x=x, weights=1.0 / sd)
    return result, parts


def shot_noise_variance(counts) -> np.ndarray | None:
    """The shot-noise variance of raw detector counts (the counts, at least 1), or None when
    the data are not counts (see :func:`flakebook.spectra.processing.is_counts`)."""
    from flakebook.spectra.processing import is_counts

    c = np.asarray(counts, dtype=float)
    return np.maximum(c, 1.0) if is_counts(c) else None


def _noise_model(resid: np.ndarray, model: np.ndarray) -> np.ndarray | None:
    """The noise s.d. per point when it grows with the signal, else None.

    Detector counts carry shot noise, variance ~ a + b * signal; fitted unweighted, the noise
    of the baseline sets the covariance and a strong line's centre error comes out several
    times too small. The variance model is fitted to the squared residuals of the unweighted
    fit (least squares on (1, signal)); None when b is not significant (three standard errors)
    or the variance less than doubles over the signal's range, so homoscedastic noise keeps the
    plain fit (iteratively reweighted least
    squares with a variance function: common practice, no source)."""
    n = resid.size
    if n < 20:
        return None
    m = model - float(np.min(model))
    r2 = resid**2
    design = np.column_stack([np.ones(n), m])
    coef, *_ = np.linalg.lstsq(design, r2, rcond=None)
    a, b = (float(c) for c in coef)
    if not (b > 0 and np.isfinite(b)):
        return None
    dof = max(n - 2, 1)
    s2 = float(np.sum((r2 - design @ coef) ** 2)) / dof
    cov = s2 * np.linalg.pinv(design.T @ design)
    if b < 3.0 * math.sqrt(max(cov[1, 1], 0.0)) or b * float(np.max(m)) < max(a, 0.0):
        return None  # not significant, or the variance less than doubles over the signal
    floor = max(a, 1e-3 * float(np.mean(r2)), np.finfo(float).tiny)
    return np.sqrt(floor + b * m)


def fit_peaks(
    x,
    y,
    specs,
    *,
    model: str = "lorentzian",
    baseline="linear",
    snr_threshold: float = 3.0,
    noise_sd: float | None = None,
    noise_region: tuple[float, float] | None = None,
    margin_fwhm: float = 3.0,
    variance=None,
) -> PeakFit:
    """Fit the lines ``specs`` (PeakSpec list) in spectrum ``y`` on axis ``x`` (ascending).

    ``model``: lorentzian, gaussian, voigt (lmfit's, gamma = sigma) or pseudo-voigt.
    ``baseline``: fitted with the lines in each region, ``linear`` (default), ``constant``,
    ``quadratic`` or ``none``; or an array (for example a pybaselines result) that is
    subtracted first, leaving no baseline terms in the fit. ``snr_threshold``: lines below it
    are reported not found. ``noise_sd``: the known noise standard deviation (then the
    covariance is not rescaled); ``noise_region``: a quiet (lo, hi) range to measure it in.
    ``variance``: the relative noise variance of each point where it is known in form (for raw
    detector counts the counts themselves, :func:`shot_noise_variance`): the fit is weighted by
    it and its covariance scaled by the reduced chi-square.
    """
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    if model not in PEAK_MODELS:
        raise InputError(f"peak model {model!r} is not known; accepted: {', '.join(PEAK_MODELS)}")
    if x.ndim != 1 or y.shape != x.shape or x.size < 5:
        raise InputError(
            f"fit_peaks: x {x.shape}, y {y.shape}; accepted: one spectrum, equal lengths, >= 5 points"
        )
    if np.any(np.diff(x) <= 0):
        raise InputError("fit_peaks: x must be strictly ascending; accepted: a checked spectrum")
    specs = list(specs)
    if not specs:
        raise InputError("fit_peaks: no peaks given; accepted: a list of PeakSpec")
    if isinstance(baseline, str):
        if baseline not in BASELINES:
            raise InputError(
                f"baseline {baseline!r} is not known; accepted: {', '.join(BASELINES)} or an array"
            )
        base_kind, work = baseline, y
    else:
        arr = np.asarray(baseline, dtype=float)
        if arr.shape != y.shape:
            raise InputError(
                f"baseline array of shape {arr.shape} for a spectrum of {y.size} points; "
                "accepted: one baseline value per point"
            )
        base_kind, work = "none", y - arr
    if noise_sd is not None and not noise_sd > 0:
        raise InputError(f"noise_sd = {noise_sd!r}; accepted: a positive number or None")
    if variance is not None:
        variance = np.asarray(variance, dtype=float)
        if variance.shape != y.shape or not np.all(np.isfinite(variance) & (variance > 0)):
            raise InputError(
                f"variance of shape {variance.shape} with values <= 0 or not finite; accepted: "
                "one positive variance per point"
            )
    quiet = _quiet_noise(x, work, noise_region) if noise_region is not None else None
    noise_source = "given" if noise_sd is not None else "quiet region" if quiet else "residual"
    n_base = {"linear": 2, "constant": 1, "quadratic": 3, "none": 0}[base_kind]

    results: dict[int, list[PeakResult]] = {}
    regions: list[FitRegion] = []
    warnings: list[str] = []
    nan = float("nan")
    for (lo, hi), idx in fit_regions(specs, margin_fwhm):
        sel = (x >= lo) & (x <= hi)
        xs, ys = x[sel], work[sel]
        state = {i: ("double" if specs[i].is_doublet else "single") for i in idx}
        notes: dict[int, str] = {}
        snrs: dict[tuple[int, int], tuple[float, float]] = {}
        res, parts = None, []
        while True:
            active = [i for i in idx if state[i] != "absent"]
            if not active:
                res, parts = None, []
                break
            items = [(i, specs[i], state[i] == "double") for i in active]
            n_par = n_base + sum(4 if d else 3 for _, _, d in items)
            if xs.size < n_par + 3:
                raise InputError(
                    f"peaks {', '.join(specs[i].mode for i in active)}: only {xs.size} points in "
                    f"{lo:g}-{hi:g}; accepted: spectra covering the peaks with at least "
                    f"{n_par + 3} points"
                )
            var_s = None if variance is None else variance[sel]
            res, parts = _fit_group(xs, ys, items, model, base_kind, noise_sd, var_s)
            resid_sd = float(np.sqrt(np.sum((ys - res.best_fit) ** 2) / max(res.nfree, 1)))
            noise = noise_sd if noise_sd is not None else quiet if quiet else resid_sd
            weak = set()
            for i, comp, pre, _kind in parts:
                h = float(res.params[f"{pre}height"].value)
                snrs[(i, comp)] = (h / noise, noise)
                if h / noise < snr_threshold:
                    weak.add(i)
            if not weak:
                break
            for i in weak:
                if state[i] == "double":
                    state[i] = "single"
                    notes[i] = "fitted as one line: a doublet component was below the threshold"
                else:
                    state[i] = "absent"
        fitted = {(i, comp): (pre, kind) for i, comp, pre, kind in parts}
        for i in idx:
            spec = specs[i]
            out = []
            for comp in [1, 2] if spec.is_doublet else [0]:
                key = (i, 0) if state[i] == "single" and comp == 1 else (i, comp)
                if key in fitted:
                    pre, kind = fitted[key]
                    p = res.params
                    snr, noise = snrs[key]
                    vals = [
                        v
                        for name in ("center", "fwhm", "height", "amplitude")
                        for v in (float(p[pre + name].value), _err(p[pre + name]))
                    ]
                    out.append(
                        PeakResult(
                            spec.mode, comp, True, *vals, snr, noise, snr_threshold * noise,
                            kind, notes.get(i, ""),
                        )
                    )  # fmt: skip
                else:
                    snr, noise = snrs.get(key, snrs.get((i, 0), (nan, nan)))
                    why = notes.get(i) or f"signal-to-noise below {snr_threshold:g}"
                    out.append(
                        PeakResult(
                            spec.mode, comp, False, *([nan] * 8), snr, noise,
                            snr_threshold * noise, spec.model or model, "not found: " + why,
                        )
                    )  # fmt: skip
            results[i] = out
        if res is not None:
            base = res.eval_components(x=xs).get("bl_", np.zeros_like(xs))
            regions.append(
                FitRegion(
                    xs, ys, np.asarray(res.best_fit), np.broadcast_to(base, xs.shape).copy(),
                    tuple(specs[i].mode for i in active), float(noise), float(res.redchi),
                    bool(res.success), str(res.message),
                )
            )  # fmt: skip
            if not res.errorbars:
                warnings.append(
                    f"{lo:g}-{hi:g}: lmfit could not estimate uncertainties (singular covariance)"
                )
    peaks = tuple(p for i in range(len(specs)) for p in results[i])
    return PeakFit(
        peaks,
        tuple(regions),
        model,
        base_kind if isinstance(baseline, str) else "array",
        snr_threshold,
        noise_source,
        tuple(warnings),
    )
