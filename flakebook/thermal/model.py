"""Heat conduction in a suspended membrane heated by a focused Gaussian beam.

A disk of radius R (the hole) and thickness t, heated at its centre by a beam whose intensity
falls as exp(-2 r^2 / W^2) (W the 1/e^2 radius), absorbs a power P. The Raman temperature T_m is
the mean of T(r) over the membrane weighted by the beam intensity (``"intensity"``, the default)
or by its square (``"confocal"``, a confocal pinhole collecting mostly from the beam centre). The
thermal resistance R_m = (T_m - T_a) / P, per absorbed watt, is written through the dimensionless
geometry factor G = 2 pi kappa t R_m.

Three ways to compute it, each the check of the next:

* :func:`geometry_factor_closed_form`: G = ln(R/W) + gamma/2 + ln(2k/(1+k))/2 (k = 1 for
  intensity, 2 for confocal weighting; gamma Euler's constant), the standard result for R/W >= 5;
* :func:`geometry_factor_quadrature`: the quadrature of the exact profile
  T(r) - T_a = P/(2 pi kappa t) [ln(R/r) - E1(2r^2/W^2)/2 + E1(2R^2/W^2)/2] over the disk;
* :func:`solve_membrane`: a finite-volume solver on a non-uniform radial grid that also handles
  the flake continuing on the supported region (an annulus R..R_out losing heat to the substrate
  through an interface conductance g), a temperature-dependent kappa(T) = kappa_0 (T_0/T)^alpha
  (Kirchhoff transform when the edge is held at the sink, fixed-point iteration otherwise) and a
  beam off the hole centre (a 2D solve by angular harmonics: each cos(m phi) term of source and
  weight is a radial problem of its own).

:func:`supported_geometry_factor` is the flake resting on the substrate everywhere (no hole), the
model from which an interface conductance g is fitted to a power series taken on the supported
part of the same flake (:func:`interface_conductance_from_supported`).

Lengths are in metres inside this module's solvers, in um and nm at its public edges as named.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import integrate, optimize, special
from scipy.linalg import solve_banded

from flakebook.errors import InputError

EULER_GAMMA = 0.5772156649015329
WEIGHTINGS = {"intensity": 1, "confocal": 2}


def _k(weighting: str) -> int:
    try:
        return WEIGHTINGS[weighting]
    except KeyError:
        raise InputError(
            f"weighting {weighting!r} is not known; accepted: 'intensity' (the Raman temperature "
            "weighted by the beam intensity) or 'confocal' (weighted by its square)"
        ) from None


def _check_radii(hole_radius_um: float, beam_radius_um: float) -> None:
    if not (np.isfinite(hole_radius_um) and hole_radius_um > 0):
        raise InputError(
            f"hole radius {hole_radius_um!r} um is not usable; a positive radius in um is accepted"
        )
    if not (np.isfinite(beam_radius_um) and beam_radius_um > 0):
        raise InputError(
            f"beam radius {beam_radius_um!r} um is not usable; a positive 1/e^2 radius in um "
            "is accepted"
        )
    if beam_radius_um >= hole_radius_um:
        raise InputError(
            f"beam radius {beam_radius_um} um is not smaller than the hole radius "
            f"{hole_radius_um} um; the suspended-disk model needs W < R (R/W >= 3 advised)"
        )


def geometry_factor_closed_form(
    hole_radius_um: float | np.ndarray,
    beam_radius_um: float | np.ndarray,
    weighting: str = "intensity",
) -> float | np.ndarray:
    """G = 2 pi kappa t R_m for a disk with its edge at the sink, valid for R/W >= 5 (to 1e-6).

    G = ln(R/W) + gamma/2 + ln(2k/(1+k))/2, k = 1 (intensity weighting: ln(R/W) + gamma/2) or
    k = 2 (confocal: the constant is larger by ln(4/3)/2). Vectorised over R and W (um).
    """
    k = _k(weighting)
    ratio = np.asarray(hole_radius_um, dtype=float) / np.asarray(beam_radius_um, dtype=float)
    g = np.log(ratio) + EULER_GAMMA / 2 + 0.5 * math.log(2 * k / (1 + k))
    return float(g) if np.ndim(g) == 0 else g


def profile(r_um: np.ndarray, hole_radius_um: float, beam_radius_um: float) -> np.ndarray:
    """The dimensionless temperature profile 2 pi kappa t (T(r) - T_a) / P of the disk (r in um).

    ln(R/r) - E1(2r^2/W^2)/2 + E1(2R^2/W^2)/2; finite at r = 0, where it equals
    ln(R/W) + (gamma + ln 2)/2 + E1(2R^2/W^2)/2.
    """
    r = np.asarray(r_um, dtype=float)
    big_r, w = hole_radius_um, beam_radius_um
    x = 2 * r**2 / w**2
    with np.errstate(divide="ignore", invalid="ignore"):
        # ln(R/r) - E1(x)/2 = ln(R/W) - ln(x/2)/2 - E1(x)/2; E1(x) + ln x + gamma = Ein(x)
        small = x < 1e-8
        val = np.where(
            small,
            0.0,
            np.log(big_r / np.where(small, 1.0, r)) - special.exp1(np.where(small, 1.0, x)) / 2,
        )
    val = np.where(small, math.log(big_r / w) + (EULER_GAMMA + math.log(2)) / 2 + x / 2, val)
    return val + special.exp1(2 * big_r**2 / w**2) / 2


def geometry_factor_quadrature(
    hole_radius_um: float, beam_radius_um: float, weighting: str = "intensity"
) -> float:
    """G from the exact profile (:func:`profile`) weighted by I or I^2 over the disk (quad)."""
    _check_radii(hole_radius_um, beam_radius_um)
    k = _k(weighting)
    big_r, w = float(hole_radius_um), float(beam_radius_um)

    def weight(r: float) -> float:
        return math.exp(-2 * k * r * r / (w * w)) * r

    num, _ = integrate.quad(
        lambda r: float(profile(np.array(r), big_r, w)) * weight(r),
        0.0,
        big_r,
        points=[w],
        limit=200,
        epsabs=0,
        epsrel=1e-11,
    )
    den = (w * w / (4 * k)) * (1 - math.exp(-2 * k * big_r**2 / w**2))
    return num / den


# ---- supported flake (no hole) ---------------------------------------------------------------


def supported_geometry_factor(
    interface_conductance_w_m2k: float | np.ndarray,
    kappa_w_mk: float | np.ndarray,
    thickness_nm: float | np.ndarray,
    beam_radius_um: float | np.ndarray,
    weighting: str = "intensity",
) -> float | np.ndarray:
    """G = 2 pi kappa t R_m of a flake lying on the substrate everywhere, losing heat through g.

    The Hankel-transform solution of kappa t lap(T) - g T + q = 0 on the infinite sheet gives,
    for the weighted mean temperature, G = exp(x) E1(x) / 2 with x = b g / (kappa t),
    b = W^2 (1 + 1/k) / 8 (k = 1 intensity, 2 confocal).
    """
    k = _k(weighting)
    w = np.asarray(beam_radius_um, dtype=float) * 1e-6
    t = np.asarray(thickness_nm, dtype=float) * 1e-9
    x = w**2 * (1 + 1 / k) / 8 * np.asarray(interface_conductance_w_m2k, float) / (kappa_w_mk * t)
    x = np.asarray(x, dtype=float)
    out = np.where(x < 500, np.exp(np.minimum(x, 500)) * special.exp1(np.maximum(x, 1e-300)), 0.0)
    # asymptotic series for large x: e^x E1(x) ~ (1 - 1/x + 2/x^2 - 6/x^3) / x
    big = x >= 500
    out = np.where(big, (1 - 1 / x + 2 / x**2 - 6 / x**3) / np.maximum(x, 1.0), out) / 2
    return float(out) if out.ndim == 0 else out


def interface_conductance_from_supported(
    thermal_resistance_k_per_w: float,
    kappa_w_mk: float,
    thickness_nm: float,
    beam_radius_um: float,
    weighting: str = "intensity",
) -> float:
    """The interface conductance g (W/m^2/K) that gives a supported flake the measured R_m.

    ``thermal_resistance_k_per_w`` is chi_P / (A chi_T) of a power series taken on the
    supported part of the flake (per absorbed watt); kappa is the flake's in-plane value.
    """
    if not thermal_resistance_k_per_w > 0:
        raise InputError(
            f"supported thermal resistance {thermal_resistance_k_per_w!r} K/W is not usable; a "
            "positive value (chi_P / (A chi_T) of the supported series) is accepted"
        )
    t = thickness_nm * 1e-9
    target = 2 * math.pi * kappa_w_mk * t * thermal_resistance_k_per_w

    def f(log_g: float) -> float:
        gv = supported_geometry_factor(
            math.exp(log_g), kappa_w_mk, thickness_nm, beam_radius_um, weighting
        )
        return math.log(gv) - math.log(target)

    lo, hi = math.log(1e-3), math.log(1e13)
    if f(lo) < 0 or f(hi) > 0:
        raise InputError(
            f"supported thermal resistance {thermal_resistance_k_per_w:.4g} K/W cannot be "
            f"reached by any interface conductance between 1e-3 and 1e13 W/m^2/K with kappa "
            f"{kappa_w_mk:.4g} W/m/K; check the supported series and the absorptance"
        )
    return math.exp(optimize.brentq(f, lo, hi, xtol=1e-12))


# ---- numerical solver ------------------------------------------------------------------------


def _faces(a: float, b: float, h0: float, growth: float, hmax: float) -> np.ndarray:
    """Faces from a to b: steps start at h0 and grow geometrically up to hmax, ending at b."""
    out = [a]
    h = h0
    while out[-1] + h < b - 0.3 * h:
        out.append(out[-1] + h)
        h = min(h * growth, hmax)
    out.append(b)
    return np.asarray(out)


def radial_grid(
    hole_radius: float,
    beam_radius: float,
    outer_radius: float | None = None,
    resolution: float = 1.0,
    offset: float = 0.0,
) -> np.ndarray:
    """Cell faces (m) of the radial grid: fine over the beam, stretched towards the edge.

    ``resolution`` scales the number of cells (2 doubles it). Faces fall exactly on the hole
    radius; ``outer_radius`` adds the supported annulus.
    """
    w = beam_radius
    h0 = w / (40 * resolution)
    fine = min(hole_radius, offset + 2.5 * w)
    inner = _faces(0.0, fine, h0, 1.0, h0)
    hmax = w / (3 * resolution)
    rest = _faces(fine, hole_radius, h0, 1 + 0.04 / resolution, hmax) if fine < hole_radius else []
    faces = np.concatenate([inner, np.asarray(rest)[1:]])
    if outer_radius is not None and outer_radius > hole_radius:
        ann = _faces(hole_radius, outer_radius, h0, 1 + 0.06 / resolution, 50 * hmax)
        faces = np.concatenate([faces, ann[1:]])
    return faces


_GL_X, _GL_W = np.polynomial.legendre.leggauss(6)


def _cell_nodes(faces: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Gauss-Legendre nodes and weights (including the 2 pi r metric) in every cell."""
    a, b = faces[:-1, None], faces[1:, None]
    r = 0.5 * (a + b) + 0.5 * (b - a) * _GL_X[None, :]
    wts = 0.5 * (b - a) * _GL_W[None, :] * 2 * np.pi * r
    return r, wts


