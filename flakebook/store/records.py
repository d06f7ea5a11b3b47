"""The records of a project file, as frozen dataclasses.

Every record has ``id`` (None until stored) and ``revision`` (0 until stored, then 1, bumped on
every update). Derived records (:class:`Evidence`, :class:`Assignment`,
:class:`ThermometryResult`, :class:`SpectrumFit`, :class:`RamanMap`) also carry their provenance: the ``inputs`` they were computed from
(record kind, id and revision), the ``method`` and its ``parameters``, the flakebook version and
a ``stale`` mark set when an input changes.

Array fields are read-only float64 numpy arrays; they take no part in ``==`` (compare them with
numpy). Units live in the field names (DESIGN.md).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, fields
from typing import ClassVar

import numpy as np

from flakebook.errors import InputError
from flakebook.substrate import SubstrateLayer, check_stack

#: Layer spacing (c/2 of the 2H bulk cell) in nm. Value from memory (shared REFERENCES.md, not
#: confirmed against the papers): MoS2 0.615, MoSe2 0.646, WS2 0.616, WSe2 0.649.
LAYER_SPACING_NM: dict[str, float] = {
    "MoS2": 0.615,
    "MoSe2": 0.646,
    "WS2": 0.616,
    "WSe2": 0.649,
}

SPECTRUM_KINDS = ("raman", "pl", "reflectance")
HOLE_BOTTOMS = ("si", "au", "open")
LATTICES = ("square", "hexagonal")
HOLE_SOURCES = ("manual", "detected", "lattice")
SERIES_KINDS = ("temperature", "power", "supported-power")


def layer_spacing_nm(material: str) -> float | None:
    """The layer spacing of ``material`` in nm (see :data:`LAYER_SPACING_NM`), None if unknown."""
    return LAYER_SPACING_NM.get(material)


# ---- field kinds -----------------------------------------------------------------------------
# ``codec`` metadata tells the store how a field lives in its column:
#   array: float64 blob (flakebook.store.codec); json: JSON text; tuple: JSON list read back as a
#   tuple; bool: 0/1; substrate: list of {material, thickness_nm}; pattern: HolePattern as JSON;
#   inputs: rows of the dependency table (no column); embedded: the image_data table (no column).


def _array():
    return field(default=None, compare=False, metadata={"codec": "array"})


def _json(factory=dict):
    return field(default_factory=factory, metadata={"codec": "json"})


def _tuple():
    return field(default=(), metadata={"codec": "tuple"})


def _bool(default=False):
    return field(default=default, metadata={"codec": "bool"})


def _set(obj, name, value):
    object.__setattr__(obj, name, value)


def _as_array(obj, name: str, *, ndim: int | None = None, pairs: bool = False) -> None:
    value = getattr(obj, name)
    if value is None:
        return
    arr = np.array(value, dtype=np.float64)
    if pairs:
        if arr.size == 0:
            arr = arr.reshape(0, 2)
        if arr.ndim != 2 or arr.shape[1] != 2:
            raise InputError(
                f"{type(obj).__name__}.{name} must be a polygon of (x, y) points, an N x 2 array; "
                f"got shape {arr.shape}"
            )
        if not np.all(np.isfinite(arr)):
            raise InputError(f"{type(obj).__name__}.{name} has points that are not finite numbers")
    elif ndim is not None and arr.ndim != ndim:
        raise InputError(f"{type(obj).__name__}.{name} must be a {ndim}-D array, got {arr.ndim}-D")
    arr.flags.writeable = False
    _set(obj, name, arr)


def _choice(obj, name: str, choices, *, optional: bool = False) -> None:
    value = getattr(obj, name)
    if optional and value is None:
        return
    if value not in choices:
        raise InputError(
            f"{type(obj).__name__}.{name} {value!r} is not allowed; accepted: {', '.join(choices)}"
        )


def _number(obj, name: str, *, positive=False, nonneg=False, optional=True, unit="") -> None:
    value = getattr(obj, name)
    if value is None:
        if optional:
            return
        raise InputError(f"{type(obj).__name__}.{name} is required")
    if isinstance(value, bool) or not isinstance(value, int | float | np.number):
        raise InputError(f"{type(obj).__name__}.{name} {value!r} is not a number")
    value = float(value)
    ok = math.isfinite(value) and not (positive and value <= 0) and not (nonneg and value < 0)
    if not ok:
        need = "a positive number" if positive else "zero or more" if nonneg else "a finite number"
        raise InputError(
            f"{type(obj).__name__}.{name} {value!r}{unit} is not allowed; accepted: {need}"
        )
    _set(obj, name, value)


def _text(obj, name: str, *, required: bool = False) -> None:
    value = getattr(obj, name)
    if value is None:
        value = ""
    value = str(value)
    if required and not value.strip():
        raise InputError(f"{type(obj).__name__}.{name} is required and may not be empty")
    _set(obj, name, value)


def polygon_area(points: np.ndarray | None) -> float | None:
    """Area enclosed by a polygon of (x, y) points (shoelace formula), None without points."""
    if points is None or len(points) < 3:
        return None if points is None else 0.0
    x, y = points[:, 0], points[:, 1]
    return float(0.5 * abs(np.dot(x, np.roll(y, -1)) - np.dot(y, np.roll(x, -1))))


# ---- plain value types -----------------------------------------------------------------------


@dataclass(frozen=True, kw_only=True)
class HolePattern:
    """A sample's hole array: bottom si|au|open, depth (and its s.d.), diameter, lattice, pitch
    and angle."""

    bottom: str
    diameter_um: float
    pitch_um: float | None = None
    lattice: str = "square"
    angle_deg: float = 0.0
    depth_nm: float | None = None
    depth_err_nm: float | None = None

    def __post_init__(self):
        _choice(self, "bottom", HOLE_BOTTOMS)
        _choice(self, "lattice", LATTICES)
        _number(self, "diameter_um", positive=True, optional=False, unit=" um")
        _number(self, "pitch_um", positive=True, unit=" um")
        _number(self, "angle_deg", optional=False)
        _number(self, "depth_nm", positive=True, unit=" nm")
        _number(self, "depth_err_nm", positive=True, unit=" nm")
        if self.bottom == "open" and self.depth_nm is not None:
            raise InputError("a through-hole (bottom 'open') has no depth; leave depth_nm empty")
        if self.depth_err_nm is not None and self.depth_nm is None:
            raise InputError(
                "a hole depth error was given without the depth; accepted: depth_err_nm "
                "together with depth_nm"
            )

    def to_dict(self) -> dict:
        """The JSON form."""
        return {f.name: getattr(self, f.name) for f in fields(self)}


@dataclass(frozen=True)
class SourceRef:
    """What a derived record was computed from: a record's kind, id and revision at the time."""

    kind: str
    id: int
    revision: int

    @classmethod
    def of(cls, record: Record) -> SourceRef:
        """The reference to a stored record at its current revision."""
        if record.id is None:
            raise InputError(f"a {record.KIND} that is not stored yet cannot be an input")
        return cls(record.KIND, int(record.id), int(record.revision))


