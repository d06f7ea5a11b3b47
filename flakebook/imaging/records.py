"""The frozen results of segmentation and hole finding: regions, flakes, holes, lattice, coverage.

Coordinates are full-resolution pixels with the origin at the top-left pixel's centre, x to the
right, y down (INTERFACE.md).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from flakebook.imaging.background import Background


@dataclass(frozen=True, eq=False)
class Region:
    """A terrace: a connected region of uniform contrast within a flake.

    Coordinates are full-resolution pixels (INTERFACE.md convention); ``bbox_px`` is
    ``(x_min, y_min, x_max, y_max)`` inclusive.
    """

    id: int
    flake_id: int
    area_px: int
    area_um2: float
    bbox_px: tuple[int, int, int, int]
    centroid_px: tuple[float, float]
    outline_px: np.ndarray
    contrast: dict[str, float]
    contrast_err: dict[str, float]
    contrast_sd: dict[str, float]
    n_pixels: int
    n_effective: float

    def to_dict(self) -> dict:
        return {
            "id": self.id,
            "flake_id": self.flake_id,
            "centroid_px": list(self.centroid_px),
            "area_um2": self.area_um2,
            "area_px": self.area_px,
            "bbox_px": list(self.bbox_px),
            "outline_px": self.outline_px.tolist(),
            "contrast": dict(self.contrast),
            "contrast_err": dict(self.contrast_err),
            "n_pixels": self.n_pixels,
            "n_effective": self.n_effective,
        }


@dataclass(frozen=True, eq=False)
class Flake:
    """A connected non-substrate region (one or more terraces)."""

    id: int
    area_px: int
    area_um2: float
    bbox_px: tuple[int, int, int, int]
    centroid_px: tuple[float, float]
    outline_px: np.ndarray
    region_ids: tuple[int, ...]

    def to_dict(self) -> dict:
        return {
            "id": self.id,
            "area_um2": self.area_um2,
            "area_px": self.area_px,
            "bbox_px": list(self.bbox_px),
            "centroid_px": list(self.centroid_px),
            "outline_px": self.outline_px.tolist(),
            "region_ids": list(self.region_ids),
        }


@dataclass(frozen=True, eq=False)
class Segmentation:
    """The result of :func:`segment`.

    Attributes:
        channels: channel names.
        substrate: the bare substrate's level per channel (after background correction).
        substrate_fraction: fraction of the image that is bare substrate.
        noise: per-pixel contrast noise (standard deviation) on bare substrate per channel, full
            resolution.
        correlation_area_px: integrated noise autocorrelation per channel (1 for white noise).
        flakes, regions: what was found; region ids are 1-based, flake ids too.
        labels: int32 working-resolution map of region ids (0: none).
        flake_labels: int32 working-resolution map of flake ids (0: substrate).
        factor: the working copy's downsampling factor.
        um_per_px: the scale used for areas.
        warnings: messages for the user.
        background: the background correction finally used (refitted without the flakes).
    """

    channels: tuple[str, ...]
    substrate: dict[str, float]
    substrate_fraction: float
    noise: dict[str, float]
    correlation_area_px: dict[str, float]
    flakes: tuple[Flake, ...]
    regions: tuple[Region, ...]
    labels: np.ndarray
    flake_labels: np.ndarray
    factor: int
    um_per_px: float
    warnings: tuple[str, ...] = ()
    background: Background | None = None

    def to_dict(self) -> dict:
        return {
            "substrate": dict(self.substrate),
            "substrate_fraction": self.substrate_fraction,
            "noise": dict(self.noise),
            "correlation_area_px": dict(self.correlation_area_px),
            "flakes": [f.to_dict() for f in self.flakes],
            "regions": [r.to_dict() for r in self.regions],
            "warnings": list(self.warnings),
        }


@dataclass(frozen=True)
class Hole:
    """One hole.

    Attributes:
        center_px: (x, y).
        radius_px: radius in pixels.
        radius_err_px, center_err_px: standard errors from the edge fit (predicted holes: the
            lattice residual and the detected holes' radius spread).
        um_per_px, um_per_px_err: the scale used for the micrometre values.
        detected: True if seen in the image, False if predicted from the lattice.
        n_edge_points: edge points used in the fit.
    """

    center_px: tuple[float, float]
    radius_px: float
    radius_err_px: float
    center_err_px: float
    um_per_px: float
    um_per_px_err: float = 0.0
    detected: bool = True
    n_edge_points: int = 0

    @property
    def radius_um(self) -> float:
        return self.radius_px * self.um_per_px

    @property
    def radius_err_um(self) -> float:
        return math.hypot(self.radius_err_px * self.um_per_px, self.radius_px * self.um_per_px_err)

    def to_dict(self) -> dict:
        return {
            "center_px": list(self.center_px),
            "radius_px": self.radius_px,
            "radius_um": self.radius_um,
            "radius_err_um": self.radius_err_um,
            "center_err_px": self.center_err_px,
            "detected": self.detected,
        }


@dataclass(frozen=True)
class Lattice:
    """A hole lattice: positions origin + i a1 + j a2 (pixels)."""

    kind: str  # "square" or "hexagonal"
    pitch_px: float
    pitch_err_px: float
    angle_deg: float  # direction of a1, in [0, 90) (square) or [0, 60) (hexagonal)
    origin_px: tuple[float, float]
    a1_px: tuple[float, float]
    a2_px: tuple[float, float]
    residual_px: float
    n_holes: int

    def to_dict(self) -> dict:
        return {
            "kind": self.kind,
            "pitch_px": self.pitch_px,
            "pitch_err_px": self.pitch_err_px,
            "angle_deg": self.angle_deg,
            "origin_px": list(self.origin_px),
            "residual_px": self.residual_px,
            "n_holes": self.n_holes,
        }


@dataclass(frozen=True)
class Coverage:
    """How a flake outline covers a hole."""

    covered_fraction: float
    fully_covered: bool
    margin_px: float  # hole edge to flake edge; negative when the flake edge crosses the hole
    margin_um: float

    def to_dict(self) -> dict:
        return {
            "covered_fraction": self.covered_fraction,
            "fully_covered": self.fully_covered,
            "margin_px": self.margin_px,
            "margin_um": self.margin_um,
        }
