"""The records of spectrum fits and of rule tables calibrated on a user's own flakes.

Kept apart from :mod:`flakebook.store.records` (which lists them among its kinds) by concern:
what a spectrum's analysis stores. :class:`SpectrumFit` is derived (its inputs: the spectrum and,
when one was used, the sample's :class:`RuleCalibration`); editing its ``settings`` marks it and
everything computed from it stale. :class:`RamanMap` holds the fitted maps of one Raman map.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import ClassVar

import numpy as np

from flakebook.errors import InputError
from flakebook.store.records import (
    Derived,
    Record,
    _array,
    _as_array,
    _json,
    _number,
    _set,
    _text,
    _tuple,
)


@dataclass(frozen=True, kw_only=True)
class SpectrumFit(Derived):
    """The fit of one stored spectrum: the ``settings`` it was made with (kind, laser_nm,
    baseline, peak_model, polarization, auto_calibrate, ...), the fitted ``peaks`` (the rows of
    ``flakebook spectrum``: mode, centre, error, width, height, area, signal-to-noise), the
    Si-line ``calibration`` (empty when none) and the ``warnings``."""

    KIND: ClassVar[str] = "spectrum_fit"
    TABLE: ClassVar[str] = "spectrum_fits"

    spectrum_id: int
    flake_id: int | None = None
    settings: dict = _json()
    peaks: list = _json(list)
    calibration: dict = _json()
    warnings: tuple = _tuple()

    def __post_init__(self):
        self._check_provenance()
        _set(self, "settings", dict(self.settings or {}))
        _set(self, "peaks", [dict(p) for p in (self.peaks or [])])
        _set(self, "calibration", dict(self.calibration or {}))
        _set(self, "warnings", tuple(str(w) for w in self.warnings))


@dataclass(frozen=True, kw_only=True)
class RuleCalibration(Record):
    """A Raman/PL rule table refitted on a sample's flakes of known layer number
    (flakebook.spectra.rules.calibrate_table), stored as the table's JSON (``rule_table``) for one
    material and laser line; the latest one of a sample is used from then on."""

    KIND: ClassVar[str] = "rule_calibration"
    TABLE: ClassVar[str] = "rule_calibrations"

    sample_id: int
    material: str
    laser_nm: float
    rule_table: dict = _json()
    flakes_used: tuple = _tuple()
    method: str = ""
    notes: str = ""
    created_at: str | None = None

    def __post_init__(self):
        _text(self, "material", required=True)
        _number(self, "laser_nm", positive=True, optional=False, unit=" nm")
        if not isinstance(self.rule_table, dict) or "rules" not in self.rule_table:
            raise InputError(
                "RuleCalibration.rule_table must be a rule table's JSON (with 'rules')"
            )
        _set(self, "flakes_used", tuple(str(f) for f in self.flakes_used))
        _text(self, "method")
        _text(self, "notes")


@dataclass(frozen=True, kw_only=True)
class RamanMap(Derived):
    """The fits of one Raman map (flakebook.spectra.maps.analyse_map) kept in the project.

    ``maps`` is one float64 array of shape ``(len(quantities), rows, cols)``: ``maps[k]`` is the
    map named ``quantities[k]`` (``<mode>_center_cm1``, ``<mode>_center_err_cm1``,
    ``<mode>_fwhm_cm1``, ``<mode>_height``, ``<b>-<a>_separation_cm1`` and its ``_err_cm1``,
    ``layers``, ``probability``; NaN where a line was not found or no layer number fits), rows
    along ``y_um`` and columns along ``x_um`` (the map file's stage coordinates, ascending).

    Placement on a micrograph (``image_id``, optional): ``offset_x_um``, ``offset_y_um`` is where
    the map's coordinate origin (x_um = 0, y_um = 0) lies, in um from the image's pixel origin
    (the centre of its top-left pixel), along the image's axes (x to the right, y down). The map
    point (x, y) is thus at pixel ((offset_x_um + x) / s, (offset_y_um + y) / s) of an image
    of pixel size s. ``settings`` holds what the fit was made with (laser line, calibration
    shift, max_layers, the rule table used).
    """

    KIND: ClassVar[str] = "raman_map"
    TABLE: ClassVar[str] = "raman_maps"

    sample_id: int
    image_id: int | None = None
    offset_x_um: float | None = None
    offset_y_um: float | None = None
    name: str = ""
    kind: str = "raman"
    material: str = ""
    laser_nm: float = 532.0
    max_layers: int = 15
    x_um: np.ndarray = _array()
    y_um: np.ndarray = _array()
    quantities: tuple = _tuple()
    maps: np.ndarray = _array()
    settings: dict = _json()
    warnings: tuple = _tuple()
    source_path: str = ""
    source_sha256: str = ""
    notes: str = ""

    def __post_init__(self):
        self._check_provenance()
        if self.kind != "raman":
            raise InputError(
                f"RamanMap.kind {self.kind!r} is not allowed; accepted: raman (layer maps are "
                "read from Raman maps, not PL)"
            )
        _text(self, "material", required=True)
        _text(self, "name")
        _text(self, "notes")
        _text(self, "source_path")
        _text(self, "source_sha256")
        _number(self, "laser_nm", positive=True, optional=False, unit=" nm")
        _number(self, "offset_x_um", unit=" um")
        _number(self, "offset_y_um", unit=" um")
        if (self.offset_x_um is None) != (self.offset_y_um is None):
            raise InputError("RamanMap: give both offset_x_um and offset_y_um, or neither")
        if self.image_id is not None and self.offset_x_um is None:
            raise InputError(
                "RamanMap: a map placed on an image needs its offset (offset_x_um, "
                "offset_y_um: the map origin in um from the image's pixel origin)"
            )
        if isinstance(self.max_layers, bool) or int(self.max_layers) != self.max_layers:
            raise InputError(f"RamanMap.max_layers {self.max_layers!r} is not a whole number")
        _set(self, "max_layers", int(self.max_layers))
        for name in ("x_um", "y_um"):
            if getattr(self, name) is None:
                raise InputError(f"RamanMap.{name} is required (the map's grid in um)")
            _as_array(self, name, ndim=1)
        if self.maps is None:
            raise InputError("RamanMap.maps is required")
        _as_array(self, "maps", ndim=3)
        _set(self, "quantities", tuple(str(q) for q in self.quantities))
        want = (len(self.quantities), self.y_um.size, self.x_um.size)
        if self.maps.shape != want:
            raise InputError(
                f"RamanMap.maps has shape {self.maps.shape}; accepted: (quantities, rows, cols) "
                f"= {want}"
            )
        if len(set(self.quantities)) != len(self.quantities):
            raise InputError("RamanMap.quantities names a map twice")
        _set(self, "settings", dict(self.settings or {}))
        _set(self, "warnings", tuple(str(w) for w in self.warnings))

    def quantity(self, name: str) -> np.ndarray:
        """The map named ``name`` (rows, cols)."""
        try:
            return self.maps[self.quantities.index(name)]
        except ValueError:
            raise InputError(
                f"map {self.id}: no quantity {name!r}; accepted: {', '.join(self.quantities)}"
            ) from None

    @property
    def shape(self) -> tuple[int, int]:
        """(rows, cols)."""
        return self.y_um.size, self.x_um.size