def _tridiag_solve(
    cond: np.ndarray, sink: np.ndarray, outer: float, source: np.ndarray
) -> np.ndarray:
    """Solve sum of conductances: cond[i] between cells i, i+1; sink[i] to zero; ``outer`` from
    the last cell to the zero boundary; returns cell values."""
    n = source.size
    diag = sink.astype(float).copy()
    diag[:-1] += cond
    diag[1:] += cond
    diag[-1] += outer
    ab = np.zeros((3, n))
    ab[0, 1:] = -cond
    ab[1] = diag
    ab[2, :-1] = -cond
    return solve_banded((1, 1), ab, source)


@dataclass(frozen=True)
class MembraneSolution:
    """A numerical solve: the weighted mean temperature rise and the geometry factor.

    ``temperature_rise_k`` is T_m - T_a for the absorbed power; ``geometry_factor`` is
    2 pi kappa_a t (T_m - T_a) / P with kappa_a the conductivity at the ambient temperature;
    ``radius_m`` and ``rise_k`` are the cell centres and the azimuthal mean rise there.
    """

    temperature_rise_k: float
    geometry_factor: float
    radius_m: np.ndarray
    rise_k: np.ndarray
    iterations: int
    harmonics: int


def solve_membrane(
    kappa_w_mk: float,
    thickness_nm: float,
    hole_radius_um: float,
    beam_radius_um: float,
    absorbed_power_w: float = 1e-4,
    *,
    weighting: str = "intensity",
    interface_conductance_w_m2k: float | None = None,
    supported_outer_radius_um: float | None = None,
    kappa_alpha: float = 0.0,
    reference_temperature_k: float | None = None,
    ambient_temperature_k: float = 295.0,
    beam_offset_um: float = 0.0,
    resolution: float = 1.0,
    nonlinear: str = "auto",
) -> MembraneSolution:
    """Finite-volume solve of the membrane's temperature and its weighted mean.

    ``kappa_w_mk`` is kappa_0 at ``reference_temperature_k`` (default: the ambient); kappa(T) =
    kappa_0 (T_0/T)^alpha. With ``interface_conductance_w_m2k`` the flake continues on the
    supported annulus out to ``supported_outer_radius_um`` (default R + 20 healing lengths
    sqrt(kappa t / g), at least 10 um more), held at the ambient there; without it the hole's edge
    is at the ambient. ``beam_offset_um`` moves the beam off the hole centre (angular harmonics).
    ``nonlinear``: ``"kirchhoff"`` (exact when no supported annulus), ``"iterate"`` (fixed point)
    or ``"auto"``. The Raman temperature is weighted over the suspended disk.
    """
    _check_radii(hole_radius_um, beam_radius_um)
    k = _k(weighting)
    for name, v in (("kappa", kappa_w_mk), ("thickness", thickness_nm)):
        if not (np.isfinite(v) and v > 0):
            raise InputError(f"{name} {v!r} is not usable; a positive value is accepted")
    t = thickness_nm * 1e-9
    big_r, w, d = hole_radius_um * 1e-6, beam_radius_um * 1e-6, abs(beam_offset_um) * 1e-6
    if d >= big_r:
        raise InputError(
            f"beam offset {beam_offset_um} um puts the beam outside the hole of radius "
            f"{hole_radius_um} um; an offset smaller than the hole radius is accepted"
        )
    t0 = ambient_temperature_k if reference_temperature_k is None else reference_temperature_k
    ta = ambient_temperature_k
    kappa_a = kappa_w_mk * (t0 / ta) ** kappa_alpha
    g = interface_conductance_w_m2k
    outer = None
    if g is not None:
        if not (np.isfinite(g) and g > 0):
            raise InputError(
                f"interface conductance {g!r} W/m^2/K is not usable; a positive value is accepted"
            )
        heal = math.sqrt(kappa_a * t / g)
        if supported_outer_radius_um is not None:
            outer = supported_outer_radius_um * 1e-6
        else:
            outer = big_r + max(20 * heal, 10e-6)
        if outer <= big_r:
            raise InputError(
                f"supported outer radius {supported_outer_radius_um} um is not beyond the hole "
                f"radius {hole_radius_um} um; a larger radius is accepted"
            )
    faces = radial_grid(big_r, w, outer, resolution, d)
    rc = 0.5 * (faces[:-1] + faces[1:])
    area = np.pi * (faces[1:] ** 2 - faces[:-1] ** 2)
    gcell = np.where(rc > big_r, g if g is not None else 0.0, 0.0) * area
    r_nodes, r_wts = _cell_nodes(faces)
    inside = rc < big_r
    dist = np.diff(rc)
    outer_dist = faces[-1] - rc[-1]

    if nonlinear not in ("auto", "kirchhoff", "iterate"):
        raise InputError(
            f"nonlinear method {nonlinear!r} is not known; 'auto', 'kirchhoff' or 'iterate'"
        )
    use_kirchhoff = kappa_alpha == 0 or (
        nonlinear == "kirchhoff" or (nonlinear == "auto" and g is None)
    )
    if kappa_alpha != 0 and not use_kirchhoff and d > 0:
        raise InputError(
            "a beam off the hole centre with kappa(T) and a supported annulus is not "
            "supported; drop one of the three"
        )
    if kappa_alpha != 0 and use_kirchhoff and g is not None:
        raise InputError(
            "the Kirchhoff transform is exact only with the edge at the sink; use "
            "nonlinear='iterate' with a supported annulus"
        )

    # Source and weight harmonics: exp(z cos phi) = I0(z) + 2 sum I_m(z) cos(m phi).
    def harmonics(m: int, scale: float) -> np.ndarray:
        z = scale * 4 * r_nodes * d / w**2
        base = np.exp(-scale * 2 * (r_nodes - d) ** 2 / w**2) * special.ive(m, z)
        return base * (1.0 if m == 0 else 2.0)

    src_norm = 2 * absorbed_power_w / (np.pi * w**2)

    def solve_harmonic(m: int, kappa_cells: np.ndarray) -> np.ndarray:
        kf = 2 * kappa_cells[:-1] * kappa_cells[1:] / (kappa_cells[:-1] + kappa_cells[1:])
        cond = 2 * np.pi * faces[1:-1] * kf * t / dist
        outer_c = 2 * np.pi * faces[-1] * kappa_cells[-1] * t / outer_dist
        sink = gcell + (kappa_cells * t * m * m * area / rc**2 if m else 0.0)
        if m not in src_cache:
            src_cache[m] = src_norm * (harmonics(m, 1.0) * r_wts).sum(axis=1)
        src = src_cache[m]
        return _tridiag_solve(cond, sink, outer_c, src)

    weight_norm = (harmonics(0, k) * r_wts).sum(axis=1)[inside].sum()

    wm_cache: dict[int, np.ndarray] = {}
    src_cache: dict[int, np.ndarray] = {}

    def weight_harmonic(m: int) -> np.ndarray:
        if m not in wm_cache:
            wm_cache[m] = (harmonics(m, k) * r_wts).sum(axis=1)
        return wm_cache[m]

    def term(m: int, theta: np.ndarray) -> float:
        # cos(m phi) cos(n phi) over the circle: 2 pi (m = 0) or pi; the 2 pi is in r_wts
        wm = weight_harmonic(m)
        return float((theta * wm)[inside].sum()) * (1.0 if m == 0 else 0.5)

    def mean_rise(fields: list[np.ndarray]) -> float:
        return sum(term(m, theta) for m, theta in enumerate(fields)) / weight_norm

    def linear_fields(kappa_cells: np.ndarray) -> list[np.ndarray]:
        fields = [solve_harmonic(0, kappa_cells)]
        if d > 0:
            ref = abs(term(0, fields[0]))
            small = 0
            for m in range(1, 2000):
                th = solve_harmonic(m, kappa_cells)
                fields.append(th)
                small = small + 1 if abs(term(m, th)) < 1e-12 * ref else 0
                if small >= 3:
                    break
        return fields

    iterations = 1
    const = np.full(rc.size, kappa_a)
    if kappa_alpha == 0:
        fields = linear_fields(const)
        rise = mean_rise(fields)
        profile_k = fields[0]
    elif use_kirchhoff:
        # U = integral of kappa(T)/kappa_a dT from T_a: linear with kappa_a. T = f(U).
        fields = linear_fields(const)
        a = kappa_alpha

        def inverse(u: np.ndarray) -> np.ndarray:
            if abs(a - 1) < 1e-12:
                return ta * np.exp(u / ta) - ta
            base = 1 + (1 - a) * u / ta
            with np.errstate(invalid="ignore"):
                return ta * np.where(base > 0, base, np.nan) ** (1 / (1 - a)) - ta

        if d == 0:
            profile_k = inverse(fields[0])
            rise = mean_rise([profile_k])
        else:
            phi = np.linspace(0, np.pi, 257)
            u = sum(f[:, None] * np.cos(m * phi)[None, :] for m, f in enumerate(fields))
            tr = inverse(u)
            # azimuthal harmonics of T by trapezoid on [0, pi] (even in phi)
            wphi = np.full(phi.size, phi[1])
            wphi[[0, -1]] *= 0.5
            tm = [(tr * np.cos(m * phi)[None, :] * wphi).sum(axis=1) / np.pi for m in range(64)]
            tm = [tm[0]] + [2 * x for x in tm[1:]]
            profile_k = tm[0]
            rise = mean_rise(tm)
    else:
        kappa_cells = const
        profile_k = np.zeros(rc.size)
        for iterations in range(1, 200):  # noqa: B007
            try:
                fields = linear_fields(kappa_cells)
            except np.linalg.LinAlgError:
                fields = [np.full(rc.size, np.nan)]
            new = fields[0]
            kappa_cells = kappa_w_mk * (t0 / (ta + np.maximum(new, -0.9 * ta))) ** kappa_alpha
            if not np.all(np.isfinite(new)):
                rise = float("nan")
                break
            if np.max(np.abs(new - profile_k)) <= 1e-10 * max(np.max(np.abs(new)), 1e-30):
                profile_k = new
                break
            profile_k = new
        else:  # no break: not converged
            raise InputError(
                f"kappa(T) with alpha {kappa_alpha} did not converge at {absorbed_power_w:.3g} W "
                "absorbed (thermal runaway); a smaller power or alpha is accepted"
            )
        if np.all(np.isfinite(profile_k)):
            rise = mean_rise(fields)
    if not np.isfinite(rise) or rise < 0:
        raise InputError(
            f"kappa(T) with alpha {kappa_alpha} has no steady state at {absorbed_power_w:.3g} W "
            "absorbed (thermal runaway); a smaller power or alpha is accepted"
        )
    gfac = 2 * np.pi * kappa_a * t * rise / absorbed_power_w
    return MembraneSolution(
        temperature_rise_k=float(rise),
        geometry_factor=float(gfac),
        radius_m=rc,
        rise_k=np.asarray(profile_k),
        iterations=iterations,
        harmonics=len(fields),
    )
