"""The window's hold on one open project: reads for the views, edits with their inverses.

A :class:`Session` wraps a :class:`flakebook.store.Project`. Every edit method writes to the
project at once (one store transaction) and returns a function that reverts it, which the window
keeps on its undo stack. A record deleted and restored by undo comes back with a new id; the
session keeps an alias from the old id to the new one so that older commands on the stack still
find it.

Layer numbers, contrast, holes and coverage come from the core (``flakebook.imaging``,
``flakebook.optics``, ``flakebook.evidence``); nothing here computes physics of its own.
"""

from __future__ import annotations

import logging
from collections.abc import Callable, Sequence
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path

import cv2
import numpy as np

from flakebook.errors import InputError, ProjectError, check_cancel
from flakebook.store import (
    Appearance,
    Assignment,
    Evidence,
    Flake,
    FlakeHole,
    Hole,
    HolePattern,
    Image,
    Project,
    ProjectLocked,
    Sample,
    Terrace,
)
from flakebook.substrate import format_substrate

log = logging.getLogger("flakebook.gui")

#: Methods of the derived records the window writes (and can recompute when stale).
from flakebook.pipeline import (  # noqa: E402 - the shared recording of core results
    COMBINED_METHOD,
    CONTRAST_METHOD,
    calibration_values,
    contrast_likelihood,
    optics_inputs,
    record_hole,
)

Undo = Callable[[], object]


class ProjectBusy(ProjectError):
    """The project is held read-write by another window or program."""


@dataclass
class Shown:
    """An image ready for the canvas."""

    image_id: int
    name: str
    display: np.ndarray  # uint8 (h, w) or (h, w, 3) sRGB for the screen
    um_per_px: float | None
    channels: tuple[str, ...] = ()
    linear: np.ndarray | None = None
    reference: np.ndarray | None = None
    warnings: list[str] = field(default_factory=list)


# ---- helpers on the core ---------------------------------------------------------------------


def _decode(data: bytes, name: str) -> np.ndarray:
    arr = cv2.imdecode(np.frombuffer(data, np.uint8), cv2.IMREAD_UNCHANGED)
    if arr is None or arr.size == 0:
        raise InputError(f"{name}: the image cannot be decoded; accepted: PNG, JPEG, TIFF or BMP")
    if arr.ndim == 3 and arr.shape[2] == 4:
        arr = arr[:, :, :3]
    if arr.ndim == 3:
        arr = cv2.cvtColor(arr, cv2.COLOR_BGR2RGB)
    return arr


