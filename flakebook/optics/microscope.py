"""The microscope as the contrast model sees it, and the channel contrast of a flake.

- Illumination: its spectrum (CIE illuminant A for a halogen lamp, a blackbody of a given
  temperature, a flat band, a bandpass filter in front of a lamp, or one wavelength) and the
  numerical aperture of the illumination cone (condenser or aperture diaphragm), separate from the
  objective's. The model averages over that cone (uniformly filled pupil) and over s and p
  (unpolarised light); NA 0 is normal incidence.
- Camera channels: sensitivities S_c(lambda). ``srgb``: the linear sRGB primaries built from the
  CIE 1931 2-degree observer (IEC 61966-2-1 matrix applied to x-bar, y-bar, z-bar), i.e. what a
  linearised sRGB image records; ``mono``: a flat response over the spectral grid; or a user CSV.

Optical contrast per channel, DESIGN.md's definition:
    C = 1 - (integral R_flake I S) / (integral R_reference I S),
with the bare supported substrate as the reference, also for a flake over a hole. Positive when
the flake is darker.
"""

from __future__ import annotations

import csv
import functools
import hashlib
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from flakebook.errors import InputError
from flakebook.optics.materials import Material
from flakebook.optics.stack import (
    cone_nodes,
    reflectance_from_admittance,
    repeated_film_reflectance,
    stack_admittance,
    transfer_matrix,
)
from flakebook.optics.substrate import Hole, Substrate

GEOMETRIES = ("supported", "suspended")
DEFAULT_GRID_NM = (400.0, 800.0, 2.0)

# Planck's second radiation constant as used by CIE 15 for illuminant A, in nm K.
_C2_CIE_A_NM_K = 1.435e7
_C2_NM_K = 1.438776877e7  # CODATA 2018 second radiation constant


@functools.lru_cache(maxsize=1)
def _cie_tables() -> dict:
    """The CIE tables of ``resources/cie_tables.json`` (illuminant A, the CIE 1931 2-degree
    observer, the sRGB matrix), copied from colour-science and checked against it by the tests;
    read from a file because importing colour-science takes about a second."""
    import json

    from flakebook._resources import resource_path

    return json.loads(resource_path("cie_tables.json").read_text(encoding="utf-8"))


@functools.lru_cache(maxsize=1)
def _cie_a_table() -> tuple[np.ndarray, np.ndarray]:
    sd = _cie_tables()["illuminant_a"]
    return np.asarray(sd["wavelength_nm"], float), np.asarray(sd["value"], float)


def cie_illuminant_a(wavelength_nm) -> np.ndarray:
    """CIE standard illuminant A (relative, 100 at 560 nm).

    colour-science's table where it has one; beyond it the CIE's defining formula (CIE 15),
    which the table itself follows.
    """
    lam = np.asarray(wavelength_nm, float)
    w, v = _cie_a_table()
    formula = (
        100.0
        * (560.0 / lam) ** 5
        * np.expm1(_C2_CIE_A_NM_K / (2848.0 * 560.0))
        / np.expm1(_C2_CIE_A_NM_K / (2848.0 * lam))
    )
    inside = (lam >= w[0]) & (lam <= w[-1])
    return np.where(inside, np.interp(lam, w, v), formula)


def planck(wavelength_nm, temperature_k: float) -> np.ndarray:
    """Blackbody spectral radiance shape (relative), normalised to 1 at 560 nm."""
    lam = np.asarray(wavelength_nm, float)
    t = float(temperature_k)
    return (560.0 / lam) ** 5 * np.expm1(_C2_NM_K / (t * 560.0)) / np.expm1(_C2_NM_K / (t * lam))


