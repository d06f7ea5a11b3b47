"""The records of spectrum fits and of rule tables calibrated on a user's own flakes.

Kept apart from :mod:`flakebook.store.records` (which lists them among its kinds) by concern:
what a spectrum's analysis stores. :class:`SpectrumFit` is derived (its inputs: the spectrum and,
when one was used, the sample's :class:`RuleCalibration`); editing its ``settings`` marks it and
everything computed from it stale.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import ClassVar

from flakebook.errors import InputError
from flakebook.store.records import Derived, Record, _json, _number, _set, _text, _tuple


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