def display_of(raw: np.ndarray) -> np.ndarray:
    """A uint8 picture for the screen from decoded file data (16-bit: scaled to its range)."""
    if raw.dtype == np.uint8:
        return raw
    a = raw.astype(np.float32)
    hi = (
        float(np.percentile(a[:: max(1, a.shape[0] // 256), :: max(1, a.shape[1] // 256)], 99.8))
        or 1.0
    )
    from flakebook.imaging.io import linear_to_srgb

    return (np.clip(linear_to_srgb(np.clip(a / hi, 0, 1)), 0, 1) * 255).astype(np.uint8)


# ---- the session -----------------------------------------------------------------------------


class Session:
    """One open project as the window sees it."""

    def __init__(self, project: Project) -> None:
        self.project = project
        self._alias: dict[tuple[str, int], list[tuple[int, int]]] = {}
        self._ctx: int | None = None
        self._resolved: set[tuple[str, int]] = set()
        self.epoch = 0
        self._raw: dict[int, np.ndarray] = {}  # decoded image data (last two)
        self._micro: dict[int, object] = {}
        self._thumbs: dict[tuple[int, int], object] = {}

    # ---- opening ---------------------------------------------------------------------------
    @classmethod
    def open(cls, path: Path, *, read_only: bool = False) -> Session:
        """Open ``path``; :class:`ProjectBusy` when another program holds it read-write."""
        try:
            project = Project.open(path, read_only=read_only)
        except ProjectLocked as exc:
            raise ProjectBusy(str(exc)) from None
        return cls(project)

    @classmethod
    def create(cls, path: Path, sample: dict) -> Session:
        """A new project file with its first sample."""
        project = Project.create(path)
        try:
            project.add_sample(
                sample["name"],
                sample["material"],
                sample["substrate"],
                hole_pattern=sample.get("hole_pattern"),
                notes=sample.get("notes", ""),
            )
        except BaseException:
            project.close()
            raise
        return cls(project)

    @property
    def path(self) -> Path:
        return self.project.path

    @property
    def read_only(self) -> bool:
        return self.project.read_only

    @property
    def warnings(self) -> list[str]:
        return list(self.project.warnings)

    def close(self) -> None:
        self.project.close()

    # ---- ids -------------------------------------------------------------------------------
    # Ids and undo. SQLite may give a restored record the id of another deleted one, so an
    # alias says "record (kind, old) lives on as new since epoch E". Commands resolve the ids
    # they captured at epoch e through the aliases made after e only (see resolving()); ids
    # coming from the window's current state are live and resolve to themselves.

    @contextmanager
    def resolving(self, epoch: int):
        """Resolve ids captured at ``epoch`` (an undo or redo runs in a new epoch of its own)."""
        prev, prev_resolved = self._ctx, self._resolved
        self._ctx = epoch
        self._resolved = set()
        self.epoch += 1
        try:
            yield
        finally:
            self._ctx, self._resolved = prev, prev_resolved

    def _r(self, kind: str, rid: int) -> int:
        e = self._ctx
        if e is None or rid is None or (kind, rid) in self._resolved:
            return rid  # live already (resolution is idempotent within an undo or redo)
        start = rid
        for _ in range(1000):
            later = [(ep, new) for ep, new in self._alias.get((kind, rid), ()) if ep > e]
            if not later:
                break
            e, rid = min(later)
        if rid != start:
            self._resolved.add((kind, rid))
        return rid

    def _alias_to(self, kind: str, old: int, new: int) -> None:
        if old != new:
            self._alias.setdefault((kind, old), []).append((self.epoch, new))

    def _born(self, kind: str, rid: int) -> None:
        """A record was stored with id ``rid`` (kept for symmetry; epochs keep ids apart)."""

    def _get(self, cls, rid: int):
        return self.project.get(cls, self._r(cls.KIND, rid))

    # ---- reads for the views -----------------------------------------------------------------
    def first_image(self, sample_id: int | None = None) -> int | None:
        p = self.project
        samples = [self._get(Sample, sample_id)] if sample_id is not None else p.samples()
        for s in samples:
            images = p.images_of(s)
            if images:
                return images[0].id
        return None

    def has_image(self, image_id: int) -> bool:
        return bool(self.project.records(Image, id=self._r("image", image_id)))

    def has_flake(self, flake_id: int) -> bool:
        return bool(self.project.records(Flake, id=self._r("flake", flake_id)))

    def current_sample(self, image_id: int | None) -> int:
        if image_id is not None and self.has_image(image_id):
            return self._get(Image, image_id).sample_id
        samples = self.project.samples()
        if not samples:
            raise InputError("The project has no sample yet; add one (Edit > New sample).")
        return samples[0].id

    def browser_tree(self) -> list[dict]:
        p = self.project
        cat = {r.flake_id: r for r in p.catalogue()}
        apps_of: dict[int, list] = {}
        for a in p.records(Appearance):
            apps_of.setdefault(a.flake_id, []).append(a)
        out = []
        for s in p.samples():
            images = p.images_of(s)
            names = {im.id: Path(im.path).name for im in images}
            flakes = []
            for f in p.flakes_of(s):
                row = cat.get(f.id)
                flakes.append(
                    {
                        "id": f.id,
                        "label": f.label,
                        "layers": row.layers if row else None,
                        "probability": row.probability if row else None,
                        "stale": row.stale if row else False,
                        "appearances": [
                            (a.image_id, names.get(a.image_id, "?")) for a in apps_of.get(f.id, ())
                        ],
                    }
                )
            out.append(
                {
                    "id": s.id,
                    "name": s.name,
                    "material": s.material,
                    "summary": f"{s.material} on {format_substrate(s.substrate)}"
                    + (f"; holes {s.hole_pattern.diameter_um:g} µm" if s.hole_pattern else ""),
                    "images": [
                        {
                            "id": im.id,
                            "name": names[im.id],
                            "um_per_px": im.pixel_size_um,
                            "path": im.path,
                        }
                        for im in images
                    ],
                    "flakes": flakes,
                }
            )
        return out

    def catalogue_rows(self) -> list[dict]:
        p = self.project
        rows = []
        export = {e["flake_id"]: e for e in p.export_rows()}  # thickness and kappa (INTERFACE.md)
        for r in p.catalogue():
            amb: tuple = ()
            latest = p.latest_assignment(r.flake_id)
            if latest is not None:
                amb = latest.ambiguous_with
            flake = p.get(Flake, r.flake_id)
            ex = export.get(r.label, {})
            rows.append(
                {
                    "id": r.flake_id,
                    "flake_id": r.label,
                    "sample": r.sample,
                    "area_um2": r.area_um2,
                    "layers": r.layers,
                    "probability": r.probability,
                    "ambiguous_with": list(amb),
                    "manual": r.manual,
                    "holes_covered": r.holes_covered,
                    "margin_um": r.margin_um,
                    "thickness_nm": ex.get("thickness_nm"),
                    "kappa_w_mk": ex.get("kappa_w_mk"),
                    "kappa_p16_w_mk": ex.get("kappa_p16_w_mk"),
                    "kappa_p84_w_mk": ex.get("kappa_p84_w_mk"),
                    "tags": list(r.tags),
                    "stale": r.stale,
                    "notes": flake.notes,
                }
            )
        return rows

    def image_info(self, image_id: int) -> dict:
        img = self._get(Image, image_id)
        sample = self.project.get(Sample, img.sample_id)
        r_px = None
        if sample.hole_pattern is not None and img.pixel_size_um:
            r_px = 0.5 * sample.hole_pattern.diameter_um / img.pixel_size_um
        return {
            "name": Path(img.path).name,
            "um_per_px": img.pixel_size_um,
            "default_hole_radius_px": r_px,
            "sample_id": img.sample_id,
        }

    def images_of_flake(self, flake_id: int) -> list[int]:
        return [a.image_id for a in self.project.appearances_of(self._r("flake", flake_id))]

    def flake_label(self, flake_id: int) -> str:
        return self._get(Flake, flake_id).label

    def overlays(self, image_id: int):
        """(outlines, holes) of an image as the canvas draws them (a few queries in all)."""
        from flakebook.gui.canvas import OutlineShape

        p = self.project
        iid = self._r("image", image_id)
        apps = p.records(Appearance, image_id=iid)
        layers_of = {r.flake_id: r.layers for r in p.catalogue()}
        labels = {f.id: f.label for f in p.records(Flake)}
        app_ids = {a.id for a in apps}
        flake_ids = {a.flake_id for a in apps}
        terraces: dict[int, list] = {}
        for t in p.records(Terrace):
            if t.appearance_id in app_ids and len(t.outline_px) >= 3:
                terraces.setdefault(t.appearance_id, []).append(t)
        terrace_layers: dict[int, int] = {}
        for asg in p.records(Assignment):  # id order: later ones win
            if asg.flake_id in flake_ids and asg.terrace_id is not None:
                terrace_layers[asg.terrace_id] = asg.layers
        outlines = [
            OutlineShape(
                a.id,
                a.flake_id,
                labels.get(a.flake_id, "?"),
                a.outline_px,
                layers_of.get(a.flake_id),
                tuple((t.outline_px, terrace_layers.get(t.id)) for t in terraces.get(a.id, ())),
            )
            for a in apps
        ]
        return outlines, self.hole_shapes(iid)

    def hole_shapes(self, image_id: int):
        """The holes of an image as the canvas draws them."""
        from flakebook.gui.canvas import HoleShape

        return [
            HoleShape(h.id, h.center_x_px, h.center_y_px, h.radius_px, h.source != "manual")
            for h in self.project.holes_of(self._r("image", image_id))
        ]

    def load_image(self, image_id: int) -> Shown:
        """Decode an image for the screen (hash-checked by the store)."""
        img = self._get(Image, image_id)
        name = Path(img.path).name
        raw = self._raw.get(img.id)
        if raw is None:
            data = self.project.image_bytes(img)
            raw = _decode(data, name)
            self._raw = {k: v for k, v in list(self._raw.items())[-1:]}
            self._raw[img.id] = raw
        display = display_of(raw)
        shown = Shown(img.id, name, display, img.pixel_size_um)
        return shown

    def thumbnail(self, row: dict):
        """A small crop of the flake's primary appearance for the catalogue (QPixmap or None)."""

        p = self.project
        apps = p.appearances_of(row["id"])
        if not apps:
            return None
        app = apps[0]
        key = (app.id, app.revision)
        if key in self._thumbs:
            return self._thumbs[key]
        raw = self._raw.get(app.image_id)
        if raw is None:
            return None  # only images already decoded give thumbnails (no waiting in the table)
        pix = self._make_thumbnail(raw, app)
        self._thumbs[key] = pix
        return pix

    def _make_thumbnail(self, raw: np.ndarray, app: Appearance, scale: int = 1):
        return pixmap_of(thumbnail_crop(display_of(raw), app.outline_px / scale))

    def thumbnail_job(self):
        """Work making the thumbnails still missing, from the image files (reduced decoding, in a
        worker), or None when none is missing. Files whose size differs from the one recorded
        are skipped (the store reports changed files when the image itself is opened)."""
        p = self.project
        images = {im.id: im for im in p.records(Image)}
        todo = []
        for f in p.records(Flake):
            apps = p.appearances_of(f)
            if not apps:
                continue
            app = apps[0]
            if (app.id, app.revision) in self._thumbs or app.image_id in self._raw:
                continue
            img = images.get(app.image_id)
            file = p.image_file(img) if img is not None else None
            if file is None or not file.is_file() or file.stat().st_size != img.size_bytes:
                continue
            todo.append(
                ((app.id, app.revision), str(file), app.outline_px.copy(), img.width_px or 0)
            )
        if not todo:
            return None

        def run(progress=None, cancel=None):
            out = {}
            cache: dict[str, tuple] = {}
            for i, (key, file, outline, width) in enumerate(todo):
                check_cancel(cancel)
                if file not in cache:
                    reduce = (
                        8 if width > 4000 else (4 if width > 2000 else (2 if width > 1000 else 1))
                    )
                    flag = {
                        1: cv2.IMREAD_COLOR,
                        2: cv2.IMREAD_REDUCED_COLOR_2,
                        4: cv2.IMREAD_REDUCED_COLOR_4,
                        8: cv2.IMREAD_REDUCED_COLOR_8,
                    }[reduce]
                    arr = cv2.imread(file, flag)
                    cache = {
                        file: (
                            None if arr is None else cv2.cvtColor(arr, cv2.COLOR_BGR2RGB),
                            reduce,
                        )
                    }
                arr, reduce = cache[file]
                if arr is not None:
                    out[key] = thumbnail_crop(arr, outline / reduce)
                if progress:
                    progress((i + 1) / len(todo), "thumbnails")
            return out

        return run

    def add_thumbnails(self, crops: dict) -> None:
        """Keep thumbnails made by :meth:`thumbnail_job` (on the window's thread)."""
        for key, crop in crops.items():
            self._thumbs[key] = pixmap_of(crop)

    def flake_details(self, flake_id: int) -> dict:
        """Everything the inspector shows about a flake."""
        p = self.project
        fid = self._r("flake", flake_id)
        flake = p.get(Flake, fid)
        sample = p.get(Sample, flake.sample_id)
        row = next((r for r in p.catalogue(sample) if r.flake_id == fid), None)
        latest = p.latest_assignment(fid)
        tid = p.primary_terrace_id(fid)
        evidence = [e for e in p.evidence_of(fid) if tid is None or e.terrace_id in (tid, None)]
        computed = [
            a for a in p.assignments_of(fid) if not a.manual and a.terrace_id in (tid, None)
        ]
        comp = computed[-1] if computed else None
        contrast, contrast_err, geometry, image_id = {}, {}, "supported", None
        for e in evidence:
            if isinstance(e.parameters.get("contrast"), dict):  # contrast evidence of any source
                contrast = dict(e.parameters.get("contrast") or {})
                contrast_err = dict(e.parameters.get("contrast_err") or {})
                geometry = e.parameters.get("geometry", "supported")
                image_id = e.parameters.get("image_id")
        posterior = None
        if latest is not None and latest.posterior is not None:
            posterior = latest.posterior.tolist()
        elif comp is not None and comp.posterior is not None:
            posterior = comp.posterior.tolist()
        holes = []
        for link, hole in p.holes_covered_by(fid):
            holes.append(
                {
                    "hole_id": hole.id,
                    "label": f"#{hole.id} ({hole.radius_um or 0:.2f} µm)"
                    if hole.radius_um
                    else f"#{hole.id}",
                    "covered_fraction": link.covered_fraction,
                    "fully_covered": link.fully_covered,
                    "margin_um": link.margin_um,
                }
            )
        images = {im.id: Path(im.path).name for im in p.images_of(sample)}
        oxide_err = None
        cals = p.calibrations_of(sample)
        if cals and cals[-1].oxide_err_nm is not None:
            oxide_err = cals[-1].oxide_err_nm
        if image_id is None:
            apps = p.appearances_of(fid)
            image_id = apps[0].image_id if apps else None
        model_key = None
        if contrast and image_id is not None and p.records(Image, id=image_id):
            img = p.get(Image, image_id)
            model_key = (
                sample.id,
                sample.revision,
                img.id,
                img.revision,
                geometry,
                tuple(sorted(contrast.items())),
                tuple(sorted(contrast_err.items())),
                cals[-1].id if cals else None,
            )
        return {
            "id": fid,
            "label": flake.label,
            "sample": sample.name,
            "material": sample.material,
            "sample_id": sample.id,
            "image_id": image_id,
            "geometry": geometry,
            "area_um2": row.area_um2 if row else None,
            "stale": row.stale if row else False,
            "tags": list(flake.tags),
            "notes": flake.notes,
            "status": flake.status,
            "layers": latest.layers if latest else None,
            "probability": latest.probability if latest else None,
            "ambiguous_with": list(latest.ambiguous_with)
            if latest and not latest.manual
            else (list(comp.ambiguous_with) if comp else []),
            "manual": bool(latest and latest.manual),
            "manual_reason": latest.reason if latest and latest.manual else "",
            "evidence_layers": comp.layers if comp else None,
            "evidence_probability": comp.probability if comp else None,
            "posterior": posterior,
            "max_layers": p.max_layers,
            "evidence": [
                {"method": e.method, "reason": e.reason, "source": e.source, "stale": e.stale}
                for e in evidence
            ]
            + (
                [
                    {
                        "method": "manual",
                        "reason": f"{latest.layers}L by {latest.who}: {latest.reason}",
                        "source": "",
                    }
                ]
                if latest is not None and latest.manual
                else []
            ),
            "contrast": contrast,
            "contrast_err": contrast_err,
            "holes": holes,
            "appearances": [
                (a.image_id, images.get(a.image_id, "?")) for a in p.appearances_of(fid)
            ],
            "oxide_err_nm": oxide_err,
            "model_key": model_key,
            "primary_terrace_id": tid,
            "primary_chosen": flake.primary_terrace_id is not None,
            "terraces": self._terrace_choices(fid),
        }

    def _terrace_choices(self, fid: int) -> list[tuple[int, str]]:
        """(terrace id, text) for each terrace of a flake: label, latest layer number, area."""
        p = self.project
        layers: dict[int, int] = {}
        for a in p.assignments_of(fid):
            if a.terrace_id is not None:
                layers[a.terrace_id] = a.layers
        out = []
        for t in p.terraces_of(fid):
            n = layers.get(t.id)
            area = f", {t.area_um2:.0f} µm²" if t.area_um2 is not None else ""
            lab = t.label or f"terrace {t.id}"
            out.append((t.id, f"{lab} ({'?' if n is None else n}L{area})"))
        return out

    # ---- holes -------------------------------------------------------------------------------
    def hole_geometry(self, hole_id: int) -> tuple[float, float, float]:
        h = self._get(Hole, hole_id)
        return h.center_x_px, h.center_y_px, h.radius_px

    def add_hole(
        self, image_id: int, x: float, y: float, r: float, hole_id: int | None = None
    ) -> int:
        p = self.project
        iid = self._r("image", image_id)
        with p.transaction():
            hole = p.add_hole(iid, (x, y), r, source="manual")
            self._born("hole", hole.id)
            self._update_coverage_for_hole(hole)
        if hole_id is not None:
            self._alias_to("hole", hole_id, hole.id)
        return hole.id

    def update_hole(self, hole_id: int, x: float, y: float, r: float) -> None:
        p = self.project
        with p.transaction():
            hole = self._get(Hole, hole_id)
            size = p.get(Image, hole.image_id).pixel_size_um
            hole = p.update(
                hole,
                center_x_px=float(x),
                center_y_px=float(y),
                radius_px=float(r),
                radius_um=None if size is None else float(r) * size,
            )
            self._update_coverage_for_hole(hole)

    def delete_hole(self, hole_id: int) -> Undo:
        """Delete a hole (and its flake links); the undo puts back exactly the same rows."""
        p = self.project
        deleted = p.delete(self._get(Hole, hole_id))
        return lambda: p.restore(deleted)

    def _update_coverage_for_hole(self, hole: Hole) -> None:
        """Coverage of this hole by every flake outlined in its image (imaging.holes)."""
        from flakebook.imaging.holes import hole_coverage

        p = self.project
        img = p.get(Image, hole.image_id)
        for a in p.records(Appearance, image_id=img.id):
            cov = hole_coverage(
                a.outline_px,
                ((hole.center_x_px, hole.center_y_px), hole.radius_px),
                img.pixel_size_um or 1.0,
            )
            old = p.records(FlakeHole, flake_id=a.flake_id, hole_id=hole.id)
            if cov.covered_fraction <= 1e-9:
                for lk in old:
                    p.delete(lk)
                continue
            p.link_flake_hole(
                a.flake_id,
                hole.id,
                covered_fraction=cov.covered_fraction,
                fully_covered=cov.fully_covered,
                margin_um=cov.margin_um if img.pixel_size_um else None,
            )

    def _update_coverage_for_appearance(self, app: Appearance) -> None:
        p = self.project
        for hole in p.holes_of(app.image_id):
            self._update_coverage_for_hole(hole)

    # ---- scale, outlines, flakes ---------------------------------------------------------------
    def set_pixel_size(self, image_id: int, um_per_px: float | None, method: str = "") -> None:
        p = self.project
        img = self._get(Image, image_id)
        with p.transaction():
            camera = dict(img.camera)
            if method:
                camera["scale_method"] = method
            img = p.update(img, pixel_size_um=um_per_px, camera=camera)
            for a in p.records(Appearance, image_id=img.id):
                self._update_coverage_for_appearance(a)
                break

    def next_label(self, sample: Sample) -> str:
        used = {f.label for f in self.project.records(Flake)}
        k = len(self.project.flakes_of(sample)) + 1
        while f"{sample.name}-{k:03d}" in used:
            k += 1
        return f"{sample.name}-{k:03d}"

    def add_flake(self, image_id: int, points: np.ndarray, label: str | None = None) -> int:
        """A new flake with its outline in this image (drawn by hand)."""
        p = self.project
        img = self._get(Image, image_id)
        sample = p.get(Sample, img.sample_id)
        with p.transaction():
            flake = p.add_flake(sample, label or self.next_label(sample))
            app = p.add_appearance(flake, img, np.asarray(points, float))
            self._born("flake", flake.id)
            self._born("appearance", app.id)
            self._update_coverage_for_appearance(app)
        return flake.id

    def outline(self, appearance_id: int) -> np.ndarray:
        return self._get(Appearance, appearance_id).outline_px.copy()

    def set_outline(self, appearance_id: int, points: np.ndarray) -> None:
        p = self.project
        with p.transaction():
            app = p.update(
                self._get(Appearance, appearance_id),
                outline_px=np.asarray(points, float),
                outline_um=None,
            )
            self._update_coverage_for_appearance(app)

    def split_flake(self, flake_id: int, image_id: int, p0, p1) -> tuple[int, Undo]:
        """Split a flake's outline in this image along a line; the far side becomes a new flake.
        Returns the new flake's id and the undo."""
        from flakebook.gui.geometry import split_outline

        p = self.project
        fid = self._r("flake", flake_id)
        app = next(
            (a for a in p.appearances_of(fid) if a.image_id == self._r("image", image_id)), None
        )
        if app is None:
            raise InputError("The selected flake has no outline in this image.")
        a, b = split_outline(app.outline_px, p0, p1)
        before = app.outline_px.copy()
        img = p.get(Image, app.image_id)
        with p.transaction():
            self.set_outline(app.id, a)
            sample = p.get(Sample, img.sample_id)
            new = p.add_flake(sample, self.next_label(sample))
            new_app = p.add_appearance(new, img, b)
            self._born("flake", new.id)
            self._born("appearance", new_app.id)
            self._update_coverage_for_appearance(new_app)

        def undo():
            with p.transaction():
                rid = self._r("flake", new.id)
                if p.records(Flake, id=rid):
                    p.delete(Flake, rid)
                self.set_outline(self._r("appearance", app.id), before)

        return new.id, undo

    def merge_flakes(self, keep_id: int, other_id: int, image_id: int) -> Undo:
        """Merge ``other``'s outline in this image into ``keep``'s (its terraces, evidence and
        hole links move over; ``other`` goes when it has no other appearance)."""
        from flakebook.gui.geometry import merge_outlines

        p = self.project
        keep, other = self._r("flake", keep_id), self._r("flake", other_id)
        iid = self._r("image", image_id)
        if keep == other:
            raise InputError("Choose another flake to merge with.")
        ka = next((a for a in p.appearances_of(keep) if a.image_id == iid), None)
        oa = next((a for a in p.appearances_of(other) if a.image_id == iid), None)
        if ka is None or oa is None:
            raise InputError("Both flakes need an outline in the image shown.")
        union = merge_outlines(ka.outline_px, oa.outline_px)
        before = ka.outline_px.copy()
        moved_t = [t.id for t in p.records(Terrace, appearance_id=oa.id)]
        moved_e = [e.id for e in p.evidence_of(other)]
        deleted = []
        with p.transaction():
            for tid in moved_t:
                p.update(p.get(Terrace, tid), appearance_id=ka.id)
            for eid in moved_e:
                p.update(p.get(Evidence, eid), flake_id=keep)
            for asg in p.assignments_of(other):
                deleted.append(p.delete(asg))
            for lk in p.records(FlakeHole, flake_id=other):
                deleted.append(p.delete(lk))
            deleted.append(p.delete(oa))
            if not p.appearances_of(other):
                deleted.append(p.delete(Flake, other))
            self.set_outline(ka.id, union)

        def undo():
            with p.transaction():
                for d in reversed(deleted):
                    p.restore(d)
                for tid in moved_t:
                    p.update(p.get(Terrace, tid), appearance_id=oa.id)
                for eid in moved_e:
                    p.update(p.get(Evidence, eid), flake_id=other)
                self.set_outline(ka.id, before)

        return undo

    def delete_flake(self, flake_id: int) -> Undo:
        """Delete a flake and all that is on it; the undo restores the same rows and ids."""
        p = self.project
        deleted = p.delete(Flake, self._r("flake", flake_id))
        return lambda: p.restore(deleted)

    def set_flake_fields(self, flake_id: int, **fields) -> Undo:
        p = self.project
        flake = self._get(Flake, flake_id)
        before = {k: getattr(flake, k) for k in fields}
        p.update(flake, **fields)
        return lambda: p.update(self._get(Flake, flake.id), **before)

    def assign(self, flake_id: int, layers: int, reason: str) -> Undo:
        p = self.project
        rec = p.assign(self._r("flake", flake_id), int(layers), reason=reason)
        return lambda: p.delete(Assignment, self._r("assignment", rec.id))

    def clear_manual(self, flake_id: int) -> Undo:
        """Remove the flake's manual assignments (the evidence decides again)."""
        p = self.project
        fid = self._r("flake", flake_id)
        manual = [a for a in p.assignments_of(fid) if a.manual]
        if not manual:
            raise InputError("This flake has no manual assignment to remove.")
        with p.transaction():
            deleted = [p.delete(a) for a in manual]

        def restore():
            with p.transaction():
                for d in reversed(deleted):
                    p.restore(d)

        return restore

    def sample_values(self, sample_id: int) -> dict:
        s = self._get(Sample, sample_id)
        return {
            "name": s.name,
            "material": s.material,
            "substrate": format_substrate(s.substrate),
            "hole_pattern": s.hole_pattern.to_dict() if s.hole_pattern else None,
            "notes": s.notes,
        }

    def _sample_fields(self, values: dict) -> dict:
        from flakebook.substrate import parse_substrate

        hp = values.get("hole_pattern")
        return {
            "name": values["name"],
            "material": values["material"],
            "substrate": parse_substrate(values["substrate"]),
            "hole_pattern": HolePattern(**hp) if hp else None,
            "notes": values.get("notes", ""),
        }

    def update_sample(self, sample_id: int, values: dict) -> Undo:
        p = self.project
        s = self._get(Sample, sample_id)
        before = {
            k: getattr(s, k) for k in ("name", "material", "substrate", "hole_pattern", "notes")
        }
        p.update(s, **self._sample_fields(values))
        return lambda: p.update(self._get(Sample, s.id), **before)

    def add_sample(self, values: dict) -> int:
        v = self._sample_fields(values)
        return self.project.add_sample(
            v["name"],
            v["material"],
            values["substrate"],
            hole_pattern=v["hole_pattern"],
            notes=v["notes"],
        ).id

    def delete_sample(self, sample_id: int) -> None:
        s = self._get(Sample, sample_id)
        if self.project.images_of(s) or self.project.flakes_of(s):
            raise InputError(f"Sample {s.name} has images or flakes now; it is not removed.")
        self.project.delete(s)

    def image_values(self, image_id: int) -> dict:
        img = self._get(Image, image_id)
        return {
            "name": Path(img.path).name,
            "objective": img.objective,
            "pixel_size_um": img.pixel_size_um,
            "na_objective": img.na_objective,
            "na_illumination": img.na_illumination,
            "illumination": img.illumination,
        }

    def update_image(self, image_id: int, values: dict) -> Undo:
        p = self.project
        img = self._get(Image, image_id)
        if values.get("illumination"):
            from flakebook.optics.microscope import Illumination

            Illumination.parse(values["illumination"])  # refuses a bad spec with its own message
        before = {k: getattr(img, k) for k in values}
        p.update(img, **values)
        return lambda: p.update(self._get(Image, img.id), **before)

    def microscope_settings(self, image_id: int | None) -> dict:
        """An image's microscope settings, to give new images of the same session."""
        if image_id is None or not self.has_image(image_id):
            return {}
        img = self._get(Image, image_id)
        keys = ("objective", "pixel_size_um", "na_objective", "na_illumination", "illumination")
        return {k: getattr(img, k) for k in keys if getattr(img, k) not in (None, "")}

    def add_images(
        self, sample_id: int, paths: Sequence[Path], settings: dict | None = None
    ) -> list[int]:
        """Add image files to a sample (checked by decoding their header first), with the
        microscope ``settings`` (objective, pixel size, apertures) when given."""
        from flakebook.imaging.io import read_header

        p = self.project
        sid = self._r("sample", sample_id)
        ids = []
        with p.transaction():
            for path in paths:
                head = read_header(path)
                img = p.add_image(
                    sid, path, width_px=head.width, height_px=head.height, **(settings or {})
                )
                ids.append(img.id)
        return ids

    def delete_images(self, image_ids: Sequence[int]) -> None:
        p = self.project
        with p.transaction():
            for iid in image_ids:
                p.delete(Image, self._r("image", iid))

    def link_choices(self, flake_id: int) -> list[tuple[int, str]]:
        p = self.project
        f = self._get(Flake, flake_id)
        return [(o.id, o.label) for o in p.flakes_of(f.sample_id) if o.id != f.id]

    def link_flake(self, source_id: int, target_id: int) -> Undo:
        """The outline(s) of ``source`` are another image's view of ``target``: move them over."""
        p = self.project
        src = self._r("flake", source_id)
        dst = self._r("flake", target_id)
        apps = p.appearances_of(src)
        target_images = {a.image_id for a in p.appearances_of(dst)}
        if any(a.image_id in target_images for a in apps):
            raise InputError(
                "The chosen flake already has an outline in this image; pick another one."
            )
        moved = [("appearance", a.id) for a in apps]
        moved += [("evidence", e.id) for e in p.evidence_of(src)]
        moved += [("flake_hole", lk.id) for lk in p.records(FlakeHole, flake_id=src)]
        moved += [("assignment", a.id) for a in p.assignments_of(src) if a.manual]
        deleted = []
        with p.transaction():
            for kind, rid in moved:
                p.update(p.get(kind, rid), flake_id=dst)
            for a in p.assignments_of(src):
                deleted.append(p.delete(a))
            deleted.append(p.delete(Flake, src))

        def undo():
            with p.transaction():
                for d in reversed(deleted):
                    p.restore(d)
                for kind, rid in moved:
                    p.update(p.get(kind, rid), flake_id=src)

        return undo

    def _survey_inputs(self, image_id: int):
        img = self._get(Image, image_id)
        sample = self.project.get(Sample, img.sample_id)
        if not img.pixel_size_um:
            raise InputError(
                f"{Path(img.path).name} has no pixel size; set it from the objective (Image settings) "
                "or draw a scale line (S) first."
            )
        return img, sample

    def _raw_of(self, image_id: int) -> tuple[np.ndarray, str]:
        iid = self._r("image", image_id)
        if iid not in self._raw:
            self.load_image(iid)
        return self._raw[iid], self._get(Image, iid).path

    def _micro_fn(self, image_id: int) -> Callable[[], object]:
        """A function giving the image in linear intensity (cached for the last image)."""
        iid = self._r("image", image_id)
        raw, path = self._raw_of(iid)
        cache = self._micro

        def get():
            m = cache.get(iid)
            if m is None:
                from flakebook.imaging.io import from_array

                m = from_array(raw, order="rgb", path=path)
                cache.clear()
                cache[iid] = m
            return m

        return get

    def cursor_job(self, image_id: int):
        """Work giving (pixel probe in linear intensity, substrate level per channel, channel
        names) for the contrast under the cursor. The decoding to linear intensity is
        flakebook.imaging.io's (a lookup table for 8-bit data); the substrate level is found on
        an area-averaged copy of about 0.4 megapixels (flakebook.imaging.segment)."""
        iid = self._r("image", image_id)
        raw, path = self._raw_of(iid)

        def run(progress=None, cancel=None):
            from flakebook.imaging import _grid
            from flakebook.imaging.io import from_array
            from flakebook.imaging.segment import substrate_colour

            f = _grid.choose_factor(raw.shape[:2], 4e5)
            small = _grid.downsample(raw, f) if f > 1 else raw
            m = from_array(np.ascontiguousarray(small), order="rgb")
            check_cancel(cancel)
            level, _sd, _mask = substrate_colour(np.asarray(m.intensity), ~m.saturated)
            return LinearProbe(raw), np.asarray(level, float), tuple(m.channels)

        return run

    def survey_job(self, image_id: int, target_layers=(1, 2, 3)):
        """Work finding flakes, terraces and holes with their layer evidence
        (flakebook.imaging.survey.survey_image)."""
        from flakebook.imaging.survey import survey_image
        from flakebook.pipeline import survey_options

        img, sample = self._survey_inputs(image_id)
        micro = self._micro_fn(image_id)
        # The same settings the command line and the demo use (calibration, scale error, hole).
        kw = dict(
            survey_options(self.project, sample, img),
            target_layers=tuple(target_layers or (1, 2, 3)),
            max_layers=self.project.max_layers,
        )

        def run(progress=None, cancel=None):
            return survey_image(micro(), progress=progress, cancel=cancel, **kw)

        return run

    def model_job(self, details: dict):
        """Work giving the model contrast versus N per channel for the flake's measurement
        (flakebook.optics.layers.layer_likelihood) and its note on what would decide
        (key ``"_decider"``). The optics objects are built in the worker (the material data
        loads slowly the first time)."""
        sample = self.project.get(Sample, details["sample_id"])
        img = self.project.get(Image, details["image_id"])
        suspended = details.get("geometry") == "suspended"
        contrast = dict(details["contrast"])
        err = dict(details.get("contrast_err") or {}) or None
        nmax = int(details.get("max_layers") or 15)
        cal = calibration_values(self.project, sample)

        def run(progress=None, cancel=None):
            check_cancel(cancel)
            lk, _note = contrast_likelihood(
                sample,
                img,
                cal,
                contrast,
                err,
                geometry="suspended" if suspended else "supported",
                max_layers=nmax,
            )
            out = {
                ch: np.asarray(lk.model_contrast[:, j], float) for j, ch in enumerate(lk.channels)
            }
            out["_decider"] = lk.decider
            return out

        return run

    def segment_job(self, image_id: int, x: float, y: float):
        """Work giving the outline of the flake under (x, y) (flakebook.imaging.segment), or None."""
        from flakebook.imaging.segment import segment

        img, _sample = self._survey_inputs(image_id)
        micro = self._micro_fn(image_id)
        um = img.pixel_size_um

        def run(progress=None, cancel=None):
            seg = segment(micro(), um_per_px=um, min_area_um2=1.0, progress=progress, cancel=cancel)
            f = seg.factor
            r, c = int(round(y)) // f, int(round(x)) // f
            if not (0 <= r < seg.flake_labels.shape[0] and 0 <= c < seg.flake_labels.shape[1]):
                return None
            fid = int(seg.flake_labels[r, c])
            for fl in seg.flakes:
                if fl.id == fid:
                    return np.asarray(fl.outline_px, float)
            return None

        return run

    def holes_job(self, image_id: int):
        """Work detecting holes, fitting their lattice and predicting those hidden under flakes
        (flakebook.imaging.holes)."""
        from flakebook.imaging.holes import detect_holes, fit_lattice, predict_hidden_holes

        img, sample = self._survey_inputs(image_id)
        hp = sample.hole_pattern
        micro = self._micro_fn(image_id)
        um = img.pixel_size_um
        outlines = [a.outline_px for a in self.project.records(Appearance, image_id=img.id)]

        def run(progress=None, cancel=None):
            m = micro()
            if progress:
                progress(0.1, "detecting holes")
            holes = detect_holes(
                np.asarray(m.intensity),
                um_per_px=um,
                radius_um=0.5 * hp.diameter_um if hp else None,
                cancel=cancel,
            )
            check_cancel(cancel)
            lattice, hidden = None, ()
            if len(holes) >= 3:
                if progress:
                    progress(0.7, "fitting the lattice")
                lattice = fit_lattice(
                    np.array([h.center_px for h in holes]), kind=hp.lattice if hp else "auto"
                )
                if lattice is not None:
                    hidden = tuple(predict_hidden_holes(tuple(holes), lattice, m.shape, outlines))
            return HoleResult(tuple(holes) + tuple(hidden), lattice)

        return run

    def calibration_observations(self, sample_id: int) -> list:
        """Flakes of known layer number (a manual assignment) on the sample, with the region
        mean and substrate level their contrast evidence recorded, as calibration observations
        (flakebook.optics.camera). Levels are linear intensity (1 = full scale)."""
        from flakebook.optics.camera import CalibrationObservation

        p = self.project
        obs = []
        for f in p.flakes_of(self._r("sample", sample_id)):
            latest = p.latest_assignment(f)
            if latest is None or not latest.manual:
                continue
            for e in p.evidence_of(f):
                prm = e.parameters
                ref = prm.get("substrate_level")
                if e.method != CONTRAST_METHOD or not ref or prm.get("geometry") != "supported":
                    continue
                c = prm.get("contrast") or {}
                err = prm.get("contrast_err") or {}
                obs.append(
                    CalibrationObservation(
                        layers=int(latest.layers),
                        flake={ch: ref[ch] * (1.0 - c[ch]) for ch in c if ch in ref},
                        reference={ch: ref[ch] for ch in c if ch in ref},
                        flake_err={ch: ref[ch] * err.get(ch, 0.0) for ch in c if ch in ref},
                    )
                )
                break
        return obs

    def calibration_job(
        self, sample_id: int, dark_frame: dict[str, float], dark_frame_err: dict[str, float]
    ):
        """Work fitting oxide, dark offsets and contrast scale (flakebook.optics.camera.calibrate)
        from the sample's flakes of known layer number."""
        from flakebook.optics.camera import calibrate

        sample = self._get(Sample, sample_id)
        obs = self.calibration_observations(sample.id)
        if not obs:
            raise InputError(
                "No flake of known layer number with a measured contrast on this sample: record a "
                "manual assignment (with its reason) on flakes found by Find flakes first."
            )
        imgs = self.project.images_of(sample)
        img = imgs[0] if imgs else None

        def run(progress=None, cancel=None):
            material, substrate, microscope = optics_inputs(sample, img)
            check_cancel(cancel)
            return calibrate(
                obs,
                material=material,
                substrate=substrate,
                microscope=microscope,
                dark_frame=dark_frame,
                dark_frame_err=dark_frame_err,
            )

        return run, len(obs)

    def store_calibration(self, sample_id: int, cal) -> Undo:
        """Keep a calibration and mark the sample's contrast evidence stale (recompute uses it)."""
        p = self.project
        sample = self._get(Sample, sample_id)
        with p.transaction():
            rec = p.add_calibration(
                sample,
                oxide_nm=cal.oxide_nm,
                oxide_err_nm=cal.oxide_err_nm,
                dark_offset=cal.dark_offset,
                dark_offset_err=cal.dark_offset_err,
                contrast_scale={c: cal.contrast_scale for c in cal.channels},
                contrast_scale_err={c: cal.contrast_scale_err for c in cal.channels},
                method=cal.method,
                notes=f"chi2 {cal.chi2:.3g} on {cal.dof} degrees of freedom",
            )
            marked = []
            for f in p.flakes_of(sample):
                for e in p.evidence_of(f):
                    if e.method == CONTRAST_METHOD and not e.stale:
                        p.update(e, stale=True)
                        marked.append(e.id)

        def undo():
            with p.transaction():
                p.delete("calibration", rec.id)

        return undo

    def store_survey(self, image_id: int, result) -> Undo:
        """Write a survey's flakes, terraces, evidence, assignments, holes and coverage
        (``flakebook.pipeline.store_survey``: the same records the command line writes)."""
        from flakebook.pipeline import store_survey

        p = self.project
        img = self._get(Image, image_id)
        sample = p.get(Sample, img.sample_id)
        # Each new flake is stored before the next label is drawn, so labels never repeat.
        stored = store_survey(p, img, result, new_label=lambda: self.next_label(sample))
        for fid in stored.new_flakes:
            self._born("flake", fid)
        made_flakes = list(stored.new_flakes)
        made_holes = list(stored.holes)

        def undo():
            with p.transaction():
                for fid in made_flakes:
                    rid = self._r("flake", fid)
                    if p.records(Flake, id=rid):
                        p.delete(Flake, rid)
                for hid in made_holes:
                    rid = self._r("hole", hid)
                    if p.records(Hole, id=rid):
                        p.delete(Hole, rid)

        return undo

    def candidates(self, target_layers: Sequence[int]) -> list[dict]:
        """Flakes ranked by the probability that their layer number is in ``target_layers``."""
        p = self.project
        target = {int(n) for n in target_layers}
        out = []
        for r in p.catalogue():
            latest = p.latest_assignment(r.flake_id)
            if latest is None:
                continue
            if latest.posterior is not None:
                post = np.asarray(latest.posterior, float)
                score = float(sum(post[n - 1] for n in target if 1 <= n <= len(post)))
            else:
                score = 1.0 if latest.layers in target else 0.0
            out.append(
                {
                    "id": r.flake_id,
                    "label": r.label,
                    "layers": latest.layers,
                    "probability": latest.probability,
                    "ambiguous_with": list(latest.ambiguous_with),
                    "score": score,
                    "manual": latest.manual,
                }
            )
        out.sort(key=lambda d: -d["score"])
        return out

    def store_holes(self, image_id: int, result: HoleResult) -> Undo:
        p = self.project
        img = self._get(Image, image_id)
        made = []
        with p.transaction():
            existing = p.holes_of(img)
            for h in result.holes:
                rec, new = record_hole(p, img, h, existing)
                if not new:
                    continue
                made.append(rec.id)
                self._update_coverage_for_hole(rec)

        def undo():
            with p.transaction():
                for hid in made:
                    rid = self._r("hole", hid)
                    if p.records(Hole, id=rid):
                        p.delete(Hole, rid)

        return undo

    def recompute_stale(self, progress=None, cancel=None):
        """Bring stale records up to date (on the window's thread: it writes the project)."""
        return self.project.recompute_stale(progress=progress, cancel=cancel)


def thumbnail_crop(display: np.ndarray, outline_px: np.ndarray) -> np.ndarray | None:
    """The crop around an outline (with a margin), RGB uint8, or None."""
    x0, y0 = np.floor(outline_px.min(axis=0)).astype(int)
    x1, y1 = np.ceil(outline_px.max(axis=0)).astype(int)
    pad = int(0.2 * max(x1 - x0, y1 - y0)) + 4
    h, w = display.shape[:2]
    crop = display[max(0, y0 - pad) : min(h, y1 + pad), max(0, x0 - pad) : min(w, x1 + pad)]
    if crop.size == 0:
        return None
    if crop.ndim == 2:
        crop = np.repeat(crop[:, :, None], 3, axis=2)
    return np.ascontiguousarray(crop)


def pixmap_of(crop: np.ndarray | None):
    """A 44 x 30 QPixmap of a crop (window thread only)."""
    if crop is None:
        return None
    from PySide6.QtGui import QImage, QPixmap

    ch, cw = crop.shape[:2]
    qimg = QImage(crop.data, cw, ch, 3 * cw, QImage.Format.Format_RGB888).copy()
    return QPixmap.fromImage(qimg).scaled(44, 30)


class LinearProbe:
    """Linear intensity of single pixels of a decoded image, on demand (no full conversion)."""

    def __init__(self, raw: np.ndarray) -> None:
        from flakebook.imaging.io import from_array

        self.raw = raw
        self.shape = raw.shape
        self._lut = None
        if raw.dtype == np.uint8:
            nch = 1 if raw.ndim == 2 else raw.shape[2]
            ramp = np.repeat(np.arange(256, dtype=np.uint8)[:, None], nch, axis=1)
            ramp = ramp.reshape(1, 256, nch) if nch > 1 else ramp.reshape(1, 256)
            self._lut = np.asarray(from_array(ramp, order="rgb").intensity)[0]  # (256, ch)

    def __getitem__(self, index) -> np.ndarray:
        row, col = index
        v = self.raw[row, col]
        if self._lut is not None:
            v = np.atleast_1d(v)
            return np.array(
                [self._lut[int(x), min(i, self._lut.shape[1] - 1)] for i, x in enumerate(v)]
            )
        from flakebook.imaging.io import from_array

        px = self.raw[row : row + 1, col : col + 1]
        return np.asarray(from_array(np.ascontiguousarray(px), order="rgb").intensity)[0, 0]


@dataclass(frozen=True)
class HoleResult:
    """Holes found on an image (detected and predicted under flakes) and their lattice."""

    holes: tuple
    lattice: object | None


__all__ = ["Session", "ProjectBusy", "Shown", "HoleResult", "CONTRAST_METHOD", "COMBINED_METHOD"]