# ---- records ---------------------------------------------------------------------------------


@dataclass(frozen=True, kw_only=True)
class Record:
    """Fields every record has."""

    KIND: ClassVar[str] = ""
    TABLE: ClassVar[str] = ""
    DERIVED: ClassVar[bool] = False

    id: int | None = None
    revision: int = 0

    def ref(self) -> SourceRef:
        """This record as an input reference."""
        return SourceRef.of(self)


@dataclass(frozen=True, kw_only=True)
class Derived(Record):
    """Provenance of a computed record: ``method`` and its ``parameters``, the published
    ``source`` of any constants used, the ``inputs`` (kind, id, revision), the flakebook version,
    when, and whether an input has changed since (``stale``)."""

    DERIVED: ClassVar[bool] = True

    method: str = ""
    parameters: dict = _json()
    source: str = ""
    inputs: tuple = field(default=(), metadata={"codec": "inputs"})
    flakebook_version: str = ""
    computed_at: str | None = None
    stale: bool = _bool()

    def _check_provenance(self):
        _text(self, "method", required=True)
        _text(self, "source")
        refs = []
        for item in self.inputs:
            if isinstance(item, SourceRef):
                refs.append(item)
            elif isinstance(item, Record):
                refs.append(SourceRef.of(item))
            elif isinstance(item, tuple | list) and len(item) == 3:
                refs.append(SourceRef(str(item[0]), int(item[1]), int(item[2])))
            else:
                raise InputError(f"{item!r} is not an input reference (kind, id, revision)")
        _set(self, "inputs", tuple(refs))
        _set(self, "parameters", dict(self.parameters or {}))


