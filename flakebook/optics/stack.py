"""Coherent transfer-matrix optics of a planar stack of films.

Reflectance R, transmittance T (the power that enters the semi-infinite base), the absorbed
fraction of every film and their sum A = 1 - R - T, for s or p polarisation at any angle, computed
at once over arrays of wavelength, angle and film thickness (everything broadcasts; there is no
Python loop over wavelengths or angles, only over the few films).

The method is the characteristic-matrix (admittance) form of the transfer matrix: every film has
a tilted optical admittance (s: q, p: eps_o/q, with q = k_z/k_0) and a phase thickness
delta = k_0 q d. Films may be uniaxial with the optic axis normal to the layers (in-plane index
n_o, out-of-plane n_e): for p polarisation q = sqrt(eps_o (1 - beta^2/eps_e)), for s only n_o
matters. Light arrives from a lossless ambient medium of index n_0 at angle theta with
beta = n_0 sin(theta). The recursion runs from the base upwards with normalised fields, so thick
absorbing films neither overflow nor lose precision.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from flakebook.errors import InputError

_MAX_IM_DELTA = 300.0  # exp(600) stays finite; beyond this a film is opaque to machine precision


@dataclass(frozen=True)
class StackResult:
    """R, T, A (broadcast shape of the inputs) and the absorbed fraction in each film (top down).

    ``r`` is the complex amplitude reflection coefficient in the admittance convention
    (r = (Y0 - Y)/(Y0 + Y)); its phase convention for p differs from some texts, R = |r|^2 not.
    """

    r: np.ndarray
    reflectance: np.ndarray
    transmittance: np.ndarray
    absorptance: np.ndarray
    absorptance_films: tuple[np.ndarray, ...]


def _qz(eps: np.ndarray, beta2: np.ndarray, eps_e: np.ndarray | None, pol: str) -> np.ndarray:
    """Normalised k_z with the decaying / forward branch (Im q >= 0, Re q >= 0 when Im q = 0)."""
    if pol == "p" and eps_e is not None:
        q = np.sqrt(eps * (1.0 - beta2 / eps_e))
    else:
        q = np.sqrt(eps - beta2)
    flip = (q.imag < 0) | ((q.imag == 0) & (q.real < 0))
    q = np.where(flip, -q, q)
    return np.where(np.abs(q) < 1e-12, 1e-12 + 0j, q)


def _admittance(eps: np.ndarray, q: np.ndarray, pol: str) -> np.ndarray:
    return q if pol == "s" else eps / q


def transfer_matrix(
    n_films: Sequence,
    thickness_nm: Sequence,
    n_ambient,
    n_base,
    wavelength_nm,
    sin_theta,
    polarization: str,
    *,
    n_films_e: Sequence | None = None,
) -> StackResult:
    """R, T and absorbed fractions of a planar stack.

    Parameters
    ----------
    n_films, thickness_nm:
        Complex index (n + ik, k >= 0) and thickness in nm of each film, top down; each entry an
        array that broadcasts with the others and with ``wavelength_nm`` and ``sin_theta``.
    n_ambient:
        Real index of the medium the light comes from (air: 1).
    n_base:
        Complex index of the semi-infinite medium below the films.
    wavelength_nm:
        Vacuum wavelength in nm (array).
    sin_theta:
        Sine of the angle of incidence in the ambient medium (array), 0 <= sin_theta < 1.
    polarization:
        ``"s"`` or ``"p"``.
    n_films_e:
        Optional out-of-plane (extraordinary) index of each film, None entries for isotropic
        films; used for p polarisation only.

    Returns
    -------
    StackResult with arrays of the broadcast shape.
    """
    if polarization not in ("s", "p"):
        raise InputError(f"polarization {polarization!r} is unknown; accepted: s or p")
    if len(n_films) != len(thickness_nm):
        raise InputError("n_films and thickness_nm must list the same films")
    n0 = np.asarray(n_ambient)
    if np.any(np.abs(np.imag(n0)) > 0):
        raise InputError("the ambient medium must be lossless (real index)")
    n0 = np.real(n0).astype(float)
    lam = np.asarray(wavelength_nm, dtype=float)
    st = np.asarray(sin_theta, dtype=float)
    if np.any(st < 0) or np.any(st >= 1):
        raise InputError("angles of incidence must lie in [0, 90) degrees")
    beta = n0 * st
    beta2 = beta * beta
    k0 = 2.0 * np.pi / lam
    pol = polarization

    eps0 = n0.astype(complex) ** 2
    q0 = np.sqrt(eps0 - beta2)
    y0 = np.real(_admittance(eps0, q0, pol))

    eps_b = np.asarray(n_base, dtype=complex) ** 2
    y = _admittance(eps_b, _qz(eps_b, beta2, None, pol), pol)
    y_base = y

    films_e = list(n_films_e) if n_films_e is not None else [None] * len(n_films)
    gs: list[np.ndarray] = []
    y_below: list[np.ndarray] = []
    y_above: list[np.ndarray] = []
    for n_j, d_j, ne_j in zip(
        reversed(list(n_films)), reversed(list(thickness_nm)), reversed(films_e)
    ):
        eps = np.asarray(n_j, dtype=complex) ** 2
        eps_e = None if ne_j is None else np.asarray(ne_j, dtype=complex) ** 2
        q = _qz(eps, beta2, eps_e, pol)
        yj = _admittance(eps, q, pol)
        delta = k0 * q * np.asarray(d_j, dtype=float)
        delta = delta.real + 1j * np.clip(delta.imag, -_MAX_IM_DELTA, _MAX_IM_DELTA)
        c, s = np.cos(delta), np.sin(delta)
        g = c - 1j * s * y / yj
        y_new = (c * y - 1j * s * yj) / g
        gs.append(g)
        y_below.append(y)
        y_above.append(y_new)
        y = y_new

    y_in = y
    denom = y0 + y_in
    r = (y0 - y_in) / denom
    R = np.abs(r) ** 2
    norm = 4.0 * y0 / np.abs(denom) ** 2
    # Top down: |B_bottom/B_top_of_stack|^2 shrinks by 1/|g|^2 per film.
    amp2 = np.ones(np.shape(y_in))
    films_a: list[np.ndarray] = []
    for g, yb, ya in zip(reversed(gs), reversed(y_below), reversed(y_above)):
        flux_top = norm * amp2 * np.real(ya)
        amp2 = amp2 / np.abs(g) ** 2
        flux_bot = norm * amp2 * np.real(yb)
        films_a.append(np.asarray(flux_top - flux_bot))
    T = norm * amp2 * np.real(y_base)
    shape = np.broadcast_shapes(np.shape(R), np.shape(T))
    R = np.broadcast_to(R, shape).copy()
    T = np.broadcast_to(T, shape).copy()
    films_a = [np.broadcast_to(a, shape).copy() for a in films_a]
    A = np.sum(films_a, axis=0) if films_a else np.zeros(shape)
    return StackResult(
        r=np.broadcast_to(r, shape).copy(),
        reflectance=R,
        transmittance=T,
        absorptance=np.asarray(A),
        absorptance_films=tuple(films_a),
    )


def _film_q(eps, beta2, ne, pol):
    if pol == "p" and ne is not None:
        q = np.sqrt(eps * (1.0 - beta2 / np.asarray(ne, dtype=complex) ** 2))
    else:
        q = np.sqrt(eps - beta2)
    return q + (q == 0) * 1e-12


def _phase_factor(two_delta):
    """exp(2 i delta), limited so that films with the wrong k_z branch cannot overflow."""
    if np.any(two_delta.imag < -2 * _MAX_IM_DELTA):
        two_delta = two_delta.real + 1j * np.maximum(two_delta.imag, -2 * _MAX_IM_DELTA)
    return np.exp(1j * two_delta)


def _on_top(y, yj, e):
    """Admittance seen above a film (admittance yj, phase factor e) lying on admittance y.

    The tangent form of the characteristic matrix: with i tan(delta) = (e - 1)/(e + 1),
    Y' = yj (Y - i yj tan delta)/(yj - i Y tan delta). For finite films the branch of k_z does
    not matter (the expression is even in it).
    """
    a = y + yj
    be = (y - yj) * e
    return yj * (a + be) / (a - be)


def _ambient(n_ambient, sin_theta, pol):
    n0 = np.real(np.asarray(n_ambient))
    st = np.asarray(sin_theta, dtype=float)
    if np.any(st < 0) or np.any(st >= 1):
        raise InputError("angles of incidence must lie in [0, 90) degrees")
    beta2 = (n0 * st) ** 2
    eps0 = np.asarray(n0, dtype=complex) ** 2
    y0 = np.real(_admittance(eps0, np.sqrt(eps0 - beta2), pol))
    return beta2, y0


def stack_admittance(
    n_films: Sequence,
    thickness_nm: Sequence,
    n_ambient,
    n_base,
    wavelength_nm,
    sin_theta,
    polarization: str,
    *,
    n_films_e: Sequence | None = None,
) -> np.ndarray:
    """Optical admittance seen from the ambient medium at the top of the stack (no fields)."""
    if polarization not in ("s", "p"):
        raise InputError(f"polarization {polarization!r} is unknown; accepted: s or p")
    pol = polarization
    beta2, _ = _ambient(n_ambient, sin_theta, pol)
    k0 = 2.0 * np.pi / np.asarray(wavelength_nm, dtype=float)
    eps_b = np.asarray(n_base, dtype=complex) ** 2
    y = _admittance(eps_b, _qz(eps_b, beta2, None, pol), pol)
    films_e = list(n_films_e) if n_films_e is not None else [None] * len(n_films)
    for n_j, d_j, ne_j in zip(
        reversed(list(n_films)), reversed(list(thickness_nm)), reversed(films_e)
    ):
        eps = np.asarray(n_j, dtype=complex) ** 2
        q = _film_q(eps, beta2, ne_j, pol)
        yj = q if pol == "s" else eps / q
        e = _phase_factor((2.0 * k0 * np.asarray(d_j, dtype=float)) * q)
        y = _on_top(y, yj, e)
    return y


def reflectance_from_admittance(y, n_ambient, sin_theta, polarization: str) -> np.ndarray:
    """R = |(Y0 - Y)/(Y0 + Y)|^2 for the admittance Y seen from the ambient medium."""
    _, y0 = _ambient(n_ambient, sin_theta, polarization)
    r = (y0 - y) / (y0 + y)
    return r.real**2 + r.imag**2


def stack_reflectance(
    n_films: Sequence,
    thickness_nm: Sequence,
    n_ambient,
    n_base,
    wavelength_nm,
    sin_theta,
    polarization: str,
    *,
    n_films_e: Sequence | None = None,
) -> np.ndarray:
    """Reflectance R only, same arguments and broadcasting as :func:`transfer_matrix`.

    A faster path for contrast tables: the admittance recursion with no field bookkeeping.
    """
    y = stack_admittance(
        n_films,
        thickness_nm,
        n_ambient,
        n_base,
        wavelength_nm,
        sin_theta,
        polarization,
        n_films_e=n_films_e,
    )
    return reflectance_from_admittance(y, n_ambient, sin_theta, polarization)


def repeated_film_reflectance(
    n_film,
    unit_thickness_nm: float,
    counts,
    y_below,
    n_ambient,
    wavelength_nm,
    sin_theta,
    polarization: str,
    *,
    n_film_e=None,
) -> np.ndarray:
    """R of a film of ``counts`` x ``unit_thickness_nm`` (one index for all counts) on top of a
    stack whose admittance is ``y_below``; ``counts`` runs along a new leading axis.

    A film of N unit layers has the phase factor exp(2 i delta_1)^N, so one transcendental
    evaluation serves every N (powers by repeated multiplication; relative rounding ~N*1e-16).
    """
    pol = polarization
    beta2, _ = _ambient(n_ambient, sin_theta, pol)
    k0 = 2.0 * np.pi / np.asarray(wavelength_nm, dtype=float)
    eps = np.asarray(n_film, dtype=complex) ** 2
    q = _film_q(eps, beta2, n_film_e, pol)
    yj = q if pol == "s" else eps / q
    e1 = _phase_factor((2.0 * k0 * float(unit_thickness_nm)) * q)
    counts = np.asarray(counts, dtype=int)
    if counts.ndim != 1 or counts.size == 0 or np.any(counts < 0):
        raise InputError("counts must be a non-empty 1-d list of whole numbers >= 0")
    shape = np.broadcast_shapes(np.shape(e1), np.shape(y_below), np.shape(yj))
    e1 = np.broadcast_to(e1, shape)
    lo, hi = int(counts.min()), int(counts.max())
    # e1**N by repeated multiplication: one cumulative product over lo..hi.
    run = np.empty((hi - lo + 1, *shape), dtype=complex)
    run[0] = e1**lo if lo != 1 else e1
    if hi > lo:
        run[1:] = e1
        np.cumprod(run, axis=0, out=run)
    contiguous = counts.size == hi - lo + 1 and np.all(np.diff(counts) == 1)
    e = run if contiguous else run[counts - lo]
    # r = (Y0 - Y)/(Y0 + Y) with Y = yj (a + b e)/(a - b e), a = Yb + yj, b = Yb - yj:
    # r = ((Y0 - yj) a - (Y0 + yj) b e) / ((Y0 + yj) a + (yj - Y0) b e).
    _, y0 = _ambient(n_ambient, sin_theta, pol)
    a = y_below + yj
    b = y_below - yj
    p_ = (y0 - yj) * a
    q_ = (y0 + yj) * a
    u = (y0 + yj) * b
    v = (yj - y0) * b
    # In place on the (counts, ...) arrays: this is the hot loop of contrast tables.
    num = np.multiply(u, e)
    np.subtract(p_, num, out=num)
    den = np.multiply(v, e, out=e if e is run else None)
    np.add(q_, den, out=den)
    np.divide(num, den, out=num)
    out = np.square(num.real)
    out += np.square(num.imag)
    return out


def cone_nodes(na: float, n_angles: int = 16, n_ambient: float = 1.0):
    """Quadrature over an illumination (or focusing) cone of numerical aperture ``na``.

    Returns ``(sin_theta, weights)``: Gauss-Legendre nodes in sin(theta) on [0, na/n_ambient]
    with weights for a uniformly filled pupil (aplanatic: weight ~ sin(theta) d sin(theta)),
    normalised to sum to 1. ``na`` = 0 gives normal incidence (one node, weight 1). A uniformly
    filled pupil is common practice, no source.
    """
    na = float(na)
    if not np.isfinite(na) or na < 0 or na >= n_ambient:
        raise InputError(
            f"numerical aperture {na!r} is not allowed; accepted: 0 <= NA < {n_ambient:g}"
        )
    if na == 0:
        return np.zeros(1), np.ones(1)
    if int(n_angles) < 1:
        raise InputError(f"n_angles {n_angles!r}: accepted a whole number >= 1")
    x, w = np.polynomial.legendre.leggauss(int(n_angles))
    smax = na / n_ambient
    s = 0.5 * smax * (x + 1.0)
    wt = w * s
    return s, wt / wt.sum()
