"""Absorbed fraction of a laser in a flake, and the Si Raman line's attenuation under a flake.

Absorptance (for Raman thermometry): the fraction of the incident laser power absorbed in the
flake, for a supported flake or a membrane suspended over a hole (bottom ``si``: etched into the
films; ``au``: a gold-bottomed air gap; ``open``: a through-hole), plane wave at normal incidence
(``na_objective`` 0) or averaged over the objective's cone (uniformly filled pupil, s and p).
:func:`absorptance_spread` gives the spread caused by the uncertainty of the hole depth and the
objective's NA, for the Monte Carlo of the thermometry step. A plane-wave coherent cavity model is
unreliable for holes deeper than about 1 um (finite coherence of a focused beam and defocus): such
results carry a warning.

Si Raman attenuation: the Si line under a flake is weaker than on the bare substrate, by the
product of the laser's and the Raman light's transmission into the Si through the stack (the
collection path by reciprocity); the depth profile in Si is the same with and without the flake
and cancels in the ratio.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from flakebook import __version__
from flakebook.errors import InputError
from flakebook.optics.materials import AIR, Material, get_material
from flakebook.optics.microscope import _flake_indices, _flake_thickness, cone_reflectance
from flakebook.optics.stack import cone_nodes, transfer_matrix
from flakebook.optics.substrate import Hole, Substrate

DEEP_HOLE_NM = 1000.0
SI_RAMAN_SHIFT_CM1 = 520.7  # common practice, no source


@dataclass(frozen=True)
class Absorptance:
    """Fractions of the incident laser power: absorbed in the flake, reflected, transmitted
    into the semi-infinite bottom (Si, Au or air), plus what the films below absorb."""

    absorptance_flake: float
    reflectance: float
    transmittance: float
    absorptance_below: float
    geometry: str
    laser_nm: float
    warnings: tuple[str, ...]
    provenance: dict = field(default_factory=dict, compare=False)

    def to_dict(self) -> dict:
        return {
            "absorptance_flake": self.absorptance_flake,
            "reflectance": self.reflectance,
            "transmittance": self.transmittance,
            "geometry": self.geometry,
            "warnings": list(self.warnings),
        }


@dataclass(frozen=True)
class AbsorptanceSpread:
    """Spread of the flake's absorptance from hole-depth and NA uncertainty (Monte Carlo draws)."""

    mean: float
    std: float
    p16: float
    p84: float
    samples: np.ndarray


def _below_arrays(substrate: Substrate | None, geometry: str, hole: Hole | None, depth):
    """Films below the flake as (materials, thickness arrays), and the base, for depth array."""
    if geometry == "supported":
        if substrate is None:
            raise InputError("a supported flake needs its substrate (--oxide-nm or --substrate)")
        return (
            [m for m, _ in substrate.layer_list()],
            [np.asarray(t, float) for _, t in substrate.layer_list()],
            substrate.base,
        )
    if geometry != "suspended":
        raise InputError(f"geometry {geometry!r} is unknown; accepted: supported, suspended")
    hole = hole or Hole()
    if hole.bottom == "open":
        return [], [], AIR
    if substrate is None:
        raise InputError(
            f"a hole with bottom {hole.bottom} needs the substrate (--oxide-nm or --substrate)"
        )
    depth = np.asarray(depth, float)
    if hole.bottom == "au":
        return [AIR], [depth], get_material("Au")
    total = substrate.total_film_nm
    depth = np.minimum(depth, total)
    mats, thick = [AIR], [depth]
    above = 0.0
    for f in substrate.films:
        etched = np.clip(depth - above, 0.0, f.thickness_nm)
        mats.append(f.material)
        thick.append(f.thickness_nm - etched)
        above += f.thickness_nm
    return mats, thick, substrate.base


