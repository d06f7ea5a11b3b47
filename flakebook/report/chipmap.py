"""The chip map: where a sample's images, flakes and holes lie on the chip, with no Qt.

Coordinates are chip coordinates in um, x to the right and y down, as the stage positions of the
images give them: an image's ``stage_x_um``/``stage_y_um`` is the chip coordinate of its centre
(see :func:`flakebook.imaging.linking.to_chip_um`, which places the pixels). A flake is drawn
from its outline in the first placed image it appears in; a flake seen only in images without a
stage position is listed among the unplaced flakes, as are those images.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from flakebook.errors import InputError
from flakebook.imaging.linking import to_chip_um
from flakebook.store.records import Image


@dataclass(frozen=True)
class PlacedImage:
    """An image's frame on the chip: its corners' range in um."""

    image_id: int
    name: str
    x0_um: float
    y0_um: float
    x1_um: float
    y1_um: float

    @property
    def width_um(self) -> float:
        return self.x1_um - self.x0_um


@dataclass(frozen=True)
class PlacedFlake:
    """A flake on the chip: its outline (N x 2, um), centroid, layer number and label."""

    flake_id: int
    label: str
    layers: int | None
    image_id: int
    outline_um: np.ndarray
    centroid_um: tuple[float, float]


@dataclass(frozen=True)
class PlacedHole:
    """A hole on the chip: centre and radius in um."""

    hole_id: int
    image_id: int
    x_um: float
    y_um: float
    radius_um: float


@dataclass(frozen=True)
class ChipMap:
    """One sample's map; ``unplaced_images`` are names of images without a stage position."""

    sample: str
    images: tuple[PlacedImage, ...]
    flakes: tuple[PlacedFlake, ...]
    holes: tuple[PlacedHole, ...]
    unplaced_images: tuple[str, ...]
    unplaced_flakes: tuple[str, ...]

    def bounds_um(self) -> tuple[float, float, float, float] | None:
        """(x0, y0, x1, y1) around every image frame and flake, None for an empty map."""
        xs: list[float] = []
        ys: list[float] = []
        for im in self.images:
            xs += [im.x0_um, im.x1_um]
            ys += [im.y0_um, im.y1_um]
        for f in self.flakes:
            xs += list(f.outline_um[:, 0])
            ys += list(f.outline_um[:, 1])
        if not xs:
            return None
        return min(xs), min(ys), max(xs), max(ys)


def placed(image: Image) -> bool:
    """Whether an image can be put on the chip (stage position, pixel size and size known)."""
    return None not in (
        image.stage_x_um,
        image.stage_y_um,
        image.pixel_size_um,
        image.width_px,
        image.height_px,
    )


def _chip(image: Image, points_px) -> np.ndarray:
    return to_chip_um(
        points_px,
        um_per_px=image.pixel_size_um,
        stage_um=(image.stage_x_um, image.stage_y_um),
        shape=(image.height_px, image.width_px),
    )


def _centroid(poly: np.ndarray) -> tuple[float, float]:
    x, y = poly[:, 0], poly[:, 1]
    xn, yn = np.roll(x, -1), np.roll(y, -1)
    cross = x * yn - xn * y
    a = 0.5 * cross.sum()
    if abs(a) < 1e-12:
        c = poly.mean(axis=0)
        return float(c[0]), float(c[1])
    return (
        float(((x + xn) * cross).sum() / (6.0 * a)),
        float(((y + yn) * cross).sum() / (6.0 * a)),
    )


def _image_name(image: Image) -> str:
    return image.path.replace("\\", "/").rsplit("/", 1)[-1]


def chip_map(project, sample) -> ChipMap:
    """The map of ``sample`` (a Sample record or its name) in ``project`` (a store Project).

    Each placed image gives its frame, its holes and the outlines of the flakes seen in it (a
    flake once, from the finest-pixel placed image it appears in, the most detailed outline).
    """
    if isinstance(sample, str):
        rec = project.sample_by_name(sample)
        if rec is None:
            names = ", ".join(s.name for s in project.samples()) or "none in this project"
            raise InputError(f"sample {sample!r} is not in the project; accepted: {names}")
        sample = rec
    images = project.images_of(sample)
    by_id = {im.id: im for im in images if placed(im)}
    frames = []
    holes = []
    for im in by_id.values():
        corners = _chip(im, [[-0.5, -0.5], [im.width_px - 0.5, im.height_px - 0.5]])
        frames.append(PlacedImage(im.id, _image_name(im), *corners[0], *corners[1]))
        for h in project.holes_of(im):
            c = _chip(im, [[h.center_x_px, h.center_y_px]])[0]
            holes.append(
                PlacedHole(h.id, im.id, float(c[0]), float(c[1]), h.radius_px * im.pixel_size_um)
            )
    flakes = []
    unplaced = []
    for flake in project.flakes_of(sample):
        apps = [a for a in project.appearances_of(flake) if a.image_id in by_id]
        if not apps:
            unplaced.append(flake.label)
            continue
        app = min(apps, key=lambda a: (by_id[a.image_id].pixel_size_um, a.id))
        outline = _chip(by_id[app.image_id], app.outline_px)
        got = project.latest_assignment(flake)
        flakes.append(
            PlacedFlake(
                flake.id,
                flake.label,
                got.layers if got is not None else None,
                app.image_id,
                outline,
                _centroid(outline),
            )
        )
    return ChipMap(
        sample=sample.name,
        images=tuple(frames),
        flakes=tuple(flakes),
        holes=tuple(holes),
        unplaced_images=tuple(_image_name(im) for im in images if im.id not in by_id),
        unplaced_flakes=tuple(unplaced),
    )