@dataclass(frozen=True)
class Illumination:
    """The illumination spectrum.

    ``kind``: ``halogen`` (CIE illuminant A), ``blackbody`` (``temperature_k``), ``band`` (flat
    from ``low_nm`` to ``high_nm``), ``bandpass`` (a Gaussian filter of ``center_nm`` and
    ``fwhm_nm`` in front of a halogen lamp) or ``monochromatic`` (``center_nm``).
    """

    kind: str = "halogen"
    temperature_k: float | None = None
    low_nm: float | None = None
    high_nm: float | None = None
    center_nm: float | None = None
    fwhm_nm: float | None = None

    @classmethod
    def halogen(cls) -> Illumination:
        return cls("halogen")

    @classmethod
    def blackbody(cls, temperature_k: float) -> Illumination:
        t = float(temperature_k)
        if not (t > 0 and np.isfinite(t)):
            raise InputError(f"blackbody temperature {temperature_k!r}: accepted a positive K")
        return cls("blackbody", temperature_k=t)

    @classmethod
    def band(cls, low_nm: float, high_nm: float) -> Illumination:
        lo, hi = float(low_nm), float(high_nm)
        if not (0 < lo < hi):
            raise InputError(f"band {low_nm}-{high_nm} nm: accepted LOW-HIGH with 0 < LOW < HIGH")
        return cls("band", low_nm=lo, high_nm=hi)

    @classmethod
    def bandpass(cls, center_nm: float, fwhm_nm: float) -> Illumination:
        c, f = float(center_nm), float(fwhm_nm)
        if not (c > 0 and f > 0):
            raise InputError("bandpass filter: accepted a positive centre and FWHM in nm")
        return cls("bandpass", center_nm=c, fwhm_nm=f)

    @classmethod
    def monochromatic(cls, wavelength_nm: float) -> Illumination:
        w = float(wavelength_nm)
        if not (w > 0 and np.isfinite(w)):
            raise InputError(f"--wavelength-nm {wavelength_nm!r}: accepted a positive number")
        return cls("monochromatic", center_nm=w)

    @classmethod
    def parse(cls, text: str) -> Illumination:
        """``halogen``, ``blackbody:3200``, ``band:450-650`` or ``bandpass:550/10``."""
        t = str(text).strip().lower()
        try:
            if t == "halogen":
                return cls.halogen()
            if t.startswith("blackbody:"):
                return cls.blackbody(float(t.split(":", 1)[1]))
            if t.startswith("band:"):
                lo, hi = t.split(":", 1)[1].split("-", 1)
                return cls.band(float(lo), float(hi))
            if t.startswith("bandpass:"):
                c, f = t.split(":", 1)[1].split("/", 1)
                return cls.bandpass(float(c), float(f))
        except ValueError:
            pass
        raise InputError(
            f"--illumination {text!r} is not understood; accepted: halogen, blackbody:3200, "
            "band:450-650, bandpass:550/10"
        )

    def spectrum(self, wavelength_nm) -> np.ndarray:
        """Relative spectral power at ``wavelength_nm``."""
        lam = np.asarray(wavelength_nm, float)
        if self.kind == "halogen":
            return cie_illuminant_a(lam)
        if self.kind == "blackbody":
            return planck(lam, self.temperature_k)
        if self.kind == "band":
            return ((lam >= self.low_nm) & (lam <= self.high_nm)).astype(float)
        if self.kind == "bandpass":
            sigma = self.fwhm_nm / (2.0 * np.sqrt(2.0 * np.log(2.0)))
            return cie_illuminant_a(lam) * np.exp(-0.5 * ((lam - self.center_nm) / sigma) ** 2)
        if self.kind == "monochromatic":
            return np.isclose(lam, self.center_nm).astype(float)
        raise InputError(f"illumination kind {self.kind!r} is unknown")

    def grid_nm(self, step_nm: float = DEFAULT_GRID_NM[2]) -> np.ndarray:
        """The wavelengths the channel integrals run over."""
        if self.kind == "monochromatic":
            return np.array([self.center_nm])
        lo, hi = DEFAULT_GRID_NM[:2]
        if self.kind == "band":
            lo, hi = self.low_nm, self.high_nm
        elif self.kind == "bandpass":
            half = 3.0 * self.fwhm_nm
            lo, hi = max(self.center_nm - half, 300.0), self.center_nm + half
            step_nm = min(step_nm, self.fwhm_nm / 8.0)
        n = max(int(round((hi - lo) / step_nm)) + 1, 2)
        return np.linspace(lo, hi, n)

    @property
    def label(self) -> str:
        if self.kind == "halogen":
            return "halogen (CIE illuminant A)"
        if self.kind == "blackbody":
            return f"blackbody {self.temperature_k:g} K"
        if self.kind == "band":
            return f"band {self.low_nm:g}-{self.high_nm:g} nm"
        if self.kind == "bandpass":
            return f"bandpass {self.center_nm:g} nm, FWHM {self.fwhm_nm:g} nm, halogen lamp"
        return f"{self.center_nm:g} nm"


