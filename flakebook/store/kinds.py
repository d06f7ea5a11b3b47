"""The record kinds' own functions: the typed ways to add each kind, the lookups, and the rules
every add and update of a kind follows.

Where to look for ``add_sample``, ``add_image``, ``add_flake``, ``add_appearance``, ...,
``assign``, ``link_flake_hole`` and for ``sample_by_name``, ``find_flake``, ``flakes_of``,
``holes_covered_by``, ``primary_terrace_id``, ``latest_assignment``, ...: they are methods of
:class:`~flakebook.store.project.Project`, written here in :class:`RecordKinds`. The records
themselves (fields, checks) are the dataclasses of :mod:`flakebook.store.records`.
"""

from __future__ import annotations

import dataclasses
import hashlib
import os
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np

import flakebook
from flakebook.errors import InputError
from flakebook.store._util import RecordRef, id_of, read_regular, sha256_file
from flakebook.store.files import stored_path
from flakebook.store.provenance import check_inputs, outdated
from flakebook.store.records import (
    Appearance,
    Assignment,
    BeamProfile,
    Calibration,
    Evidence,
    ExternalResult,
    Flake,
    FlakeHole,
    Hole,
    HolePattern,
    Image,
    RamanMap,
    Record,
    RuleCalibration,
    Sample,
    SourceRef,
    Spectrum,
    SpectrumFit,
    Terrace,
    ThermometryResult,
    ThermometrySeries,
)
from flakebook.substrate import SubstrateLayer, check_stack, oxide_stack, parse_substrate

# A flake's primary terrace (DESIGN.md), as an SQL expression over ``flakes f``: the user's
# choice, else the terrace over a hole (fully covered first), else the largest terrace.
PRIMARY_TERRACE_SQL = """COALESCE(
    f.primary_terrace_id,
    (SELECT fh.terrace_id FROM flake_holes fh
      WHERE fh.flake_id = f.id AND fh.terrace_id IS NOT NULL
      ORDER BY fh.fully_covered DESC, fh.covered_fraction DESC, fh.id LIMIT 1),
    (SELECT t.id FROM terraces t WHERE t.flake_id = f.id ORDER BY t.area_um2 DESC, t.id LIMIT 1))"""


