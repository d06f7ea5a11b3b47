"""Thermal conductivity with its uncertainty: Monte Carlo over every input of the inversion.

:func:`kappa_with_uncertainty` draws chi_T and chi_P (bivariate normal with their covariance), the
absorptance (a mean and error, or a function or table of the hole depth with the depth drawn too),
the hole radius, the beam radius and the layer number (from the flake's posterior over N), and
inverts each draw. It reports kappa from the central inputs, the median and the 16th-84th
percentiles of the draws, and each input's share of var(ln kappa) from draws in which only that
input (or the correlated group chi_t+chi_p) varies, normalised to sum to 1.

Draws that no model can use (W >= R, A outside (0, 1), chi_T and chi_P of different signs) are
dropped, and a warning gives their fraction. The layer posterior's "more" bin has no thickness:
when it holds more than 5% the layer number is asked for, otherwise it is dropped and the rest
renormalised (a warning says so).
"""

from __future__ import annotations

import math
import threading
from collections.abc import Callable
from dataclasses import dataclass, field, replace

import numpy as np
from scipy import interpolate, special

from flakebook.errors import InputError, check_cancel
from flakebook.thermal import inversion as _inv
from flakebook.thermal import model as _model
from flakebook.thermal.inversion import HeatModel
from flakebook.thermal.model import WEIGHTINGS
from flakebook.thermal.warnings import plausibility_warnings

SHARE_KEYS = (
    "chi_t",
    "chi_p",
    "absorptance",
    "hole_radius",
    "beam_radius",
    "hole_depth",
    "layers",
)
MORE_BIN_LIMIT = 0.05

AbsorptanceInput = float | Callable[[np.ndarray], np.ndarray] | tuple[np.ndarray, np.ndarray]


@dataclass(frozen=True)
class KappaResult:
    """kappa with its Monte Carlo interval; :meth:`to_dict` gives INTERFACE.md's kappa JSON."""

    kappa_w_mk: float
    kappa_median_w_mk: float
    kappa_p16_w_mk: float
    kappa_p84_w_mk: float
    thermal_resistance_k_per_w: float
    temperature_rise_k_per_mw_incident: float
    absorptance: float
    thickness_nm: float
    variance_share: dict[str, float]
    warnings: tuple[str, ...]
    layers: int = 0
    method: str = ""
    geometry_factor: float = float("nan")
    draws: int = 0
    valid_draws: int = 0
    seed: int | None = None
    samples_w_mk: np.ndarray = field(default_factory=lambda: np.empty(0), repr=False)

    def to_dict(self) -> dict:
        """The keys of ``flakebook kappa``'s JSON, exactly (INTERFACE.md)."""
        return {
            "kappa_w_mk": self.kappa_w_mk,
            "kappa_median_w_mk": self.kappa_median_w_mk,
            "kappa_p16_w_mk": self.kappa_p16_w_mk,
            "kappa_p84_w_mk": self.kappa_p84_w_mk,
            "thermal_resistance_k_per_w": self.thermal_resistance_k_per_w,
            "temperature_rise_k_per_mw_incident": self.temperature_rise_k_per_mw_incident,
            "absorptance": self.absorptance,
            "thickness_nm": self.thickness_nm,
            "variance_share": dict(self.variance_share),
            "warnings": list(self.warnings),
        }


# ---- inputs ----------------------------------------------------------------------------------


