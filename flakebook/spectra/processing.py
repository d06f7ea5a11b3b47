"""Spectrum processing: cosmic-ray spikes, baselines and the wavenumber calibration.

- Spikes: the modified z-score (0.6745 (d - median d) / MAD, Iglewicz & Hoaglin) of the second
  difference d of the spectrum, after D. A. Whitaker and K. Hayes, Chemom. Intell. Lab. Syst.
  179, 82 (2018), who use the first difference. A spike is a run of at most ``max_width`` points
  whose second difference is strongly negative (z < -threshold), widened over the negative second differences next
  to it, and bounded on both sides (next to it or one point further) by strongly positive ones
  (z > threshold / 3): the (+1, -2, +1) signature of a narrow spike. The
  top of a Raman peak sampled by five or more points per FWHM has a negative second difference
  over a wider run with small ones at its edges, so it is not taken for a spike however strong.
  Raw detector counts (non-negative whole numbers) carry shot noise that grows with the
  signal, which on the top of a strong line would read as spikes against the baseline's noise:
  their second differences are taken of the Anscombe transform 2 sqrt(y + 3/8) (F. J.
  Anscombe, Biometrika 35, 246 (1948)), whose noise is about 1 everywhere.
  Spike points are replaced by linear interpolation between their unflagged neighbours. Not
  seen: a spike in the first or last point, and a spike on the top of a strong peak (whose
  own negative curvature hides the spike's signature).
- Baselines: ``pybaselines`` methods by name. The default is ``imodpoly`` (improved modified
  polynomial, Zhao et al., Appl. Spectrosc. 61, 1225 (2007)) of order 3, which follows sloped
  and curved fluorescence backgrounds under narrow Raman lines without a smoothness parameter
  to tune. ``masked_poly`` fits a polynomial to the points outside given peak windows (when the
  windows are known). ``modpoly_batch`` is our vectorised modified polynomial (Lieber &
  Mahadevan-Jansen, Appl. Spectrosc. 57, 1363 (2003)) for many spectra on one axis (maps).
- Calibration: the shift that brings a reference line (by default the silicon phonon at
  520.7 cm^-1 at room temperature, common practice, no source) to its nominal position, from a
  Lorentzian fit. Never auto-calibrate within a stage-temperature series: the Si line itself
  moves with temperature (about -0.02 cm^-1/K), so calibrating each spectrum on it would erase
  part of the shift being measured. Series code passes ``auto_calibrate=False`` and applies one
  shift measured once (``shift_cm1``) to all spectra.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from flakebook.errors import InputError
from flakebook.spectra import BASELINE_METHODS

__all__ = [
    "SI_LINE_CM1",
    "BASELINE_METHODS",
    "SpikeResult",
    "BaselineResult",
    "Calibration",
    "remove_spikes",
    "estimate_baseline",
    "modpoly_batch",
    "calibrate",
]

SI_LINE_CM1 = 520.7


@dataclass(frozen=True)
class SpikeResult:
    """``y`` with spikes replaced; ``mask`` True at replaced points; ``n_spikes`` spike count."""

    y: np.ndarray
    mask: np.ndarray
    n_spikes: int


def _modified_z(d: np.ndarray) -> np.ndarray:
    med = np.median(d)
    mad = np.median(np.abs(d - med))
    if mad == 0:
        mad = np.mean(np.abs(d - med)) or 1.0
    return 0.6745 * (d - med) / mad


def is_counts(y: np.ndarray) -> bool:
    """True for raw detector counts: non-negative whole numbers reaching above 20, whose noise
    is the Poisson shot noise (variance = counts)."""
    y = np.asarray(y, dtype=float)
    return bool(
        y.size and np.all(np.isfinite(y)) and y.min() >= 0 and y.max() > 20
        and np.all(y == np.round(y))
    )  # fmt: skip


def remove_spikes(y, *, threshold: float = 6.0, max_width: int = 3) -> SpikeResult:
    """Find and replace cosmic-ray spikes in one spectrum ``y`` (1-D; see module docstring).

    ``threshold`` is the modified z-score a spike's second difference must exceed (Whitaker &
    Hayes use 3.5 on the first difference; 6 on the second difference keeps noise from being
    flagged in 1024-point spectra); ``max_width`` the widest spike in points.
    """
    y = np.asarray(y, dtype=float)
    if y.ndim != 1 or y.size < 5:
        raise InputError(
            f"remove_spikes: got an array of shape {y.shape}; accepted: one spectrum of at "
            "least 5 points"
        )
    v = y
    if is_counts(y):  # shot noise: the same noise everywhere after the Anscombe transform
        v = 2.0 * np.sqrt(y + 0.375)
    d = np.zeros_like(y)
    d[1:-1] = v[:-2] - 2 * v[1:-1] + v[2:]
    z = _modified_z(d[1:-1])
    zfull = np.zeros_like(y)
    zfull[1:-1] = z
    neg = zfull < -threshold
    mask = np.zeros(y.size, bool)
    n_spikes = 0
    i = 1
    while i < y.size - 1:
        if not neg[i]:
            i += 1
            continue
        j = i
        while j + 1 < y.size - 1 and neg[j + 1]:
            j += 1
        a, b = i, j  # widen over the negative second differences next to the core
        while a - 1 >= 1 and d[a - 1] < 0 and b - a + 1 <= max_width:
            a -= 1
        while b + 1 < y.size - 1 and d[b + 1] < 0 and b - a + 1 <= max_width:
            b += 1
        # the positive lobes: next to the run, or one point further out (an uneven two-point
        # spike leaves a small second difference between its core and its lobe)
        lobe = threshold / 3
        if zfull[a - 1] <= lobe and a >= 3 and zfull[a - 2] > lobe:
            a -= 1
        if zfull[b + 1] <= lobe and b + 2 < y.size - 1 and zfull[b + 2] > lobe:
            b += 1
        width = b - a + 1
        if width <= max_width and zfull[a - 1] > lobe and zfull[b + 1] > lobe:
            mask[a : b + 1] = True
            n_spikes += 1
        i = j + 1
    out = y.copy()
    if mask.any():
        idx = np.arange(y.size)
        out[mask] = np.interp(idx[mask], idx[~mask], y[~mask])
    out.setflags(write=False)
    mask.setflags(write=False)
    return SpikeResult(out, mask, n_spikes)


@dataclass(frozen=True)
class BaselineResult:
    """The baseline on the input axis, ``corrected = y - baseline``, and how it was obtained."""

    baseline: np.ndarray
    corrected: np.ndarray
    method: str
    parameters: dict


def _peak_mask(x: np.ndarray, windows) -> np.ndarray:
    keep = np.ones(x.size, bool)
    for lo, hi in windows:
        keep &= ~((x >= lo) & (x <= hi))
    return keep


def estimate_baseline(
    x,
    y,
    *,
    method: str = "imodpoly",
    poly_order: int = 3,
    peak_windows=(),
    **options,
) -> BaselineResult:
    """Baseline of spectrum ``y`` on axis ``x`` by ``method`` (one of BASELINE_METHODS).

    ``poly_order`` applies to the polynomial methods; ``peak_windows`` (a list of (lo, hi) in x
    units) to ``masked_poly``: points inside the windows are left out of the fit. Any other
    keyword goes to the pybaselines method (for example ``lam`` for asls/arpls/airpls,
    ``max_half_window`` for snip). ``y`` may be 2-D (spectra along the first axis), fitted one
    by one.
    """
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    if method not in BASELINE_METHODS:
        raise InputError(
            f"baseline method {method!r} is not known; accepted: {', '.join(BASELINE_METHODS)}"
        )
    if y.shape[-1] != x.size:
        raise InputError(
            f"estimate_baseline: x has {x.size} points, y {y.shape[-1]}; accepted: equal lengths"
        )
    if y.ndim == 2:
        parts = [
            estimate_baseline(
                x, row, method=method, poly_order=poly_order, peak_windows=peak_windows, **options
            )
            for row in y
        ]
        base = np.array([p.baseline for p in parts])
        return BaselineResult(base, y - base, method, parts[0].parameters)
    from pybaselines import Baseline

    fitter = Baseline(x_data=x)
    params = dict(options)
    if method in ("imodpoly", "modpoly", "poly"):
        params["poly_order"] = poly_order
        base, _ = getattr(fitter, method)(y, **params)
    elif method == "masked_poly":
        keep = _peak_mask(x, peak_windows)
        if keep.sum() <= poly_order + 1:
            raise InputError(
                f"masked_poly baseline: only {int(keep.sum())} points lie outside the peak "
                f"windows; accepted: more than {poly_order + 1} (narrower windows or a lower order)"
            )
        params["poly_order"] = poly_order
        params["peak_windows"] = [tuple(map(float, w)) for w in peak_windows]
        base, _ = fitter.poly(y, poly_order=poly_order, weights=keep.astype(float))
    else:
        base, _ = getattr(fitter, method)(y, **params)
    base = np.asarray(base, dtype=float)
    return BaselineResult(base, y - base, method, params)


def modpoly_batch(
    x, y, *, poly_order: int = 3, max_iter: int = 250, tol: float = 1e-3
) -> np.ndarray:
    """Modified-polynomial baselines of many spectra ``y[..., n]`` on one axis ``x`` at once.

    The method of pybaselines' ``modpoly`` (Lieber & Mahadevan-Jansen 2003): fit a polynomial,
    clip the data to it where the data lie above, refit, until the relative change of the fit
    falls below ``tol``; one least-squares projection serves every spectrum per iteration.
    Returns the baselines, same shape as ``y``.
    """
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    shape = y.shape
    flat = y.reshape(-1, x.size)
    # pybaselines maps x to [-1, 1] before building its Vandermonde matrix; so do we.
    t = 2 * (x - x.min()) / (x.max() - x.min()) - 1
    v = np.vander(t, poly_order + 1, increasing=True)
    proj_t = np.linalg.pinv(v).T  # (n, p): coefficients = rows @ proj_t
    v_t = v.T
    out = np.empty_like(flat)
    rows = np.arange(flat.shape[0])
    work = flat.copy()
    base = (work @ proj_t) @ v_t
    for _ in range(max_iter):
        np.minimum(work, base, out=work)
        new = (work @ proj_t) @ v_t
        change = np.linalg.norm(new - base, axis=1) / np.maximum(
            np.linalg.norm(base, axis=1), 1e-300
        )
        base = new
        done = change < tol
        if done.any():
            out[rows[done]] = base[done]
            keep = ~done
            rows, work, base = rows[keep], work[keep], base[keep]
            if rows.size == 0:
                break
    out[rows] = base
    return out.reshape(shape)


@dataclass(frozen=True)
class Calibration:
    """A calibration shift: ``x_corrected = x + shift_cm1``.

    ``measured_cm1`` and ``measured_err_cm1`` are the fitted reference line (None when the
    shift was given, not measured); ``reference_cm1`` its nominal position; ``method`` says
    which.
    """

    x_corrected: np.ndarray
    shift_cm1: float
    measured_cm1: float | None
    measured_err_cm1: float | None
    reference_cm1: float
    method: str


def calibrate(
    x,
    y,
    *,
    reference_cm1: float = SI_LINE_CM1,
    window_cm1: float = 15.0,
    auto_calibrate: bool = True,
    shift_cm1: float | None = None,
    min_snr: float = 5.0,
) -> Calibration:
    """Shift the Raman axis so that a reference line sits at ``reference_cm1``.

    With ``auto_calibrate`` (the default) the line nearest ``reference_cm1`` within
    ``window_cm1`` is fitted (Lorentzian on a linear baseline) and the axis moved by
    ``reference_cm1 - measured``. With ``auto_calibrate=False`` nothing is fitted: the axis is
    moved by ``shift_cm1`` (a shift measured once, say on a room-temperature spectrum, or 0 when
    None). Series code sets ``auto_calibrate=False``: never auto-calibrate within a
    stage-temperature series, since the Si line itself moves about -0.02 cm^-1/K. A reference
    line fitted with a signal-to-noise below ``min_snr`` raises InputError.
    """
    from flakebook.spectra.peaks import PeakSpec, fit_peaks

    x = np.asarray(x, dtype=float)
    if not auto_calibrate or shift_cm1 is not None:
        shift = 0.0 if shift_cm1 is None else float(shift_cm1)
        method = "given shift" if shift_cm1 is not None else "none (auto_calibrate off)"
        return Calibration(x + shift, shift, None, None, float(reference_cm1), method)
    if not (x.min() < reference_cm1 < x.max()):
        raise InputError(
            f"calibration: the reference line at {reference_cm1:g} cm^-1 lies outside the "
            f"spectrum ({x.min():g}-{x.max():g} cm^-1); accepted: a spectrum that contains it, "
            "or auto_calibrate=False with a given shift"
        )
    spec = PeakSpec("reference", reference_cm1, window_cm1, 4.0)
    fit = fit_peaks(x, y, [spec], snr_threshold=min_snr, margin_fwhm=4.0)
    peak = fit.peaks[0]
    if not peak.found:
        raise InputError(
            f"calibration: no line found near {reference_cm1:g} cm^-1 (signal-to-noise "
            f"{peak.snr:.1f} < {min_snr:g}); accepted: a spectrum with a clear reference line, "
            "or auto_calibrate=False with a given shift"
        )
    shift = float(reference_cm1 - peak.center)
    return Calibration(
        x + shift,
        shift,
        float(peak.center),
        float(peak.center_err),
        float(reference_cm1),
        f"Lorentzian fit of the line at {reference_cm1:g} cm^-1",
    )