class RecordKinds:
    """Adding and finding records of each kind, and the per-kind rules of every add and update
    (a mixin of :class:`~flakebook.store.project.Project`).

    Relies on the project core: ``_db``, ``_path``, ``_user``, ``folder``, ``max_layers``,
    ``now``, ``transaction``, ``get``, ``records``, ``_select``, ``add``, ``update``,
    ``_write_update`` and ``_pixel_size``. The core calls ``_prepare`` before it writes a record
    and ``_after_update`` after it has updated one.
    """

    # ---- per-kind rules applied on every add and update -----------------------------------

    def _prepare(self, rec: Record, old: Record | None) -> Record:
        if (
            isinstance(rec, Appearance | Terrace)
            and old is not None
            and rec.outline_um is not None
            and not np.array_equal(rec.outline_px, old.outline_px)
            and _same_array(rec.outline_um, old.outline_um)
        ):
            # A new outline in pixels with the old one in um: the um outline follows the pixels.
            rec = dataclasses.replace(rec, outline_um=None)
        if isinstance(rec, Appearance | Terrace) and rec.outline_um is None:
            size = self._pixel_size_for(rec)
            if size is not None:
                rec = dataclasses.replace(rec, outline_um=rec.outline_px * size)
        if isinstance(rec, Hole) and rec.radius_um is None:
            size = self._pixel_size(rec.image_id)
            if size is not None:
                rec = dataclasses.replace(rec, radius_um=rec.radius_px * size)
        if isinstance(rec, Spectrum) and rec.sample_id is None:
            if rec.flake_id is None:
                raise InputError("a spectrum needs its sample or its flake")
            rec = dataclasses.replace(rec, sample_id=self.get(Flake, rec.flake_id).sample_id)
        if isinstance(rec, Image) and old is not None:
            rec = dataclasses.replace(rec, embedded=old.embedded)
        if isinstance(rec, Flake) and rec.primary_terrace_id is not None and rec.id is not None:
            terrace = self.get(Terrace, rec.primary_terrace_id)
            if self.get(Appearance, terrace.appearance_id).flake_id != rec.id:
                raise InputError(
                    f"terrace {terrace.id} is not on flake {rec.label}; a flake's primary terrace "
                    "must be one of its own"
                )
        if isinstance(rec, Evidence) and rec.likelihood.size != self.max_layers + 1:
            raise InputError(
                f"layer evidence has {rec.likelihood.size} values; this project needs "
                f"{self.max_layers + 1} (N = 1..{self.max_layers} and one 'more' bin)"
            )
        if rec.DERIVED:
            check_inputs(self._db, rec)
            if old is None:
                rec = dataclasses.replace(
                    rec,
                    flakebook_version=rec.flakebook_version or flakebook.__version__,
                    computed_at=rec.computed_at or self.now(),
                    stale=rec.stale or outdated(self._db, rec.inputs),
                )
        if isinstance(rec, Assignment) and old is None:
            # a new layer number makes the flake's results computed from an assignment stale
            self._db.execute(
                "UPDATE thermometry_results SET stale = 1 WHERE flake_id = ? AND stale = 0 AND "
                "id IN (SELECT derived_id FROM dependencies WHERE derived_kind = ? AND "
                "input_kind = ?)",
                (rec.flake_id, "thermometry_result", "assignment"),
            )
            rec = dataclasses.replace(
                rec, who=rec.who or self._user, assigned_at=rec.assigned_at or self.now()
            )
        if isinstance(rec, SpectrumFit) and rec.flake_id is None:
            rec = dataclasses.replace(rec, flake_id=self.get(Spectrum, rec.spectrum_id).flake_id)
        if isinstance(rec, RamanMap) and rec.image_id is not None:
            image = self.get(Image, rec.image_id)
            if image.sample_id != rec.sample_id:
                raise InputError(
                    f"image {image.id} is of another sample than the map; accepted: an image of "
                    "the sample the map was taken on"
                )
        if isinstance(rec, RuleCalibration) and rec.created_at is None:
            rec = dataclasses.replace(rec, created_at=self.now())
        if isinstance(rec, ExternalResult) and rec.imported_at is None:
            rec = dataclasses.replace(rec, imported_at=self.now())
        if isinstance(rec, Calibration) and old is None and rec.created_at is None:
            rec = dataclasses.replace(rec, created_at=self.now())
        return rec

    def _pixel_size_for(self, rec: Appearance | Terrace) -> float | None:
        if isinstance(rec, Appearance):
            return self._pixel_size(rec.image_id)
        return self._pixel_size(self.get(Appearance, rec.appearance_id).image_id)

    def _after_update(self, old: Record, new: Record) -> None:
        """Keep the catalogue's columns in step; a new pixel size rescales what was measured in
        um on that image."""
        if isinstance(new, Appearance) and new.flake_id != old.flake_id:
            self._db.execute(
                "UPDATE terraces SET flake_id = ? WHERE appearance_id = ?", (new.flake_id, new.id)
            )
        if not isinstance(new, Image) or new.pixel_size_um == old.pixel_size_um:
            return
        self._db.execute(
            "UPDATE appearances SET pixel_size_um = ? WHERE image_id = ?",
            (new.pixel_size_um, new.id),
        )
        size = new.pixel_size_um
        if size is None:
            return
        ratio = None if old.pixel_size_um is None else size / old.pixel_size_um
        for app in self._select(Appearance, "image_id = ?", (new.id,)):
            self._write_update(app, dataclasses.replace(app, outline_um=app.outline_px * size))
            for ter in self._select(Terrace, "appearance_id = ?", (app.id,)):
                self._write_update(ter, dataclasses.replace(ter, outline_um=ter.outline_px * size))
        for hole in self._select(Hole, "image_id = ?", (new.id,)):
            err = hole.radius_err_um
            if err is not None and ratio is not None:
                err = err * ratio
            self._write_update(
                hole, dataclasses.replace(hole, radius_um=hole.radius_px * size, radius_err_um=err)
            )
            if ratio is not None:
                for link in self._select(
                    FlakeHole, "hole_id = ? AND margin_um IS NOT NULL", (hole.id,)
                ):
                    self._write_update(
                        link, dataclasses.replace(link, margin_um=link.margin_um * ratio)
                    )

    # ---- typed helpers to add records ----------------------------------------------------

    def add_sample(
        self,
        name: str,
        material: str,
        substrate: str | Sequence[SubstrateLayer | dict] | None = None,
        *,
        oxide_nm: float | None = None,
        hole_pattern: HolePattern | dict | None = None,
        notes: str = "",
    ) -> Sample:
        """Add a chip: flake material, substrate (SPEC text like ``"SiO2:285,Si"``, a list of
        layers, or ``oxide_nm`` for SiO2 on Si) and its hole pattern, if any."""
        if (substrate is None) == (oxide_nm is None):
            raise InputError("give the substrate either as a stack or as oxide_nm, not both")
        if oxide_nm is not None:
            stack = oxide_stack(oxide_nm)
        elif isinstance(substrate, str):
            stack = parse_substrate(substrate)
        else:
            stack = check_stack(substrate)
        if isinstance(hole_pattern, dict):
            hole_pattern = HolePattern(**hole_pattern)
        if self.sample_by_name(name) is not None:
            raise InputError(f"{self._path.name} already has a sample named {name!r}")
        return self.add(
            Sample(
                name=name,
                material=material,
                substrate=stack,
                hole_pattern=hole_pattern,
                notes=notes,
            )
        )

    def add_image(
        self, sample: RecordRef, file: str | os.PathLike, *, embed: bool = False, **fields: Any
    ) -> Image:
        """Add a micrograph file of a sample: its path (relative to the project where possible),
        SHA-256 and size are recorded; ``fields`` are the :class:`Image` settings
        (``pixel_size_um``, ``objective``, ``na_objective``, ``na_illumination``, ...).
        ``embed=True`` also stores the bytes in the project."""
        file = Path(file)
        if not file.is_file():
            raise InputError(
                f"image file {file} does not exist or is not a regular file; accepted: an "
                "image file"
            )
        try:
            data = read_regular(file) if embed else None
            sha, size = (hashlib.sha256(data).hexdigest(), len(data)) if data else sha256_file(file)
        except OSError as exc:
            raise InputError(f"image file {file} cannot be read: {exc.strerror or exc}") from None
        with self.transaction():
            img = self.add(
                Image(
                    sample_id=id_of(sample),
                    path=stored_path(self.folder, file),
                    sha256=sha,
                    size_bytes=size,
                    **fields,
                )
            )
            if data is not None:
                self._db.execute(
                    "INSERT INTO image_data (image_id, data) VALUES (?, ?)", (img.id, data)
                )
                img = self.get(Image, img.id)
        return img

    def add_flake(self, sample: RecordRef, label: str, **fields: Any) -> Flake:
        """Add a flake with its human-readable ID ``label`` (unique in the project);
        ``fields``: ``tags``, ``notes``, ``status``."""
        if self.flake_by_label(label) is not None:
            raise InputError(f"{self._path.name} already has a flake {label!r}")
        return self.add(Flake(sample_id=id_of(sample), label=label, **fields))

    def add_appearance(
        self, flake: RecordRef, image: RecordRef, outline_px, outline_um=None
    ) -> Appearance:
        """Add a flake's outline in an image, as (x, y) pixels; in um it is taken as
        ``outline_px * pixel_size_um`` unless given."""
        return self.add(
            Appearance(
                flake_id=id_of(flake),
                image_id=id_of(image),
                outline_px=outline_px,
                outline_um=outline_um,
            )
        )

    def add_terrace(
        self, appearance: RecordRef, outline_px, *, label: str = "", outline_um=None, notes=""
    ) -> Terrace:
        """Add a region of uniform thickness inside an appearance."""
        return self.add(
            Terrace(
                appearance_id=id_of(appearance),
                outline_px=outline_px,
                outline_um=outline_um,
                label=label,
                notes=notes,
            )
        )

    def add_hole(
        self, image: RecordRef, center_px: Sequence[float], radius_px: float, **fields: Any
    ) -> Hole:
        """Add a hole seen in an image, centre (x, y) and radius in px; ``radius_um`` defaults
        to ``radius_px * pixel_size_um``; ``fields``: ``radius_err_um``, ``source``,
        ``lattice_i``, ``lattice_j``."""
        x, y = center_px
        return self.add(
            Hole(image_id=id_of(image), center_x_px=x, center_y_px=y, radius_px=radius_px, **fields)
        )

    def link_flake_hole(self, flake: RecordRef, hole: RecordRef, **fields: Any) -> FlakeHole:
        """Record that a flake lies over a hole: ``covered_fraction``, ``fully_covered``,
        ``margin_um``, ``terrace_id`` (the terrace over it). Replaces an earlier link."""
        fid, hid = id_of(flake), id_of(hole)
        with self.transaction():
            old = self.records(FlakeHole, flake_id=fid, hole_id=hid)
            if old:
                return self.update(old[0], **fields)
            return self.add(FlakeHole(flake_id=fid, hole_id=hid, **fields))

    def add_spectrum(self, flake: RecordRef | None, x, y, **fields: Any) -> Spectrum:
        """Add a spectrum measured on a flake (or, with ``sample_id=...`` and ``flake=None``, on
        the bare substrate); ``fields`` are the :class:`Spectrum` settings (``kind``,
        ``x_unit``, ``laser_nm``, ``power_mw``, ``series_id``, ``metadata``, ...)."""
        fields = {k: id_of(v) if isinstance(v, Record) else v for k, v in fields.items()}
        return self.add(Spectrum(flake_id=id_of(flake), x=x, y=y, **fields))

    def add_beam_profile(
        self, objective: str, laser_nm: float, radius_um: float, **fields
    ) -> BeamProfile:
        """Add a measured laser spot (1/e^2 intensity radius W)."""
        return self.add(
            BeamProfile(objective=objective, laser_nm=laser_nm, radius_um=radius_um, **fields)
        )

    def add_evidence(
        self,
        flake: RecordRef,
        likelihood,
        *,
        method: str,
        terrace: RecordRef | None = None,
        inputs: Sequence[Record | SourceRef] = (),
        parameters: Mapping[str, Any] | None = None,
        source: str = "",
        reason: str = "",
    ) -> Evidence:
        """Add layer evidence: a likelihood over N = 1..N_max and the 'more' bin (length
        ``max_layers + 1``), what it was computed from (``inputs``), how (``method``,
        ``parameters``) and the published ``source`` of its constants."""
        return self.add(
            Evidence(
                flake_id=id_of(flake),
                terrace_id=id_of(terrace),
                likelihood=likelihood,
                method=method,
                inputs=tuple(inputs),
                parameters=dict(parameters or {}),
                source=source,
                reason=reason,
            )
        )

    def assign(
        self,
        flake: RecordRef,
        layers: int,
        *,
        reason: str,
        terrace: RecordRef | None = None,
        who: str | None = None,
    ) -> Assignment:
        """A person's assignment of the layer number, with the required reason (to the flake's
        primary terrace unless ``terrace`` is given)."""
        fid = id_of(flake)
        tid = id_of(terrace) if terrace is not None else self.primary_terrace_id(fid)
        return self.add(
            Assignment(
                flake_id=fid,
                terrace_id=tid,
                layers=layers,
                probability=None,
                manual=True,
                reason=reason,
                who=who or "",
            )
        )

    def add_assignment(self, flake: RecordRef, layers: int, **fields: Any) -> Assignment:
        """Add a computed assignment (``probability``, ``ambiguous_with``, ``posterior``,
        ``method``, ``inputs``: the evidence it combines, ...)."""
        fields = {k: id_of(v) if k == "terrace_id" else v for k, v in fields.items()}
        return self.add(Assignment(flake_id=id_of(flake), layers=layers, **fields))

    def add_thermometry_series(
        self, flake: RecordRef, kind: str, **fields: Any
    ) -> ThermometrySeries:
        """Add a stage-temperature or laser-power series (``kind`` temperature|power); its
        spectra name it with ``series_id``."""
        fields = {k: id_of(v) if isinstance(v, Record) else v for k, v in fields.items()}
        return self.add(ThermometrySeries(flake_id=id_of(flake), kind=kind, **fields))

    def add_thermometry_result(self, flake: RecordRef, **fields: Any) -> ThermometryResult:
        """Add a thermal-conductivity result (``kappa_w_mk``, its interval, ``method``,
        ``inputs``, ...)."""
        return self.add(ThermometryResult(flake_id=id_of(flake), **fields))

    def add_external_result(self, flake: RecordRef, **fields: Any) -> ExternalResult:
        """Add a result from an analysis done outside flakebook."""
        return self.add(ExternalResult(flake_id=id_of(flake), **fields))

    def add_calibration(self, sample: RecordRef, **fields: Any) -> Calibration:
        """Add an optics calibration of a sample (``image_id`` for one image only)."""
        fields = {
            k: id_of(v) if k == "image_id" and v is not None else v for k, v in fields.items()
        }
        return self.add(Calibration(sample_id=id_of(sample), **fields))

    def add_spectrum_fit(self, spectrum: RecordRef, **fields: Any) -> SpectrumFit:
        """Add the fit of a stored spectrum (``settings``, ``peaks``, ``calibration``,
        ``warnings``, ``method``, ``inputs``: the spectrum and any rule calibration used)."""
        return self.add(SpectrumFit(spectrum_id=id_of(spectrum), **fields))

    def add_rule_calibration(
        self, sample: RecordRef, material: str, laser_nm: float, rule_table: dict, **fields: Any
    ) -> RuleCalibration:
        """Store a Raman/PL rule table calibrated on a sample's own flakes (its JSON form)."""
        return self.add(
            RuleCalibration(
                sample_id=id_of(sample),
                material=material,
                laser_nm=laser_nm,
                rule_table=rule_table,
                **fields,
            )
        )

    def add_raman_map(self, sample: RecordRef, **fields: Any) -> RamanMap:
        """Store a Raman map's fits (:class:`RamanMap`: ``x_um``, ``y_um``, ``quantities``,
        ``maps``, ``material``, ``laser_nm``, ``method``, ``settings``; ``image_id`` with
        ``offset_x_um``/``offset_y_um`` to place it on a micrograph)."""
        fields = {k: id_of(v) if isinstance(v, Record) else v for k, v in fields.items()}
        return self.add(RamanMap(sample_id=id_of(sample), **fields))

    # ---- lookups -------------------------------------------------------------------------

    def sample_by_name(self, name: str) -> Sample | None:
        """The sample of this name, or None."""
        rows = self._select(Sample, "name = ?", (name,))
        return rows[0] if rows else None

    def flake_by_label(self, label: str) -> Flake | None:
        """The flake with this human-readable ID, or None."""
        rows = self._select(Flake, "label = ?", (label,))
        return rows[0] if rows else None

    def find_flake(self, key: str | int) -> Flake:
        """The flake with this label, or (if no label matches) this integer id."""
        flake = self.flake_by_label(str(key))
        if flake is None and str(key).isdigit():
            rows = self._select(Flake, "id = ?", (int(key),))
            flake = rows[0] if rows else None
        if flake is None:
            raise InputError(
                f"{self._path.name} has no flake {key!r}; `flakebook export` lists them"
            )
        return flake

    def samples(self) -> list[Sample]:
        """Every sample."""
        return self._select(Sample)

    def images_of(self, sample: RecordRef) -> list[Image]:
        """The images of a sample."""
        return self._select(Image, "sample_id = ?", (id_of(sample),))

    def flakes_of(self, sample: RecordRef) -> list[Flake]:
        """The flakes of a sample."""
        return self._select(Flake, "sample_id = ?", (id_of(sample),))

    def appearances_of(self, flake: RecordRef) -> list[Appearance]:
        """Where a flake appears (one outline per image)."""
        return self._select(Appearance, "flake_id = ?", (id_of(flake),))

    def terraces_of(self, flake: RecordRef) -> list[Terrace]:
        """The terraces of every appearance of a flake."""
        return self._select(
            Terrace,
            "appearance_id IN (SELECT id FROM appearances WHERE flake_id = ?)",
            (id_of(flake),),
        )

    def holes_of(self, image: RecordRef) -> list[Hole]:
        """The holes found in an image."""
        return self._select(Hole, "image_id = ?", (id_of(image),))

    def holes_covered_by(self, flake: RecordRef) -> list[tuple[FlakeHole, Hole]]:
        """The holes a flake lies over, with the link (covered fraction, margin)."""
        links = self._select(FlakeHole, "flake_id = ?", (id_of(flake),))
        return [(link, self.get(Hole, link.hole_id)) for link in links]

    def spectra_of(self, flake: RecordRef, kind: str | None = None) -> list[Spectrum]:
        """The spectra of a flake (``kind`` raman|pl|reflectance to choose)."""
        if kind is None:
            return self._select(Spectrum, "flake_id = ?", (id_of(flake),))
        return self._select(Spectrum, "flake_id = ? AND kind = ?", (id_of(flake), kind))

    def spectra_of_sample(self, sample: RecordRef) -> list[Spectrum]:
        """The spectra stored on a sample but on no flake (bare-substrate references)."""
        return self._select(Spectrum, "sample_id = ? AND flake_id IS NULL", (id_of(sample),))

    def spectra_of_series(self, series: RecordRef) -> list[Spectrum]:
        """The spectra of a thermometry series."""
        return self._select(Spectrum, "series_id = ?", (id_of(series),))

    def evidence_of(self, flake: RecordRef, terrace: RecordRef | None = None) -> list[Evidence]:
        """The layer evidence of a flake (of one terrace when given)."""
        if terrace is None:
            return self._select(Evidence, "flake_id = ?", (id_of(flake),))
        return self._select(
            Evidence, "flake_id = ? AND terrace_id = ?", (id_of(flake), id_of(terrace))
        )

    def assignments_of(self, flake: RecordRef) -> list[Assignment]:
        """Every assignment of a flake, oldest first."""
        return self._select(Assignment, "flake_id = ?", (id_of(flake),))

    def thermometry_of(
        self, flake: RecordRef
    ) -> tuple[list[ThermometrySeries], list[ThermometryResult]]:
        """A flake's thermometry series and results."""
        fid = id_of(flake)
        return (
            self._select(ThermometrySeries, "flake_id = ?", (fid,)),
            self._select(ThermometryResult, "flake_id = ?", (fid,)),
        )

    def external_results_of(self, flake: RecordRef) -> list[ExternalResult]:
        """Results imported for a flake from outside analyses."""
        return self._select(ExternalResult, "flake_id = ?", (id_of(flake),))

    def calibrations_of(self, sample: RecordRef) -> list[Calibration]:
        """The optics calibrations of a sample."""
        return self._select(Calibration, "sample_id = ?", (id_of(sample),))

    def fits_of(self, spectrum: RecordRef) -> list[SpectrumFit]:
        """The fits of a stored spectrum, oldest first."""
        return self._select(SpectrumFit, "spectrum_id = ?", (id_of(spectrum),))

    def spectrum_fits_of_flake(self, flake: RecordRef) -> list[SpectrumFit]:
        """The spectrum fits of a flake, oldest first."""
        return self._select(SpectrumFit, "flake_id = ?", (id_of(flake),))

    def raman_maps_of(self, sample: RecordRef | None = None) -> list[RamanMap]:
        """The Raman maps of a sample (of every sample without one), oldest first."""
        if sample is None:
            return self._select(RamanMap)
        return self._select(RamanMap, "sample_id = ?", (id_of(sample),))

    def raman_maps_on(self, image: RecordRef) -> list[RamanMap]:
        """The Raman maps placed on an image, oldest first."""
        return self._select(RamanMap, "image_id = ?", (id_of(image),))

    def rule_calibrations_of(
        self, sample: RecordRef, laser_nm: float | None = None
    ) -> list[RuleCalibration]:
        """A sample's calibrated rule tables (of one laser line within 5 nm), oldest first."""
        rows = self._select(RuleCalibration, "sample_id = ?", (id_of(sample),))
        if laser_nm is None:
            return rows
        return [r for r in rows if abs(r.laser_nm - float(laser_nm)) <= 5.0]

    def primary_terrace_id(self, flake: RecordRef) -> int | None:
        """The terrace whose layer number is the flake's: the one chosen by the user, else the
        one over a hole, else the largest (DESIGN.md); None for a flake without terraces."""
        row = self._db.execute(
            f"SELECT {PRIMARY_TERRACE_SQL} FROM flakes f WHERE f.id = ?", (id_of(flake),)
        ).fetchone()
        return None if row is None else row[0]

    def latest_assignment(self, flake: RecordRef) -> Assignment | None:
        """The flake's current assignment: the latest one of its primary terrace (or of the
        flake as a whole)."""
        fid = id_of(flake)
        tid = self.primary_terrace_id(fid)
        rows = self._select(
            Assignment,
            "id = (SELECT id FROM assignments WHERE flake_id = ? AND "
            "(terrace_id IS NULL OR terrace_id IS ?) ORDER BY id DESC LIMIT 1)",
            (fid, tid),
        )
        return rows[0] if rows else None


def _same_array(a, b) -> bool:
    return a is b or (a is not None and b is not None and np.array_equal(a, b))