def _layer_probabilities(
    layers: int | None, layer_posterior: np.ndarray | None
) -> tuple[np.ndarray, list[str]]:
    """Probabilities over N = 1..N_max (the "more" bin dropped) and any warning."""
    if (layers is None) == (layer_posterior is None):
        raise InputError(
            "give either the layer number (an integer >= 1) or the flake's posterior over N "
            "(N = 1..N_max then the 'more' bin), not both and not neither"
        )
    if layers is not None:
        if int(layers) != layers or layers < 1:
            raise InputError(f"layer number {layers!r} is not usable; an integer >= 1 is accepted")
        p = np.zeros(int(layers))
        p[-1] = 1.0
        return p, []
    post = np.asarray(layer_posterior, dtype=float).ravel()
    if post.size < 2 or not np.all(np.isfinite(post)) or np.any(post < 0) or post.sum() <= 0:
        raise InputError(
            "the layer posterior must list non-negative probabilities over N = 1..N_max followed "
            f"by the 'more' bin (at least 2 values); got {post.size} value(s)"
        )
    post = post / post.sum()
    more = float(post[-1])
    if more > MORE_BIN_LIMIT:
        raise InputError(
            f"the layer posterior puts {more:.0%} on >{post.size - 1}L (more than {post.size - 1} "
            "layers), which "
            "has no thickness; give the layer number (more than 5% there is not accepted)"
        )
    warns = []
    if more >= 1e-3:  # below 0.1% the bin changes nothing worth a word
        warns.append(
            f"the layer posterior's >{post.size - 1}L bin ({more:.1%}) has no "
            "thickness; it was dropped and the rest renormalised"
        )
    p = post[:-1] / post[:-1].sum()
    return p, warns


def _absorptance_function(absorptance: AbsorptanceInput):
    """(function of depth or None, the table's depth range or None)."""
    if callable(absorptance):

        def fn(depth: np.ndarray) -> np.ndarray:
            d = np.asarray(depth, float)
            try:
                out = np.asarray(absorptance(d), float)
                if out.shape == d.shape:
                    return out
            except (TypeError, ValueError):
                pass
            return np.array([float(absorptance(float(x))) for x in d.ravel()]).reshape(d.shape)

        return fn, None
    if isinstance(absorptance, tuple):
        depths, values = (np.asarray(a, float).ravel() for a in absorptance)
        if depths.size < 2 or depths.size != values.size:
            raise InputError(
                "the absorptance table needs matching arrays of hole depths (nm) and "
                f"absorptances with at least 2 rows; got {depths.size} and {values.size}"
            )
        order = np.argsort(depths)
        depths, values = depths[order], values[order]
        return (lambda d: np.interp(d, depths, values)), (depths[0], depths[-1])
    return None, None


def _draw(rng: np.random.Generator, mean: float, err: float, n: int, vary: bool) -> np.ndarray:
    if not vary or err == 0:
        return np.full(n, float(mean))
    return rng.normal(mean, err, n)


def _draw_lognormal(
    rng: np.random.Generator, mean: float, err: float, n: int, vary: bool
) -> np.ndarray:
    """A positive quantity (the interface conductance) given as mean +/- s.d.: log-normal draws
    with that mean and s.d., so no draw is negative (common practice, no source)."""
    if not vary or err == 0:
        return np.full(n, float(mean))
    s2 = math.log1p((err / mean) ** 2)
    return rng.lognormal(math.log(mean) - 0.5 * s2, math.sqrt(s2), n)


# ---- vectorised kappa ------------------------------------------------------------------------

_GL_X, _GL_W = np.polynomial.legendre.leggauss(64)