@dataclass(frozen=True, kw_only=True)
class Sample(Record):
    """A chip: its flake material, substrate stack (top down, last semi-infinite), hole pattern."""

    KIND: ClassVar[str] = "sample"
    TABLE: ClassVar[str] = "samples"

    name: str
    material: str
    substrate: tuple = field(default=(), metadata={"codec": "substrate"})
    hole_pattern: HolePattern | None = field(default=None, metadata={"codec": "pattern"})
    notes: str = ""

    def __post_init__(self):
        _text(self, "name", required=True)
        _text(self, "material", required=True)
        _text(self, "notes")
        _set(self, "substrate", check_stack(self.substrate))
        if isinstance(self.hole_pattern, dict):
            _set(self, "hole_pattern", HolePattern(**self.hole_pattern))

    @property
    def oxide_nm(self) -> float | None:
        """The SiO2 thickness when the stack is SiO2 on Si, else None."""
        s = self.substrate
        if len(s) == 2 and s[0].material == "SiO2" and s[1].material == "Si":
            return s[0].thickness_nm
        return None


@dataclass(frozen=True, kw_only=True)
class Image(Record):
    """A micrograph: where its file is (relative to the project where possible) and its hash.

    ``path`` is as stored (relative to the project file's folder, or absolute); use
    ``Project.image_file`` for the file on disk and ``Project.image_bytes`` for the content.
    ``embedded`` tells whether the project holds a copy of the bytes (after ``pack``).
    """

    KIND: ClassVar[str] = "image"
    TABLE: ClassVar[str] = "images"

    sample_id: int
    path: str
    sha256: str
    size_bytes: int
    pixel_size_um: float | None = None
    objective: str = ""
    na_objective: float | None = None
    na_illumination: float | None = None
    illumination: str = ""
    camera: dict = _json()
    stage_x_um: float | None = None
    stage_y_um: float | None = None
    width_px: int | None = None
    height_px: int | None = None
    embedded: bool = field(default=False, metadata={"codec": "embedded"})

    def __post_init__(self):
        _text(self, "path", required=True)
        _text(self, "objective")
        _text(self, "illumination")
        _number(self, "pixel_size_um", positive=True, unit=" um")
        _number(self, "na_objective", positive=True)
        _number(self, "na_illumination", nonneg=True)
        _number(self, "stage_x_um")
        _number(self, "stage_y_um")
        for name in ("na_objective", "na_illumination"):
            v = getattr(self, name)
            if v is not None and v > 1.6:
                raise InputError(f"Image.{name} {v} is not a numerical aperture; accepted: 0-1.6")
        _set(self, "camera", dict(self.camera or {}))


@dataclass(frozen=True, kw_only=True)
class Flake(Record):
    """A physical flake on a sample; ``label`` is its human-readable ID (unique in a project)."""

    KIND: ClassVar[str] = "flake"
    TABLE: ClassVar[str] = "flakes"

    sample_id: int
    label: str
    tags: tuple = _tuple()
    notes: str = ""
    status: str = "new"
    primary_terrace_id: int | None = None

    def __post_init__(self):
        _text(self, "label", required=True)
        _text(self, "notes")
        _text(self, "status", required=True)
        _set(self, "tags", tuple(str(t) for t in self.tags))


