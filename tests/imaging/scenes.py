"""Synthetic micrographs rendered from the optics model (known layer numbers), for the tests."""

from __future__ import annotations

import functools

import cv2
import numpy as np

from .synth import disk_coverage, polygon_coverage, render, to_srgb8

SUBSTRATE_RGB = (0.20, 0.15, 0.30)  # camera signal of the bare substrate per channel (linear)


@functools.lru_cache(maxsize=8)
def model(oxide_nm: float = 285.0, na: float = 0.3, mono_nm: float | None = None):
    from flakebook.optics.materials import get_material
    from flakebook.optics.microscope import Illumination, Microscope, channel_contrast
    from flakebook.optics.substrate import Hole, parse_substrate

    mat = get_material("MoSe2")
    sub = parse_substrate(f"SiO2:{oxide_nm:g},Si")
    if mono_nm is None:
        mic = Microscope(na_illumination=na)
    else:
        mic = Microscope(na_illumination=na, illumination=Illumination.monochromatic(mono_nm))
    sup = channel_contrast(mat, range(1, 6), sub, mic).contrast
    susp = channel_contrast(mat, range(0, 6), sub, mic, geometry="suspended", hole=Hole()).contrast
    return mat, sub, mic, np.asarray(sup), np.asarray(susp)


def flake_grid(shape, layers, *, cell=(96, 106), seed=0):
    """One random quadrilateral flake per grid cell with the given layer numbers; returns
    (list of (coverage, N), list of (cx, cy, N))."""
    rng = np.random.default_rng(seed)
    rows, cols = shape
    out, truth = [], []
    k = 0
    for y0 in range(0, rows - cell[0] + 1, cell[0]):
        for x0 in range(0, cols - cell[1] + 1, cell[1]):
            if k >= len(layers):
                break
            cx, cy = x0 + cell[1] / 2, y0 + cell[0] / 2
            ang = rng.uniform(0, np.pi / 2)
            hw, hh = rng.uniform(28, 36), rng.uniform(26, 32)
            pts = []
            for sx, sy in ((-1, -1), (1, -1), (1, 1), (-1, 1)):
                px = sx * hw * rng.uniform(0.85, 1.0)
                py = sy * hh * rng.uniform(0.85, 1.0)
                pts.append(
                    [
                        cx + px * np.cos(ang) - py * np.sin(ang),
                        cy + px * np.sin(ang) + py * np.cos(ang),
                    ]
                )
            out.append((polygon_coverage(shape, pts), layers[k]))
            truth.append((cx, cy, layers[k]))
            k += 1
    return out, truth


def micrograph(
    shape,
    flakes,
    *,
    oxide_nm=285.0,
    noise=0.02,
    vignette=0.2,
    dark=0.02,
    holes=(),
    seed=0,
    mono_nm=None,
    substrate=None,
):
    """Linear camera signal: substrate x (1 - C_model(N)) with vignetting, dark offset, noise.

    ``flakes``: (coverage, N) painted in order; ``holes``: (cx, cy, r) etched to the Si, drawn
    under the flakes with the suspended model where a flake covers them.
    """
    _, _, _, sup, susp = model(oxide_nm, mono_nm=mono_nm)
    sub = substrate or (SUBSTRATE_RGB if mono_nm is None else (0.3,))
    layers_masks = []
    hole_masks = [disk_coverage(shape, cx, cy, r) for cx, cy, r in holes]
    for hm in hole_masks:
        layers_masks.append((hm, susp[0]))
    for cov, n in flakes:
        layers_masks.append((cov, sup[n - 1]))
        for hm in hole_masks:
            both = cov * hm
            if both.any():
                layers_masks.append((both, susp[n]))
    return render(
        shape,
        sub,
        layers_masks,
        noise=noise,
        vignette=vignette,
        dark=dark,
        rng=np.random.default_rng(seed),
    )


def jpeg_rgb(lin, quality=92):
    """Encode linear RGB as an sRGB JPEG and decode it again (OpenCV), giving RGB uint8."""
    ok, buf = cv2.imencode(".jpg", to_srgb8(lin)[..., ::-1], [cv2.IMWRITE_JPEG_QUALITY, quality])
    assert ok
    return cv2.imdecode(buf, cv2.IMREAD_UNCHANGED)[..., ::-1]