def _compute(material, layers, laser_nm, substrate, geometry, hole, depth, na, n_angles):
    """Cone- and polarisation-averaged fractions; depth and na are arrays of draws (D,)."""
    lam = np.array([float(laser_nm)])
    lay = np.array([int(layers)])
    no, ne = _flake_indices(material, lay, lam)
    d_flake = _flake_thickness(material, lay)[0]
    mats, thick, base = _below_arrays(substrate, geometry, hole, depth)
    na = np.atleast_1d(np.asarray(na, float))
    unit_s, wt = cone_nodes(0.5, n_angles)
    unit_s = unit_s / 0.5
    if np.all(na == 0):
        st, wt = np.zeros((1, 1)), np.ones(1)
    else:
        st = na[:, None] * unit_s[None, :]  # (D, A)
    n_f = [no[0, 0], *(m.nk(lam)[0] for m in mats)]
    ne_f = [ne[0, 0] if material.is_uniaxial else None] + [
        m.nk_extraordinary(lam)[0] if m.is_uniaxial else None for m in mats
    ]
    d_f = [d_flake, *(np.asarray(t, float)[..., None] if np.ndim(t) else t for t in thick)]
    out = {"a": 0.0, "r": 0.0, "t": 0.0, "below": 0.0}
    for pol in ("s", "p"):
        res = transfer_matrix(n_f, d_f, 1.0, base.nk(lam)[0], laser_nm, st, pol, n_films_e=ne_f)
        a_fl = res.absorptance_films[0]
        for key, q in (
            ("a", a_fl),
            ("r", res.reflectance),
            ("t", res.transmittance),
            ("below", res.absorptance - a_fl),
        ):
            out[key] = out[key] + 0.5 * np.tensordot(q, wt, axes=([-1], [0]))
    return out


def _depth_of(substrate, geometry, hole):
    if geometry != "suspended":
        return 0.0
    hole = hole or Hole()
    if hole.bottom == "open":
        return 0.0
    if substrate is None:
        raise InputError(
            f"a hole with bottom {hole.bottom} needs the substrate (--oxide-nm or --substrate)"
        )
    depth = hole.depth_for(substrate)
    if hole.bottom == "si" and depth > substrate.total_film_nm + 1e-9:
        raise InputError(
            f"hole depth {depth:g} nm is deeper than the films of {substrate.spec} "
            f"({substrate.total_film_nm:g} nm); accepted: up to the film thickness"
        )
    return depth


def absorptance(
    material: Material,
    layers: int,
    laser_nm: float,
    substrate: Substrate | None = None,
    *,
    geometry: str = "supported",
    hole: Hole | None = None,
    na_objective: float = 0.0,
    n_angles: int = 16,
) -> Absorptance:
    """Fraction of the laser power absorbed in a flake of ``layers`` layers.

    ``geometry`` ``supported`` (on ``substrate``) or ``suspended`` (over ``hole``, default a hole
    etched through all films down to the Si). ``na_objective`` 0 is a plane wave at normal
    incidence; otherwise the objective's cone is averaged over (both polarisations).
    """
    if not isinstance(layers, int | np.integer) or layers < 1:
        raise InputError(f"--layers {layers!r}: accepted one whole number >= 1")
    if not (math.isfinite(laser_nm) and laser_nm > 0):
        raise InputError(f"--laser-nm {laser_nm!r}: accepted a positive wavelength in nm")
    if geometry == "suspended" and hole is None:
        hole = Hole()
    depth = _depth_of(substrate, geometry, hole)
    cone_nodes(na_objective, n_angles)  # validate
    out = _compute(
        material,
        layers,
        laser_nm,
        substrate,
        geometry,
        hole,
        np.array(depth),
        na_objective,
        n_angles,
    )
    warnings = []
    if geometry == "suspended" and hole is not None and hole.bottom != "open":
        if depth > DEEP_HOLE_NM:
            warnings.append(
                f"the hole is {depth:g} nm deep: beyond about 1 um the finite coherence of a "
                "focused beam and defocus make this plane-wave cavity model unreliable"
            )

    def f(x):
        return float(np.asarray(x).reshape(-1)[0])

    return Absorptance(
        absorptance_flake=f(out["a"]),
        reflectance=f(out["r"]),
        transmittance=f(out["t"]),
        absorptance_below=f(out["below"]),
        geometry=geometry,
        laser_nm=float(laser_nm),
        warnings=tuple(warnings),
        provenance={
            "flakebook_version": __version__,
            "method": "coherent transfer matrix at the laser line, "
            + (
                "plane wave at normal incidence"
                if na_objective == 0
                else f"averaged over the objective cone NA {na_objective:g} (uniform pupil, s and p)"
            ),
            "material": material.name,
            "data_set": material.data_set(int(layers)).ident,
            "reference": material.data_set(int(layers)).reference,
            "layers": int(layers),
            "substrate": None if substrate is None else substrate.spec,
            "hole": None if hole is None else {"bottom": hole.bottom, "depth_nm": depth},
        },
    )