@dataclass(frozen=True)
class Channels:
    """Camera channel sensitivities: ``names`` and a table over ``wavelength_nm``.

    Equality and hashing use ``ident``. ``sensitivity(wavelength_nm)`` returns an array of shape
    (channels, wavelengths), zero outside the table.
    """

    ident: str
    names: tuple[str, ...]
    _wavelength_nm: np.ndarray | None = field(default=None, compare=False, hash=False, repr=False)
    _table: np.ndarray | None = field(default=None, compare=False, hash=False, repr=False)

    @classmethod
    def srgb(cls) -> Channels:
        """Linear sRGB channels r, g, b from the CIE 1931 2-degree observer."""
        return _srgb()

    @classmethod
    def mono(cls) -> Channels:
        """One channel with a flat response."""
        return cls("mono", ("mono",))

    @classmethod
    def parse(cls, text: str) -> Channels:
        t = str(text).strip()
        if t.lower() == "srgb":
            return cls.srgb()
        if t.lower() == "mono":
            return cls.mono()
        if t.lower().endswith(".csv"):
            return channels_from_csv(t)
        raise InputError(
            f"--channels {text!r}: accepted srgb, mono, or a CSV file of channel sensitivities"
        )

    def sensitivity(self, wavelength_nm) -> np.ndarray:
        lam = np.asarray(wavelength_nm, float)
        if self._table is None:
            return np.ones((1, lam.size))
        return np.stack(
            [np.interp(lam, self._wavelength_nm, row, left=0.0, right=0.0) for row in self._table]
        )


@functools.lru_cache(maxsize=1)
def _srgb() -> Channels:
    tables = _cie_tables()
    cmfs = tables["cie1931_2deg"]
    w = np.asarray(cmfs["wavelength_nm"], float)
    xyz = np.stack([np.asarray(cmfs[k], float) for k in "xyz"], axis=1)  # (W, 3)
    m = np.asarray(tables["srgb_xyz_to_rgb"], float)
    table = (xyz @ m.T).T  # (3, W)
    table.setflags(write=False)
    return Channels("srgb", ("r", "g", "b"), w, table)


def channels_from_csv(path: str | Path) -> Channels:
    """Channels from a CSV with a ``wavelength_nm`` column and one column per channel."""
    path = Path(path)
    try:
        raw = path.read_bytes()
        rows = list(csv.reader(raw.decode("utf-8-sig").splitlines()))
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"{path}: cannot read the channel file ({exc})") from None
    rows = [r for r in rows if any(c.strip() for c in r)]
    if len(rows) < 3 or len(rows[0]) < 2:
        raise InputError(
            f"{path}: a channel file needs a header wavelength_nm,NAME[,NAME...] and rows of numbers"
        )
    header = [h.strip() for h in rows[0]]
    if header[0].lower() != "wavelength_nm":
        raise InputError(f"{path}: the first column must be wavelength_nm, found {header[0]!r}")
    try:
        data = np.array([[float(c) for c in r] for r in rows[1:]])
    except ValueError:
        raise InputError(f"{path}: every cell below the header must be a number") from None
    if data.shape[1] != len(header) or not np.all(np.isfinite(data)):
        raise InputError(f"{path}: every row needs {len(header)} finite numbers")
    data = data[np.argsort(data[:, 0])]
    if np.any(np.diff(data[:, 0]) <= 0):
        raise InputError(f"{path}: wavelengths must increase without repeats")
    if np.any(data[:, 1:].sum(axis=0) <= 0):
        raise InputError(f"{path}: every channel needs a positive total sensitivity")
    names = tuple(h for h in header[1:])
    if len(set(names)) != len(names):
        raise InputError(f"{path}: channel names repeat")
    digest = hashlib.sha256(raw).hexdigest()[:12]
    return Channels(f"csv:{path.name}#{digest}", names, data[:, 0].copy(), data[:, 1:].T.copy())