@dataclass(frozen=True, kw_only=True)
class Appearance(Record):
    """A flake seen in one image: its outline in that image's pixels (x, y) and in um."""

    KIND: ClassVar[str] = "appearance"
    TABLE: ClassVar[str] = "appearances"

    flake_id: int
    image_id: int
    outline_px: np.ndarray = _array()
    outline_um: np.ndarray | None = _array()

    def __post_init__(self):
        if self.outline_px is None:
            raise InputError("Appearance.outline_px is required (an N x 2 array of x, y pixels)")
        _as_array(self, "outline_px", pairs=True)
        _as_array(self, "outline_um", pairs=True)

    @property
    def area_um2(self) -> float | None:
        """Area inside the outline in um^2 (None without an outline in um)."""
        return polygon_area(self.outline_um)


@dataclass(frozen=True, kw_only=True)
class Terrace(Record):
    """A region of uniform thickness within an appearance; layer evidence belongs to it."""

    KIND: ClassVar[str] = "terrace"
    TABLE: ClassVar[str] = "terraces"

    appearance_id: int
    label: str = ""
    outline_px: np.ndarray = _array()
    outline_um: np.ndarray | None = _array()
    notes: str = ""

    def __post_init__(self):
        if self.outline_px is None:
            raise InputError("Terrace.outline_px is required (an N x 2 array of x, y pixels)")
        _as_array(self, "outline_px", pairs=True)
        _as_array(self, "outline_um", pairs=True)
        _text(self, "label")
        _text(self, "notes")

    @property
    def area_um2(self) -> float | None:
        """Area inside the outline in um^2."""
        return polygon_area(self.outline_um)


@dataclass(frozen=True, kw_only=True)
class Hole(Record):
    """A hole in an image: centre and radius in px, radius in um with its uncertainty."""

    KIND: ClassVar[str] = "hole"
    TABLE: ClassVar[str] = "holes"

    image_id: int
    center_x_px: float
    center_y_px: float
    radius_px: float
    radius_um: float | None = None
    radius_err_um: float | None = None
    source: str = "manual"
    lattice_i: int | None = None
    lattice_j: int | None = None

    def __post_init__(self):
        _number(self, "center_x_px", optional=False)
        _number(self, "center_y_px", optional=False)
        _number(self, "radius_px", positive=True, optional=False)
        _number(self, "radius_um", positive=True)
        _number(self, "radius_err_um", nonneg=True)
        _choice(self, "source", HOLE_SOURCES)


@dataclass(frozen=True, kw_only=True)
class FlakeHole(Record):
    """A flake over a hole: covered fraction, fully covered, margin to the flake's edge in um."""

    KIND: ClassVar[str] = "flake_hole"
    TABLE: ClassVar[str] = "flake_holes"

    flake_id: int
    hole_id: int
    terrace_id: int | None = None
    covered_fraction: float = 1.0
    fully_covered: bool = _bool()
    margin_um: float | None = None

    def __post_init__(self):
        _number(self, "covered_fraction", nonneg=True, optional=False)
        if self.covered_fraction > 1.0 + 1e-12:
            raise InputError(
                f"FlakeHole.covered_fraction {self.covered_fraction} is not allowed; accepted: 0-1"
            )
        _number(self, "margin_um")
        _set(self, "fully_covered", bool(self.fully_covered))