def _kappa_kirchhoff(chi_t, chi_p, a, t_nm, r_um, w_um, model: HeatModel) -> np.ndarray:
    """kappa_0 of every draw with kappa(T) = kappa_0 (T_0/T)^alpha, centred, edge at the sink.

    The Kirchhoff transform U(r) = P theta(r) / (2 pi kappa_a t) of the exact disk profile gives
    T(r) = f(U); T_m at each power of the series is its weighted mean by Gauss-Legendre, and a
    straight line through them is matched to chi_P / (A chi_T) by fixed-point iteration.
    """
    k = WEIGHTINGS[model.weighting]
    ta, alpha = model.ambient_temperature_k, model.kappa_alpha
    rho = (r_um / w_um)[:, None]
    xmax = np.minimum(rho, 6.0 / math.sqrt(k))
    x = 0.5 * xmax * (1 + _GL_X[None, :])
    wt = 0.5 * xmax * _GL_W[None, :] * np.exp(-2 * k * x**2) * x
    wt = wt / wt.sum(axis=1, keepdims=True)
    theta = np.log(rho / x) - special.exp1(2 * x**2) / 2 + special.exp1(2 * rho**2) / 2
    powers = np.asarray(model.powers_mw, float) * 1e-3
    p_abs = a[:, None] * powers[None, :]  # draws x powers
    r_meas = chi_p * 1e3 / (a * chi_t)
    g = np.sum(wt * theta, axis=1)
    y = r_meas / g  # 1 / (2 pi kappa_a t), the linear start

    def inverse(u: np.ndarray) -> np.ndarray:
        if abs(alpha - 1) < 1e-12:
            return ta * np.expm1(u / ta)
        base = 1 + (1 - alpha) * u / ta
        with np.errstate(invalid="ignore", over="ignore"):
            return ta * np.where(base > 0, base, np.nan) ** (1 / (1 - alpha)) - ta

    pm = p_abs - p_abs.mean(axis=1, keepdims=True)
    den = np.sum(pm**2, axis=1)
    for _ in range(60):
        u = y[:, None, None] * p_abs[:, :, None] * theta[:, None, :]
        tm = np.sum(inverse(u) * wt[:, None, :], axis=2)  # draws x powers
        slope = np.sum(pm * tm, axis=1) / den
        new = y * r_meas / slope
        done = np.nanmax(np.abs(new / y - 1)) < 1e-11 if np.any(np.isfinite(new)) else True
        y = new
        if done:
            break
    kappa_a = 1 / (2 * np.pi * np.asarray(t_nm) * 1e-9 * y)
    return kappa_a * (ta / model.reference_k) ** alpha


def _grid(values: np.ndarray, n: int) -> np.ndarray:
    lo, hi = float(np.min(values)), float(np.max(values))
    if hi - lo < 1e-9 * max(abs(hi), 1.0):
        return np.array([lo])
    pad = 0.02 * (hi - lo)
    return np.linspace(lo - pad, hi + pad, n)


def _table(fn, xs: np.ndarray, ys: np.ndarray, cancel):
    """A cubic interpolant of fn over the grid xs x ys (either of length 1: 1D or constant)."""
    vals = np.empty((xs.size, ys.size))
    for i, x in enumerate(xs):
        check_cancel(cancel)
        for j, y in enumerate(ys):
            vals[i, j] = fn(x, y)
    if xs.size > 1 and ys.size > 1:
        spline = interpolate.RectBivariateSpline(xs, ys, vals, kx=3, ky=3)
        return lambda x, y: spline.ev(x, y)
    if xs.size > 1:
        s1 = interpolate.CubicSpline(xs, vals[:, 0])
        return lambda x, y: s1(x)
    if ys.size > 1:
        s2 = interpolate.CubicSpline(ys, vals[0, :])
        return lambda x, y: s2(y)
    return lambda x, y: np.full(np.shape(x), vals[0, 0])


def _kappa_offset(chi_t, chi_p, a, t_nm, r_um, w_um, model: HeatModel, cancel) -> np.ndarray:
    """Off-centre beam, edge at the sink: G depends on R/W and d/W only; tabulated once over
    the draws' range (cubic, 9 x 9 solves) and kappa = G / (2 pi t R_meas)."""
    rho, delta = r_um / w_um, abs(model.beam_offset_um) / w_um
    ok = delta < rho

    def g_of(x: float, y: float) -> float:
        return _model.solve_membrane(
            1.0, 1.0, x, 1.0, weighting=model.weighting, beam_offset_um=min(y, 0.999 * x)
        ).geometry_factor

    fn = _table(g_of, _grid(rho[ok], 9), _grid(delta[ok], 9), cancel)
    g = np.where(ok, fn(rho, delta), np.nan)
    r_meas = chi_p * 1e3 / (a * chi_t)
    return g / (2 * np.pi * t_nm * 1e-9 * r_meas)