@dataclass(frozen=True)
class Microscope:
    """What the contrast model needs to know about the microscope and camera.

    ``na_illumination``: NA of the illumination cone (0 = normal incidence). ``illumination``:
    the lamp or filter spectrum. ``channels``: camera channels (ignored for monochromatic light,
    which has one channel named ``mono``). ``n_angles``: quadrature nodes over the cone.
    ``na_objective`` (optional): the objective's NA, which collects the specular reflection of
    every illumination angle as long as NA_illumination <= NA_objective (checked).
    """

    na_illumination: float = 0.0
    illumination: Illumination = field(default_factory=Illumination.halogen)
    channels: Channels = field(default_factory=Channels.srgb)
    n_angles: int = 8
    wavelength_step_nm: float = DEFAULT_GRID_NM[2]
    na_objective: float | None = None

    def __post_init__(self) -> None:
        cone_nodes(self.na_illumination, self.n_angles)  # validates the NA
        if self.na_objective is not None:
            cone_nodes(self.na_objective, 1)
            if self.na_illumination > self.na_objective + 1e-12:
                raise InputError(
                    f"illumination NA {self.na_illumination:g} exceeds the objective's NA "
                    f"{self.na_objective:g}: in reflected-light illumination through the objective "
                    "the illumination cone cannot be wider; accepted: NA_illumination <= "
                    "NA_objective"
                )

    @property
    def channel_names(self) -> tuple[str, ...]:
        if self.illumination.kind == "monochromatic":
            return ("mono",)
        return self.channels.names

    def weights(self) -> tuple[np.ndarray, np.ndarray]:
        """(wavelength grid, channel weights I*S*dlambda of shape (channels, wavelengths))."""
        lam = self.illumination.grid_nm(self.wavelength_step_nm)
        if self.illumination.kind == "monochromatic":
            return lam, np.ones((1, 1))
        dl = _trapezoid_weights(lam)
        w = self.illumination.spectrum(lam)[None, :] * self.channels.sensitivity(lam) * dl[None, :]
        return lam, w

    @property
    def wavelength_nm(self) -> float | None:
        """The single wavelength for monochromatic light, else None."""
        return self.illumination.center_nm if self.illumination.kind == "monochromatic" else None


def _trapezoid_weights(lam: np.ndarray) -> np.ndarray:
    """Trapezoid-rule weights of a sorted wavelength grid."""
    if lam.size < 2:
        return np.ones(lam.size)
    d = np.diff(lam)
    w = np.zeros(lam.size)
    w[:-1] += 0.5 * d
    w[1:] += 0.5 * d
    return w


# ---- the model ----------------------------------------------------------------------------


def _flake_thickness(material: Material, layers: np.ndarray) -> np.ndarray:
    if material.layer_spacing_nm is None:
        raise InputError(
            f"material {material.name} has no layer spacing, so a layer number has no thickness; "
            "accepted: a layered material (MoS2, MoSe2, WS2, WSe2, hBN) or one with a layer spacing"
        )
    return layers.astype(float) * material.layer_spacing_nm


def _flake_indices(material: Material, layers: np.ndarray, lam: np.ndarray):
    """In-plane and out-of-plane index of each film, shape (len(layers), len(lam))."""
    no = np.empty((layers.size, lam.size), complex)
    ne = np.empty_like(no)
    cache: dict[int | None, tuple[np.ndarray, np.ndarray]] = {}
    resolved = {n for n, _ in material.by_layers}
    for i, n in enumerate(layers):
        key = int(n) if int(n) in resolved else None
        if key not in cache:
            cache[key] = (
                material.nk(lam, key),
                material.nk_extraordinary(lam, key),
            )
        no[i], ne[i] = cache[key]
    return no, ne


def _below(substrate: Substrate, geometry: str, hole: Hole | None):
    if geometry not in GEOMETRIES:
        raise InputError(f"geometry {geometry!r} is unknown; accepted: {', '.join(GEOMETRIES)}")
    if geometry == "supported":
        return substrate.layer_list(), substrate.base
    return (hole or Hole()).below_membrane(substrate)


def _stack_indices(films, base: Material, lam: np.ndarray):
    n_f = [m.nk(lam)[None, :, None] for m, _ in films]
    ne_f = [m.nk_extraordinary(lam)[None, :, None] if m.is_uniaxial else None for m, _ in films]
    d_f = [float(d) for _, d in films]
    return n_f, ne_f, d_f, base.nk(lam)[None, :, None]