@dataclass(frozen=True, kw_only=True)
class Spectrum(Record):
    """A Raman, PL or reflectance spectrum with its acquisition settings."""

    KIND: ClassVar[str] = "spectrum"
    TABLE: ClassVar[str] = "spectra"

    sample_id: int | None = None
    flake_id: int | None = None
    terrace_id: int | None = None
    series_id: int | None = None
    kind: str = "raman"
    x_unit: str = "cm-1"
    x: np.ndarray = _array()
    y: np.ndarray = _array()
    laser_nm: float | None = None
    power_mw: float | None = None
    spot_image_id: int | None = None
    spot_x_px: float | None = None
    spot_y_px: float | None = None
    polarization: str = ""
    stage_temperature_k: float | None = None
    integration_s: float | None = None
    metadata: dict = _json()
    source_path: str = ""
    source_sha256: str = ""

    def __post_init__(self):
        _choice(self, "kind", SPECTRUM_KINDS)
        _choice(self, "x_unit", ("cm-1", "nm", "ev"))
        if self.x is None or self.y is None:
            raise InputError("Spectrum.x and Spectrum.y are required (1-D arrays)")
        _as_array(self, "x", ndim=1)
        _as_array(self, "y", ndim=1)
        if self.x.shape != self.y.shape:
            raise InputError(
                f"Spectrum.x has {self.x.size} points and Spectrum.y {self.y.size}; they must match"
            )
        _number(self, "laser_nm", positive=True, unit=" nm")
        _number(self, "power_mw", nonneg=True, unit=" mW")
        _number(self, "stage_temperature_k", positive=True, unit=" K")
        _number(self, "integration_s", nonneg=True, unit=" s")
        _number(self, "spot_x_px")
        _number(self, "spot_y_px")
        for name in ("polarization", "source_path", "source_sha256"):
            _text(self, name)
        _set(self, "metadata", dict(self.metadata or {}))


@dataclass(frozen=True, kw_only=True)
class BeamProfile(Record):
    """A measured laser spot: 1/e^2 intensity radius W with its uncertainty."""

    KIND: ClassVar[str] = "beam_profile"
    TABLE: ClassVar[str] = "beam_profiles"

    objective: str
    laser_nm: float
    radius_um: float
    radius_err_um: float | None = None
    method: str = ""
    measured_on: str | None = None
    notes: str = ""

    def __post_init__(self):
        _text(self, "objective", required=True)
        _number(self, "laser_nm", positive=True, optional=False, unit=" nm")
        _number(self, "radius_um", positive=True, optional=False, unit=" um")
        _number(self, "radius_err_um", nonneg=True, unit=" um")
        _text(self, "method")
        _text(self, "notes")


@dataclass(frozen=True, kw_only=True)
class Evidence(Derived):
    """Layer evidence: a likelihood over N = 1..max_layers plus one "more" bin.

    ``reason`` says in words what the evidence rests on.
    """

    KIND: ClassVar[str] = "evidence"
    TABLE: ClassVar[str] = "evidence"

    flake_id: int
    terrace_id: int | None = None
    likelihood: np.ndarray = _array()
    reason: str = ""

    def __post_init__(self):
        self._check_provenance()
        if self.likelihood is None:
            raise InputError("Evidence.likelihood is required (N = 1..N_max and a 'more' bin)")
        _as_array(self, "likelihood", ndim=1)
        lk = self.likelihood
        if lk.size < 2 or not np.all(np.isfinite(lk)) or np.any(lk < 0):
            raise InputError(
                "Evidence.likelihood must hold at least 2 finite values >= 0 "
                "(N = 1..N_max and a 'more' bin)"
            )
        _text(self, "reason")

    @property
    def max_layers(self) -> int:
        """N_max: the likelihood's length less the 'more' bin."""
        return int(self.likelihood.size - 1)