def _kappa_supported(chi_t, chi_p, a, t_nm, r_um, w_um, g, model: HeatModel, cancel) -> np.ndarray:
    """Supported annulus with conductance g (one per draw): 2 pi kappa t R_m = F(R/W, beta),
    beta = g W^2 / (kappa t), tabulated over the draws' range; beta F(beta) = 2 pi g W^2 R_meas
    is solved for beta by bisection on the interpolant (it rises monotonically with beta)."""
    g = np.asarray(g, dtype=float)
    rho = r_um / w_um
    w_m, t_m = w_um * 1e-6, t_nm * 1e-9
    r_meas = chi_p * 1e3 / (a * chi_t)
    k_lin = _inv.geometry_factor(rho, 1.0, model.weighting) / (2 * np.pi * t_m * r_meas)
    lb_lin = np.log(g * w_m**2 / (k_lin * t_m))
    lbs = np.linspace(float(lb_lin.min()) - 7.0, float(lb_lin.max()) + 1.0, 33)

    def f_of(x: float, lb: float) -> float:
        # kappa = 1 W/m/K, t = 1 nm, W = 1 um: beta = g W^2 / (kappa t) = 1e-3 g
        return _model.solve_membrane(
            1.0,
            1.0,
            x,
            1.0,
            weighting=model.weighting,
            interface_conductance_w_m2k=1e3 * math.exp(lb),
        ).geometry_factor

    fn = _table(f_of, _grid(rho, 9), lbs, cancel)
    target = np.log(2 * np.pi * g * w_m**2 * r_meas)
    lo = np.full(rho.size, lbs[0])
    hi = np.full(rho.size, lbs[-1])

    def h(lb: np.ndarray) -> np.ndarray:
        return lb + np.log(fn(rho, lb)) - target

    inside = (h(lo) < 0) & (h(hi) > 0)
    for _ in range(60):
        mid = 0.5 * (lo + hi)
        up = h(mid) > 0
        hi = np.where(up, mid, hi)
        lo = np.where(up, lo, mid)
    beta = np.exp(0.5 * (lo + hi))
    return np.where(inside, g * w_m**2 / (beta * t_m), np.nan)


def _kappa_draws(inputs: dict, model: HeatModel, cancel, progress, frac0, frac1) -> np.ndarray:
    chi_t, chi_p, a, t, r, w = (inputs[k] for k in ("chi_t", "chi_p", "a", "t", "r", "w"))
    g = inputs.get("g")
    ok = (a > 0) & (a < 1) & (w > 0) & (r > w) & (chi_t * chi_p > 0) & np.isfinite(a)
    if g is not None:
        ok &= np.isfinite(g) & (g > 0)
    out = np.full(chi_t.size, np.nan)
    if not np.any(ok):
        return out
    linear = model.kappa_alpha == 0 or not model.powers_mw
    if model.is_simple:
        out[ok] = _inv.kappa_simple(
            chi_t[ok], chi_p[ok], a[ok], t[ok], r[ok], w[ok], model.weighting
        )
    elif model.interface_conductance_w_m2k is None and model.beam_offset_um == 0:
        out[ok] = _kappa_kirchhoff(chi_t[ok], chi_p[ok], a[ok], t[ok], r[ok], w[ok], model)
    elif linear and model.interface_conductance_w_m2k is None:
        ok &= abs(model.beam_offset_um) < r
        out[ok] = _kappa_offset(chi_t[ok], chi_p[ok], a[ok], t[ok], r[ok], w[ok], model, cancel)
    elif linear and model.beam_offset_um == 0 and model.supported_outer_radius_um is None:
        out[ok] = _kappa_supported(
            chi_t[ok], chi_p[ok], a[ok], t[ok], r[ok], w[ok], g[ok], model, cancel
        )
    else:
        idx = np.flatnonzero(ok)
        for j, i in enumerate(idx):
            if j % 50 == 0:
                check_cancel(cancel)
                if progress is not None:
                    progress(frac0 + (frac1 - frac0) * j / idx.size, "Monte Carlo draws")
            m = model if g is None else replace(model, interface_conductance_w_m2k=float(g[i]))
            try:
                out[i] = _inv.invert_kappa(chi_t[i], chi_p[i], a[i], t[i], r[i], w[i], m).kappa_w_mk
            except InputError:
                pass
    return out