def cone_reflectance(
    material: Material | None,
    layers,
    substrate: Substrate,
    wavelength_nm,
    *,
    na: float = 0.0,
    n_angles: int = 16,
    geometry: str = "supported",
    hole: Hole | None = None,
    quantity: str = "reflectance",
    grid: bool = False,
) -> np.ndarray:
    """R (or T into the base, or the flake's absorbed fraction) averaged over a cone and s, p.

    ``material`` None (or ``layers`` empty) gives the bare stack. Returns shape
    (len(layers), len(wavelength_nm)); for the bare stack (1, len(wavelength_nm)).
    ``quantity``: ``reflectance``, ``transmittance`` or ``absorptance_flake``. ``grid`` True
    returns instead ``{"s": array, "p": array}`` of shape (layers, wavelengths, angles) before the
    cone average (the nodes are :func:`flakebook.optics.stack.cone_nodes`).
    """
    lam = np.atleast_1d(np.asarray(wavelength_nm, float))
    st, wt = cone_nodes(na, n_angles)
    films, base = _below(substrate, geometry, hole)
    n_f, ne_f, d_f, n_b = _stack_indices(films, base, lam)
    lay = None
    if material is not None:
        lay = np.atleast_1d(np.asarray(layers))
        if lay.size == 0:
            raise InputError("no layer numbers given")
        if np.any(lay < 0) or np.any(lay != np.round(lay)):
            raise InputError(f"layer numbers {layers!r}: accepted whole numbers >= 0")
        lay = lay.astype(int)
        _flake_thickness(material, lay)  # checks the layer spacing
    elif geometry != "supported":
        raise InputError("a suspended geometry needs a flake")
    if quantity not in ("reflectance", "transmittance", "absorptance_flake"):
        raise InputError(f"quantity {quantity!r} unknown")
    if quantity == "absorptance_flake" and material is None:
        raise InputError("absorptance_flake needs a flake")
    lam3, st3 = lam[None, :, None], st[None, None, :]
    out: dict[str, np.ndarray] = {}
    for pol in ("s", "p"):
        if quantity == "reflectance":
            y_below = stack_admittance(n_f, d_f, 1.0, n_b, lam3, st3, pol, n_films_e=ne_f)
            if material is None:
                q = reflectance_from_admittance(y_below, 1.0, st3, pol)
            else:
                q = np.empty((lay.size, lam.size, st.size))
                for key, idx in _groups(material, lay).items():
                    no = material.nk(lam, key)[None, :, None]
                    ne = material.nk_extraordinary(lam, key)[None, :, None]
                    q[idx] = repeated_film_reflectance(
                        no,
                        material.layer_spacing_nm,
                        lay[idx],
                        y_below,
                        1.0,
                        lam3,
                        st3,
                        pol,
                        n_film_e=ne if material.is_uniaxial else None,
                    )[:, 0]
        else:
            nf, nef, df = n_f, ne_f, d_f
            if material is not None:
                no, ne = _flake_indices(material, lay, lam)
                d = _flake_thickness(material, lay)[:, None, None]
                nf = [no[:, :, None], *n_f]
                nef = [ne[:, :, None] if material.is_uniaxial else None, *ne_f]
                df = [d, *d_f]
            res = transfer_matrix(nf, df, 1.0, n_b, lam3, st3, pol, n_films_e=nef)
            q = res.transmittance if quantity == "transmittance" else res.absorptance_films[0]
        out[pol] = np.broadcast_to(q, np.broadcast_shapes(np.shape(q), (1, lam.size, st.size)))
    if grid:
        return out
    return 0.5 * (out["s"] @ wt + out["p"] @ wt)


def _groups(material: Material, layers: np.ndarray) -> dict[int | None, np.ndarray]:
    """Indices of ``layers`` that share one data set (layer-resolved sets, then bulk)."""
    resolved = {n for n, _ in material.by_layers}
    keys = [int(n) if int(n) in resolved else None for n in layers]
    groups: dict[int | None, list[int]] = {}
    for i, k in enumerate(keys):
        groups.setdefault(k, []).append(i)
    return {k: np.array(v) for k, v in groups.items()}