@dataclass(frozen=True, kw_only=True)
class Assignment(Derived):
    """A flake's (or terrace's) layer number: computed from evidence, or set by a person.

    A manual assignment (``manual=True``) needs a ``reason``; ``who`` and ``assigned_at`` say
    who made it and when (the store fills them in when empty).
    """

    KIND: ClassVar[str] = "assignment"
    TABLE: ClassVar[str] = "assignments"

    flake_id: int
    terrace_id: int | None = None
    layers: int
    probability: float | None = None
    ambiguous_with: tuple = _tuple()
    posterior: np.ndarray | None = _array()
    manual: bool = _bool()
    reason: str = ""
    who: str = ""
    assigned_at: str | None = None

    def __post_init__(self):
        if self.manual and not self.method:
            _set(self, "method", "manual")
        self._check_provenance()
        if isinstance(self.layers, bool) or not isinstance(self.layers, int | np.integer):
            raise InputError(f"Assignment.layers {self.layers!r} is not a whole number of layers")
        _set(self, "layers", int(self.layers))
        if self.layers < 1:
            raise InputError(f"Assignment.layers {self.layers} is not allowed; accepted: 1 or more")
        _number(self, "probability", nonneg=True)
        if self.probability is not None and self.probability > 1.0 + 1e-12:
            raise InputError(f"Assignment.probability {self.probability} is not in 0-1")
        _set(self, "ambiguous_with", tuple(int(n) for n in self.ambiguous_with))
        _as_array(self, "posterior", ndim=1)
        _set(self, "manual", bool(self.manual))
        _text(self, "reason", required=self.manual)
        _text(self, "who")


@dataclass(frozen=True, kw_only=True)
class ThermometrySeries(Record):
    """A stage-temperature or laser-power series of one flake (its spectra point to it)."""

    KIND: ClassVar[str] = "thermometry_series"
    TABLE: ClassVar[str] = "thermometry_series"

    flake_id: int
    kind: str
    laser_nm: float | None = None
    mode: str = ""
    beam_profile_id: int | None = None
    hole_id: int | None = None
    notes: str = ""

    def __post_init__(self):
        _choice(self, "kind", SERIES_KINDS)
        _number(self, "laser_nm", positive=True, unit=" nm")
        _text(self, "mode")
        _text(self, "notes")


@dataclass(frozen=True, kw_only=True)
class ThermometryResult(Derived):
    """Thermal conductivity from Raman thermometry, with its 16-84% interval and inputs.

    ``thickness_nm`` and ``layer_spacing_nm``, when given, are what the result used; ``details``
    holds the rest (variance shares, warnings, ...).
    """

    KIND: ClassVar[str] = "thermometry_result"
    TABLE: ClassVar[str] = "thermometry_results"

    flake_id: int
    layers: int | None = None
    thickness_nm: float | None = None
    layer_spacing_nm: float | None = None
    kappa_w_mk: float | None = None
    kappa_median_w_mk: float | None = None
    kappa_p16_w_mk: float | None = None
    kappa_p84_w_mk: float | None = None
    chi_t_cm1_per_k: float | None = None
    chi_t_err_cm1_per_k: float | None = None
    chi_p_cm1_per_mw: float | None = None
    chi_p_err_cm1_per_mw: float | None = None
    absorptance: float | None = None
    absorptance_err: float | None = None
    details: dict = _json()

    def __post_init__(self):
        self._check_provenance()
        for f in fields(self):
            if f.name.endswith(("_w_mk", "_nm", "_cm1_per_k", "_cm1_per_mw")) or f.name in (
                "absorptance",
                "absorptance_err",
            ):
                _number(self, f.name)
        _set(self, "details", dict(self.details or {}))


@dataclass(frozen=True, kw_only=True)
class ExternalResult(Record):
    """A result imported from an analysis done outside flakebook (a hand-off CSV row)."""

    KIND: ClassVar[str] = "external_result"
    TABLE: ClassVar[str] = "external_results"

    flake_id: int
    kappa_w_mk: float | None = None
    kappa_p16_w_mk: float | None = None
    kappa_p84_w_mk: float | None = None
    method: str = ""
    note: str = ""
    source_file: str = ""
    imported_at: str | None = None

    def __post_init__(self):
        for name in ("kappa_w_mk", "kappa_p16_w_mk", "kappa_p84_w_mk"):
            _number(self, name, positive=True, unit=" W/mK")
        _text(self, "method")
        _text(self, "note")
        _text(self, "source_file")