# ---- the public entry ------------------------------------------------------------------------


def kappa_with_uncertainty(
    chi_t_cm1_per_k: float,
    chi_p_cm1_per_mw: float,
    absorptance: AbsorptanceInput,
    hole_radius_um: float,
    beam_radius_um: float,
    *,
    layer_spacing_nm: float,
    layers: int | None = None,
    layer_posterior: np.ndarray | None = None,
    chi_t_err_cm1_per_k: float = 0.0,
    chi_p_err_cm1_per_mw: float = 0.0,
    chi_correlation: float = 0.0,
    absorptance_err: float = 0.0,
    hole_radius_err_um: float = 0.0,
    beam_radius_err_um: float = 0.0,
    hole_depth_nm: float | None = None,
    hole_depth_err_nm: float = 0.0,
    interface_conductance_err_w_m2k: float = 0.0,
    model: HeatModel = HeatModel(),  # noqa: B008 (frozen)
    draws: int = 10_000,
    seed: int | None = 0,
    max_power_mw: float | None = None,
    mean_free_path_um: float = 1.0,
    in_vacuum: bool | None = None,
    transmittance: float | None = None,
    extra_warnings: tuple[str, ...] = (),
    variance_shares: bool = True,
    progress: Callable[[float, str], None] | None = None,
    cancel: threading.Event | None = None,
) -> KappaResult:
    """kappa (W/m/K) from the central inputs and its Monte Carlo spread.

    ``absorptance``: a number (with ``absorptance_err``, whose spread from hole depth and
    aperture the caller computes), or a function of the hole depth in nm, or a table
    ``(depths_nm, absorptances)``; then ``hole_depth_nm`` and ``hole_depth_err_nm`` are drawn and
    ``absorptance_err`` adds an independent spread. Errors are standard deviations in the
    inputs' units; an input without its error is exact. ``layers`` or ``layer_posterior`` (over
    N = 1..N_max then "more") with ``layer_spacing_nm`` give the thickness. ``max_power_mw`` (the
    series' highest incident power; default the largest of ``model.powers_mw``) feeds the
    temperature-rise warning; ``mean_free_path_um``, ``in_vacuum`` and ``transmittance`` the
    other plausibility warnings. ``extra_warnings`` (e.g. the series fits') are passed through.
    ``variance_shares=False`` skips the per-input draws (the shares are then all zero).
    """
    if int(draws) != draws or draws < 100:
        raise InputError(f"draws {draws!r} is too few; an integer of at least 100 is accepted")
    draws = int(draws)
    if not (np.isfinite(layer_spacing_nm) and layer_spacing_nm > 0):
        raise InputError(
            f"layer spacing {layer_spacing_nm!r} nm is not usable; a positive spacing is accepted"
        )
    errs = {
        "chi_T error": chi_t_err_cm1_per_k,
        "chi_P error": chi_p_err_cm1_per_mw,
        "absorptance error": absorptance_err,
        "hole radius error": hole_radius_err_um,
        "beam radius error": beam_radius_err_um,
        "hole depth error": hole_depth_err_nm,
        "interface conductance error": interface_conductance_err_w_m2k,
    }
    for name, v in errs.items():
        if not (np.isfinite(v) and v >= 0):
            raise InputError(f"{name} {v!r} is not usable; a standard deviation >= 0 is accepted")
    if not -1 < chi_correlation < 1:
        raise InputError(
            f"chi correlation {chi_correlation!r} is outside (-1, 1); a correlation coefficient "
            "strictly between -1 and 1 is accepted"
        )
    g0 = model.interface_conductance_w_m2k
    if interface_conductance_err_w_m2k > 0 and g0 is None:
        raise InputError(
            "an interface conductance error was given without an interface conductance; "
            "accepted: the error together with the conductance of the supported region"
        )
    warnings: list[str] = list(extra_warnings)
    p_layers, layer_warns = _layer_probabilities(layers, layer_posterior)
    warnings.extend(layer_warns)
    n_central = int(np.argmax(p_layers)) + 1
    t_central = n_central * layer_spacing_nm

    a_fn, a_range = _absorptance_function(absorptance)
    if a_fn is not None:
        if hole_depth_nm is None:
            raise InputError(
                "the absorptance is given as a function of the hole depth but no hole depth "
                "was given; give hole_depth_nm (and its error)"
            )
        a_central = float(a_fn(np.array([float(hole_depth_nm)]))[0])
    else:
        a_central = float(absorptance)
        if hole_depth_err_nm > 0:
            warnings.append(
                "the hole depth error does not enter: the absorptance was given as a number, so "
                "its error should already hold the depth's spread"
            )
            hole_depth_err_nm = 0.0

    central = _inv.invert_kappa(
        chi_t_cm1_per_k,
        chi_p_cm1_per_mw,
        a_central,
        t_central,
        hole_radius_um,
        beam_radius_um,
        model,
    )
    warnings.extend(central.warnings)

    corr = chi_correlation != 0 and chi_t_err_cm1_per_k > 0 and chi_p_err_cm1_per_mw > 0
    groups: dict[str, set[str]] = {}
    if corr:
        groups["chi_t+chi_p"] = {"chi_t", "chi_p"}
    else:
        groups["chi_t"] = {"chi_t"}
        groups["chi_p"] = {"chi_p"}
    for key in ("absorptance", "hole_radius", "beam_radius", "hole_depth", "layers"):
        groups[key] = {key}
    if g0 is not None:  # its own key only where the model has a supported region
        groups["interface_conductance"] = {"interface_conductance"}
    spread = {
        "chi_t": chi_t_err_cm1_per_k > 0,
        "chi_p": chi_p_err_cm1_per_mw > 0,
        "absorptance": absorptance_err > 0,
        "hole_radius": hole_radius_err_um > 0,
        "beam_radius": beam_radius_err_um > 0,
        "hole_depth": a_fn is not None and hole_depth_err_nm > 0,
        "interface_conductance": interface_conductance_err_w_m2k > 0,
        "layers": np.count_nonzero(p_layers) > 1,
    }
    rng = np.random.default_rng(seed)

    def sample(vary: set[str], n: int) -> dict:
        v = {k: (k in vary and spread[k]) for k in spread}
        if v["chi_t"] or v["chi_p"]:
            st = chi_t_err_cm1_per_k if v["chi_t"] else 0.0
            sp = chi_p_err_cm1_per_mw if v["chi_p"] else 0.0
            c = chi_correlation * st * sp
            cov = np.array([[st**2, c], [c, sp**2]])
            chi = rng.multivariate_normal([chi_t_cm1_per_k, chi_p_cm1_per_mw], cov, n)
            chi_t, chi_p = chi[:, 0], chi[:, 1]
        else:
            chi_t = np.full(n, float(chi_t_cm1_per_k))
            chi_p = np.full(n, float(chi_p_cm1_per_mw))
        if a_fn is not None:
            depth = _draw(rng, hole_depth_nm, hole_depth_err_nm, n, v["hole_depth"])
            a = np.asarray(a_fn(depth), float)
            if a_range is not None:
                a = np.where((depth >= a_range[0]) & (depth <= a_range[1]), a, np.nan)
            if v["absorptance"]:
                a = a + rng.normal(0.0, absorptance_err, n)
        else:
            a = _draw(rng, a_central, absorptance_err, n, v["absorptance"])
        r = _draw(rng, hole_radius_um, hole_radius_err_um, n, v["hole_radius"])
        w = _draw(rng, beam_radius_um, beam_radius_err_um, n, v["beam_radius"])
        if v["layers"]:
            nl = rng.choice(np.arange(1, p_layers.size + 1), size=n, p=p_layers)
        else:
            nl = np.full(n, n_central)
        out = {"chi_t": chi_t, "chi_p": chi_p, "a": a, "t": nl * layer_spacing_nm, "r": r, "w": w}
        if g0 is not None:
            out["g"] = _draw_lognormal(rng, g0, interface_conductance_err_w_m2k, n,
                                       v["interface_conductance"])  # fmt: skip
        return out

    varying = [g for g, members in groups.items() if any(spread[m] for m in members)]
    k0 = central.kappa_w_mk
    shares = {key: 0.0 for key in groups}
    samples = np.empty(0)
    valid = 0
    if not varying:
        med = p16 = p84 = k0
    else:
        n_steps = 1 + len(varying)
        if progress is not None:
            progress(0.0, "Monte Carlo draws")
        check_cancel(cancel)
        samples = _kappa_draws(sample(set(spread), draws), model, cancel, progress, 0, 1 / n_steps)
        good = np.isfinite(samples) & (samples > 0)
        valid = int(good.sum())
        if valid < 0.5 * draws:
            raise InputError(
                f"only {valid} of {draws} Monte Carlo draws are usable (W >= R, A outside (0, 1) "
                "or chi of the wrong sign in the rest); the input errors are too large for this "
                "inversion"
            )
        if valid < draws:
            warnings.append(
                f"{draws - valid} of {draws} Monte Carlo draws ({(draws - valid) / draws:.1%}) "
                "were dropped (W >= R, A outside (0, 1), chi of the wrong sign or no steady "
                "state); the interval is that of the rest"
            )
        med, p16, p84 = (float(x) for x in np.percentile(samples[good], [50, 16, 84]))
        var = {}
        for i, g in enumerate(varying if variance_shares else [], start=1):
            check_cancel(cancel)
            ks = _kappa_draws(
                sample(groups[g], draws), model, cancel, progress, i / n_steps, (i + 1) / n_steps
            )
            ks = ks[np.isfinite(ks) & (ks > 0)]
            var[g] = float(np.var(np.log(ks))) if ks.size > 1 else 0.0
        total = sum(var.values())
        if total > 0:
            shares.update({g: v / total for g, v in var.items()})
        if progress is not None:
            progress(1.0, "done")

    rise_max = None
    p_max = max_power_mw
    if p_max is None and model.powers_mw:
        p_max = float(max(model.powers_mw))
    if p_max is not None:
        rise_max = p_max * chi_p_cm1_per_mw / chi_t_cm1_per_k
    warnings.extend(
        plausibility_warnings(
            hole_radius_um,
            beam_radius_um,
            max_temperature_rise_k=rise_max,
            mean_free_path_um=mean_free_path_um,
            in_vacuum=in_vacuum,
            transmittance=transmittance,
            beam_offset_um=model.beam_offset_um,
        )
    )
    return KappaResult(
        kappa_w_mk=k0,
        kappa_median_w_mk=med,
        kappa_p16_w_mk=p16,
        kappa_p84_w_mk=p84,
        thermal_resistance_k_per_w=central.thermal_resistance_k_per_w,
        temperature_rise_k_per_mw_incident=central.temperature_rise_k_per_mw_incident,
        absorptance=a_central,
        thickness_nm=t_central,
        variance_share=shares,
        warnings=tuple(warnings),
        layers=n_central,
        method=central.method,
        geometry_factor=central.geometry_factor,
        draws=draws if varying else 0,
        valid_draws=valid,
        seed=seed,
        samples_w_mk=samples,
    )