@dataclass(frozen=True)
class ContrastTable:
    """Model channel contrast over layer numbers.

    ``contrast``, ``reflectance_flake`` and ``reflectance_reference`` have shape
    (len(layers), len(channels)); the reflectances are channel-weighted means
    (integral R I S / integral I S). ``wavelength_nm`` is the single wavelength of monochromatic
    light, else None. Contrast C = 1 - (integral R_flake I S) / (integral R_reference I S), the
    reference being the bare supported substrate.
    """

    layers: np.ndarray
    channels: tuple[str, ...]
    contrast: np.ndarray
    reflectance_flake: np.ndarray
    reflectance_reference: np.ndarray
    wavelength_nm: float | None
    geometry: str
    substrate: str

    def column(self, channel: str) -> np.ndarray:
        """Contrast versus layers for one channel."""
        try:
            return self.contrast[:, self.channels.index(channel)]
        except ValueError:
            raise InputError(
                f"channel {channel!r} is not among {', '.join(self.channels)}"
            ) from None

    def to_records(self) -> list[dict]:
        """One record per (layers, channel), as the ``contrast`` command prints them."""
        out = []
        for i, n in enumerate(self.layers):
            for j, ch in enumerate(self.channels):
                out.append(
                    {
                        "layers": int(n),
                        "channel": None if self.wavelength_nm is not None else ch,
                        "wavelength_nm": self.wavelength_nm,
                        "contrast": float(self.contrast[i, j]),
                        "reflectance_flake": float(self.reflectance_flake[i, j]),
                        "reflectance_reference": float(self.reflectance_reference[i, j]),
                    }
                )
        return out


def _frozen(a: np.ndarray) -> np.ndarray:
    a = np.ascontiguousarray(a)
    a.setflags(write=False)
    return a


@functools.lru_cache(maxsize=512)
def _contrast_cached(material, layers, substrate, microscope, geometry, hole) -> ContrastTable:
    lam, w = microscope.weights()
    norm = w.sum(axis=1)
    if np.any(norm <= 0):
        raise InputError("the illumination and camera channels do not overlap: no signal")
    common = {"na": microscope.na_illumination, "n_angles": microscope.n_angles}
    r_ref = cone_reflectance(None, (), substrate, lam, **common)[0]
    r_fl = cone_reflectance(
        material, np.asarray(layers), substrate, lam, geometry=geometry, hole=hole, **common
    )
    # Linear sRGB primaries have negative lobes: a saturated colour can integrate to a negative
    # channel value, which an encoded image clips to 0 (out of gamut). Clip the same way.
    ref_c = np.maximum((w @ r_ref) / norm, 0.0)
    fl_c = np.maximum((r_fl @ w.T) / norm[None, :], 0.0)
    if np.any(np.abs(ref_c) < 1e-6):
        raise InputError(
            "the bare substrate reflects almost nothing in a channel, so contrast is undefined; "
            "accepted: channels in which the substrate is visible"
        )
    contrast = 1.0 - fl_c / ref_c[None, :]
    return ContrastTable(
        layers=_frozen(np.asarray(layers, int)),
        channels=microscope.channel_names,
        contrast=_frozen(contrast),
        reflectance_flake=_frozen(fl_c),
        reflectance_reference=_frozen(np.broadcast_to(ref_c, fl_c.shape)),
        wavelength_nm=microscope.wavelength_nm,
        geometry=geometry,
        substrate=substrate.spec,
    )


def channel_contrast(
    material: Material,
    layers,
    substrate: Substrate,
    microscope: Microscope,
    geometry: str = "supported",
    hole: Hole | None = None,
) -> ContrastTable:
    """Model contrast of a flake of each layer number in ``layers``, per camera channel.

    ``geometry`` ``suspended`` puts the flake over ``hole`` (default: a hole etched down to the Si
    through all films); the reference stays the bare supported substrate. Results are cached
    (the inputs are immutable), so repeated calls with the same sample and microscope are cheap.
    """
    lay = tuple(int(n) for n in np.atleast_1d(np.asarray(layers)).tolist())
    if geometry == "suspended" and hole is None:
        hole = Hole()
    return _contrast_cached(material, lay, substrate, microscope, geometry, hole)