@dataclass(frozen=True, kw_only=True)
class Calibration(Record):
    """Calibrated optics of a sample (or one image): oxide thickness, dark offset, contrast scale.

    Dark offset and contrast scale are per camera channel (``{"r": ..., "g": ..., "b": ...}`` or
    ``{"mono": ...}``), each with its uncertainty. ``model`` holds a layer calibration's whole
    fit (the JSON of ``flakebook calibrate``: n,k coefficients, residuals, flakes used; empty for
    older calibrations); ``created_at`` when it was made (the store fills it in).
    """

    KIND: ClassVar[str] = "calibration"
    TABLE: ClassVar[str] = "calibrations"

    sample_id: int
    image_id: int | None = None
    oxide_nm: float | None = None
    oxide_err_nm: float | None = None
    dark_offset: dict = _json()
    dark_offset_err: dict = _json()
    contrast_scale: dict = _json()
    contrast_scale_err: dict = _json()
    method: str = ""
    notes: str = ""
    model: dict = _json()
    created_at: str | None = None

    def __post_init__(self):
        _set(self, "model", dict(self.model or {}))
        _number(self, "oxide_nm", positive=True, unit=" nm")
        _number(self, "oxide_err_nm", nonneg=True, unit=" nm")
        for name in ("dark_offset", "dark_offset_err", "contrast_scale", "contrast_scale_err"):
            _set(self, name, {str(k): float(v) for k, v in dict(getattr(self, name) or {}).items()})
        _text(self, "method")
        _text(self, "notes")


# Spectrum fits and calibrated rule tables are written in their own module, on the classes above.
from flakebook.store.records_spectra import RamanMap, RuleCalibration, SpectrumFit  # noqa: E402

RECORD_TYPES: tuple[type[Record], ...] = (
    Sample,
    Image,
    Flake,
    Appearance,
    Terrace,
    Hole,
    FlakeHole,
    Spectrum,
    BeamProfile,
    Evidence,
    Assignment,
    ThermometrySeries,
    ThermometryResult,
    ExternalResult,
    Calibration,
    SpectrumFit,
    RuleCalibration,
    RamanMap,
)
KINDS: dict[str, type[Record]] = {cls.KIND: cls for cls in RECORD_TYPES}
DERIVED_KINDS = tuple(cls.KIND for cls in RECORD_TYPES if cls.DERIVED)


def record_type(kind: str | type[Record] | Record) -> type[Record]:
    """The record class of a kind name (``"flake"``), a class or a record."""
    if isinstance(kind, Record):
        return type(kind)
    if isinstance(kind, type) and issubclass(kind, Record):
        return kind
    try:
        return KINDS[str(kind)]
    except KeyError:
        raise InputError(
            f"{kind!r} is not a record kind; accepted: {', '.join(sorted(KINDS))}"
        ) from None


def record_to_dict(rec: Record) -> dict:
    """A record as JSON-able data (arrays as lists, inputs as ``[kind, id, revision]``)."""
    out = {}
    for f in fields(rec):
        v = getattr(rec, f.name)
        if hasattr(v, "tolist"):
            v = v.tolist()
        elif f.name == "inputs":
            v = [[r.kind, r.id, r.revision] for r in v]
        elif isinstance(v, HolePattern):
            v = v.to_dict()
        elif f.name == "substrate":
            v = [layer.to_dict() for layer in v]
        elif isinstance(v, tuple):
            v = list(v)
        out[f.name] = v
    return out


__all__ = [
    "LAYER_SPACING_NM",
    "SubstrateLayer",
    "HolePattern",
    "SourceRef",
    "Record",
    "Derived",
    "Sample",
    "Image",
    "Flake",
    "Appearance",
    "Terrace",
    "Hole",
    "FlakeHole",
    "Spectrum",
    "BeamProfile",
    "Evidence",
    "Assignment",
    "ThermometrySeries",
    "ThermometryResult",
    "ExternalResult",
    "Calibration",
    "SpectrumFit",
    "RuleCalibration",
    "RamanMap",
    "KINDS",
    "DERIVED_KINDS",
    "record_type",
    "record_to_dict",
    "layer_spacing_nm",
    "polygon_area",
]
