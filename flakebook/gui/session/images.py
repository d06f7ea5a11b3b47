"""Micrographs in the session: decoding for the screen, thumbnails, the pixel probe under the
cursor, adding and removing image files and their microscope settings.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from pathlib import Path

import cv2
import numpy as np

from flakebook.errors import InputError, check_cancel
from flakebook.gui.commands import Undo
from flakebook.store import Appearance, Flake, Image


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


class Images:
    """Images of the project: decoded data (cached), thumbnails, settings, files."""

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