def absorptance_spread(
    material: Material,
    layers: int,
    laser_nm: float,
    substrate: Substrate | None = None,
    *,
    geometry: str = "supported",
    hole: Hole | None = None,
    na_objective: float = 0.0,
    depth_err_nm: float = 0.0,
    na_objective_err: float = 0.0,
    draws: int = 2000,
    rng: np.random.Generator | None = None,
    n_angles: int = 12,
) -> AbsorptanceSpread:
    """Draws of the flake's absorptance with Gaussian hole depth and objective NA (clipped to the
    physical range), all computed in one vectorised call."""
    if depth_err_nm < 0 or na_objective_err < 0 or draws < 1:
        raise InputError("uncertainties must be >= 0 and draws >= 1")
    if geometry == "suspended" and hole is None:
        hole = Hole()
    rng = np.random.default_rng() if rng is None else rng
    depth0 = _depth_of(substrate, geometry, hole)
    depth = np.maximum(depth0 + depth_err_nm * rng.standard_normal(draws), 0.0)
    na = np.clip(na_objective + na_objective_err * rng.standard_normal(draws), 0.0, 0.95)
    out = _compute(material, layers, laser_nm, substrate, geometry, hole, depth, na, n_angles)
    a = np.broadcast_to(np.asarray(out["a"]).reshape(-1), (draws,)).copy()
    a.setflags(write=False)
    return AbsorptanceSpread(
        mean=float(a.mean()),
        std=float(a.std(ddof=1)) if draws > 1 else 0.0,
        p16=float(np.percentile(a, 16)),
        p84=float(np.percentile(a, 84)),
        samples=a,
    )


def raman_wavelength_nm(laser_nm: float, shift_cm1: float) -> float:
    """Wavelength of a Stokes Raman line: 1/lambda = 1/lambda_laser - shift."""
    inv = 1e7 / float(laser_nm) - float(shift_cm1)
    if inv <= 0:
        raise InputError("Raman shift larger than the laser's wavenumber")
    return 1e7 / inv


def si_raman_attenuation(
    material: Material,
    layers,
    substrate: Substrate,
    *,
    laser_nm: float = 532.0,
    shift_cm1: float = SI_RAMAN_SHIFT_CM1,
    na_objective: float = 0.0,
    n_angles: int = 12,
) -> np.ndarray:
    """I_Si(flake of N layers) / I_Si(bare substrate) for each N in ``layers`` (supported)."""
    lam = np.array([float(laser_nm), raman_wavelength_nm(laser_nm, shift_cm1)])
    common = {"na": na_objective, "n_angles": n_angles, "quantity": "transmittance"}
    bare = cone_reflectance(None, (), substrate, lam, **common)[0]
    under = cone_reflectance(material, layers, substrate, lam, **common)
    return np.prod(under / bare[None, :], axis=1)


def si_raman_likelihood(
    ratio: float,
    ratio_err: float,
    material: Material,
    substrate: Substrate,
    *,
    max_layers: int = 15,
    laser_nm: float = 532.0,
    na_objective: float = 0.0,
    model_rel_err: float = 0.03,
) -> np.ndarray:
    """Likelihood over N = 1..max_layers and "more" from a measured Si-line ratio (flake/bare)."""
    if not (math.isfinite(ratio) and ratio > 0 and math.isfinite(ratio_err) and ratio_err >= 0):
        raise InputError("the Si Raman ratio must be > 0 and its error >= 0")
    n = np.arange(1, 101)
    model = si_raman_attenuation(
        material, n, substrate, laser_nm=laser_nm, na_objective=na_objective
    )
    var = ratio_err**2 + (model_rel_err * model) ** 2
    ll = -0.5 * ((ratio - model) ** 2 / var + np.log(var))
    like = np.exp(ll - ll.max())
    return np.concatenate([like[:max_layers], [like[max_layers:].mean()]])
