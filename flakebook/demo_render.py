"""The demo's chips drawn as a microscope's camera sees them: flake outlines (cleaved edges along
the crystal directions, torn stretches between them), the K7-south hole lattice, tape-residue
specks, and 8-bit sRGB micrographs rendered from flakebook's contrast model with defocus,
vignetting, a dark offset and camera noise. The scenario itself (which flakes, where, what
happens to them) is flakebook.demo's; everything here is invented for the demo.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

MATERIAL = "MoSe2"
OXIDE_NM = 285.0  # the chips' nominal oxide (what the project records)
# The oxide the micrographs are rendered with: the chips are a few nm off their nominal value,
# as real wafers are, so the demo shows what a nominal oxide with its uncertainty does.
TRUE_OXIDE_NM = {"K7-north": 288.0, "K7-south": 283.0}
LASER_NM = 532.0
DARK_OFFSET = 0.012  # fraction of full scale, the invented camera's dark offset
HOLE_DIAMETER_UM = 5.0
HOLE_PITCH_UM = 12.0
HOLE_DEPTH_NM = 250.0  # air gap from the membrane down to the gold at the hole's bottom
HOLE_DEPTH_ERR_NM = 6.0  # its s.d., as a profilometer scan of the chip would give (invented)
OBJECTIVES = {"10x": (0.345, 0.30), "50x": (0.069, 0.80)}  # um/px, objective NA (examples)
NA_ILLUMINATION = 0.3


@dataclass(frozen=True)
class DemoFlake:
    """A flake of the invented scenario: its layer number and a cleaved outline on the chip."""

    label: str
    sample: str
    layers: int
    center_um: tuple[float, float]  # chip coordinates (x right, y down), um
    radius_um: float  # rough half-size of the outline
    angle_deg: float  # orientation of the crystal edges
    step_layers: int | None = None  # a thicker terrace beyond a step edge, if any
    tags: tuple[str, ...] = ()
    notes: str = ""
    looks_like: int | None = None  # rendered with this N's contrast (a residue beneath it)

    @property
    def rendered_layers(self) -> int:
        """The N whose contrast the micrograph shows."""
        return self.looks_like or self.layers


# ---- geometry ------------------------------------------------------------------------------


def _hexagon_um(flake: DemoFlake) -> np.ndarray:
    """The cleaved hexagon: edges along the crystal's 60-degree directions, at seeded random
    distances from the centre (um, chip coordinates)."""
    rng = np.random.default_rng(abs(hash_label(flake.label)))
    angles = np.deg2rad(flake.angle_deg + 60.0 * np.arange(6))
    dist = flake.radius_um * rng.uniform(0.55, 1.15, size=6)
    # Vertices are the intersections of consecutive edge lines n_i . p = d_i.
    pts = []
    for i in range(6):
        a1, a2 = angles[i], angles[(i + 1) % 6]
        m = np.array([[math.cos(a1), math.sin(a1)], [math.cos(a2), math.sin(a2)]])
        pts.append(np.linalg.solve(m, [dist[i], dist[(i + 1) % 6]]))
    return np.array(pts) + np.asarray(flake.center_um)


TEAR_STEP_UM = 0.12  # spacing of the points along a torn stretch
TEAR_ROUGHNESS_UM = 0.22  # s.d. of a torn stretch's jag about its mean line
TEAR_BITE_UM = 0.25  # how far a torn stretch runs inside the cleaved line, on average


def flake_polygon_um(flake: DemoFlake) -> np.ndarray:
    """A flake's outline (um, chip coordinates): the cleaved hexagon, its edges straight along
    the crystal directions, with torn stretches along parts of some edges (a jagged line that
    bites a fraction of a um into the flake and wanders a few 50x pixels in and out; seeded by
    the label, so the same outline every time). A simple polygon: the tears stay well away from
    the corners and far smaller than the flake."""
    hexagon = _hexagon_um(flake)
    rng = np.random.default_rng(abs(hash_label(flake.label + "/torn")))
    centre = np.asarray(flake.center_um, float)
    out: list[np.ndarray] = []
    torn = rng.permutation(6)[: int(rng.integers(2, 5))]  # 2 to 4 of the 6 edges
    for i in range(6):
        p, q = hexagon[i], hexagon[(i + 1) % 6]
        out.append(p)
        length = float(np.hypot(*(q - p)))
        t0, t1 = rng.uniform(0.12, 0.35), rng.uniform(0.65, 0.88)
        if i not in torn or length < 2.5:
            continue
        k = max(int((t1 - t0) * length / TEAR_STEP_UM), 8)
        t = np.linspace(t0, t1, k)
        line = p[None, :] + t[:, None] * (q - p)[None, :]
        inward = centre - 0.5 * (p + q)
        normal = np.array([-(q - p)[1], (q - p)[0]]) / length
        if normal @ inward < 0:
            normal = -normal
        # correlated jag over a few points, tapered to nothing at the stretch's ends
        jag = np.convolve(rng.normal(0.0, 1.0, k + 4), np.ones(5) / math.sqrt(5), "valid")
        jag = jag * TEAR_ROUGHNESS_UM + TEAR_BITE_UM
        taper = np.sqrt(np.clip(np.sin(np.pi * (t - t0) / (t1 - t0)), 0.0, None))
        out.extend(line + (jag * taper)[:, None] * normal[None, :])
    return np.array(out)


def hash_label(label: str) -> int:
    """A stable integer from a label (Python's hash() is salted per process)."""
    h = 2166136261
    for ch in label.encode():
        h = ((h ^ ch) * 16777619) & 0xFFFFFFFF
    return h


def step_line(flake: DemoFlake) -> tuple[np.ndarray, float]:
    """The step edge of a terraced flake: points p with n . p > c are the thicker terrace."""
    a = math.radians(flake.angle_deg + 30.0)
    n = np.array([math.cos(a), math.sin(a)])
    c = float(n @ np.asarray(flake.center_um)) + 0.35 * flake.radius_um
    return n, c


def hole_centres_um(x0: float, x1: float, y0: float, y1: float) -> np.ndarray:
    """Centres of the K7-south lattice holes in a chip window (um)."""
    i = np.arange(math.floor(x0 / HOLE_PITCH_UM) - 1, math.ceil(x1 / HOLE_PITCH_UM) + 2)
    j = np.arange(math.floor(y0 / HOLE_PITCH_UM) - 1, math.ceil(y1 / HOLE_PITCH_UM) + 2)
    gx, gy = np.meshgrid(i * HOLE_PITCH_UM, j * HOLE_PITCH_UM)
    return np.column_stack([gx.ravel(), gy.ravel()])


# ---- rendering -----------------------------------------------------------------------------


@dataclass(frozen=True)
class View:
    """A camera frame on the chip."""

    name: str
    sample: str
    objective: str
    center_um: tuple[float, float]
    width_px: int
    height_px: int

    @property
    def um_per_px(self) -> float:
        return OBJECTIVES[self.objective][0]

    def to_px(self, pts_um: np.ndarray) -> np.ndarray:
        """Chip um to pixel (x, y) with the origin at the top-left pixel's centre."""
        cx, cy = self.center_um
        s = self.um_per_px
        return np.column_stack(
            [
                (pts_um[:, 0] - cx) / s + (self.width_px - 1) / 2,
                (pts_um[:, 1] - cy) / s + (self.height_px - 1) / 2,
            ]
        )

    def window_um(self) -> tuple[float, float, float, float]:
        cx, cy = self.center_um
        hw, hh = self.width_px * self.um_per_px / 2, self.height_px * self.um_per_px / 2
        return cx - hw, cx + hw, cy - hh, cy + hh


def _contrast_tables(sample: str, has_holes: bool, max_n: int = 9):
    """Model contrast per channel for N = 0..max_n, supported and (with holes) suspended."""
    from flakebook.optics.materials import get_material
    from flakebook.optics.microscope import Microscope, channel_contrast

    mat = get_material(MATERIAL)
    sub = _substrate(TRUE_OXIDE_NM[sample])
    mic = Microscope(na_illumination=NA_ILLUMINATION)
    layers = np.arange(0, max_n + 1)
    sup = channel_contrast(mat, layers, sub, mic)
    out = {"supported": sup.contrast, "reference": sup.reflectance_reference[0]}
    if has_holes:
        sus = channel_contrast(mat, layers, sub, mic, geometry="suspended", hole=_hole())
        out["suspended"] = sus.contrast
    return out


def _substrate(oxide_nm: float = OXIDE_NM):
    from flakebook.optics.substrate import Substrate

    return Substrate.from_oxide(oxide_nm)


def _hole():
    from flakebook.optics.substrate import Hole

    return Hole("au", HOLE_DEPTH_NM)


DEFOCUS_PX = {"10x": 0.6, "50x": 1.0}  # s.d. of the defocus blur, camera pixels
SPECKS_PER_UM2 = 1.0 / 120.0  # tape residue on the chips (invented)


def speck_table(sample: str) -> np.ndarray:
    """The chip's tape-residue specks: rows of (x um, y um, radius um, darkening fraction),
    seeded by the chip's name. Radii of 0.08-0.2 um (one to three 50x pixels): far below any
    flake's size, so the survey must not report them."""
    rng = np.random.default_rng(hash_label(sample + "/specks"))
    x0, x1, y0, y1 = -220.0, 220.0, -160.0, 160.0
    n = int(round((x1 - x0) * (y1 - y0) * SPECKS_PER_UM2))
    return np.column_stack(
        [
            rng.uniform(x0, x1, n),
            rng.uniform(y0, y1, n),
            rng.uniform(0.08, 0.2, n),
            rng.uniform(0.04, 0.12, n),
        ]
    )


def render_view(view: View, flakes: tuple[DemoFlake, ...], rng: np.random.Generator) -> np.ndarray:
    """An 8-bit sRGB micrograph (rows, cols, RGB) of ``view``, from the contrast model.

    Each pixel's linear intensity is base x (1 - C(N, geometry)) per channel, supersampled 3x for
    anti-aliased edges, darkened a few per cent under tape-residue specks, blurred slightly
    (defocus), times a vignetting falloff, plus the dark offset and camera noise. A bulk piece
    is as bright as its contrast makes it: the exposure is set for the thin flakes (N up to 9),
    as a user sets it.
    """
    import cv2

    from flakebook.imaging.io import linear_to_srgb

    holes = view.sample == "K7-south"
    max_n = max([9] + [f.rendered_layers for f in flakes if f.sample == view.sample])
    tables = _contrast_tables(view.sample, holes, max_n)
    ss = 3
    h, w = view.height_px * ss, view.width_px * ss
    layer_map = np.zeros((h, w), np.uint8)
    hole_map = np.zeros((h, w), np.uint8)
    shift = 4  # fixed-point bits for cv2's sub-pixel polygon filling

    def to_ss(pts_um: np.ndarray) -> np.ndarray:
        px = view.to_px(pts_um)
        # supersampled pixel centres: ss*x + (ss-1)/2
        q = (px * ss + (ss - 1) / 2) * (1 << shift)
        return np.round(q).astype(np.int32)

    for fl in flakes:
        if fl.sample != view.sample:
            continue
        poly = flake_polygon_um(fl)
        mask = np.zeros((h, w), np.uint8)
        cv2.fillPoly(mask, [to_ss(poly)], 1, lineType=cv2.LINE_8, shift=shift)
        layer_map[mask > 0] = int(fl.rendered_layers)
        if fl.step_layers:
            # the thicker terrace: the flake's part beyond the step line (a half-plane, cut
            # from a square around the flake, filled and intersected with the flake)
            n, c = step_line(fl)
            r = 3.0 * fl.radius_um
            cx, cy = fl.center_um
            square = np.array(
                [[cx - r, cy - r], [cx + r, cy - r], [cx + r, cy + r], [cx - r, cy + r]]
            )
            half = np.array(_clip_halfplane(square, n, c))
            beyond = np.zeros((h, w), np.uint8)
            if len(half) >= 3:
                cv2.fillPoly(beyond, [to_ss(half)], 1, lineType=cv2.LINE_8, shift=shift)
            layer_map[(mask > 0) & (beyond > 0)] = int(fl.step_layers)
    # Tape residue: specks of a few 50x pixels, a few per cent darker, drawn at chip
    # coordinates (the same specks in the overview and the close-ups).
    specks = np.zeros((h, w), np.float32)
    x0, x1, y0, y1 = view.window_um()
    sp = speck_table(view.sample)
    near = (sp[:, 0] > x0 - 1) & (sp[:, 0] < x1 + 1) & (sp[:, 1] > y0 - 1) & (sp[:, 1] < y1 + 1)
    for (_x, _y, sr, depth), c in zip(sp[near], to_ss(sp[near, :2])):
        r_fix = int(round(sr / view.um_per_px * ss * (1 << shift)))
        if r_fix < (1 << shift):  # under one supersampled pixel: a dot of that area
            cv2.circle(specks, (int(c[0]), int(c[1])), 0, float(depth) * (r_fix / (1 << shift))
                       ** 2 * math.pi, -1, lineType=cv2.LINE_8, shift=shift)  # fmt: skip
        else:
            cv2.circle(specks, (int(c[0]), int(c[1])), r_fix, float(depth), -1,
                       lineType=cv2.LINE_8, shift=shift)  # fmt: skip
    if holes:
        x0, x1, y0, y1 = view.window_um()
        r_ss = HOLE_DIAMETER_UM / 2 / view.um_per_px * ss
        for c in to_ss(hole_centres_um(x0, x1, y0, y1)):
            cv2.circle(
                hole_map, (int(c[0]), int(c[1])), int(round(r_ss * (1 << shift))), 1, -1,
                lineType=cv2.LINE_8, shift=shift,
            )  # fmt: skip

    ref = tables["reference"]
    levels = [np.ones_like(tables["supported"]) - tables["supported"]]
    if holes:
        levels.append(1.0 - tables["suspended"])
    brightest = max(float((lv[:10] * ref[None, :]).max()) for lv in levels)
    exposure = 0.82 / brightest  # the brightest thin flake (N <= 9) sits at 82% of full scale
    lin = np.empty((h, w, 3), np.float32)
    for ch in range(3):
        lut_sup = (ref[ch] * exposure * (1.0 - tables["supported"][:, ch])).astype(np.float32)
        val = lut_sup[layer_map]
        if holes:
            lut_sus = (ref[ch] * exposure * (1.0 - tables["suspended"][:, ch])).astype(np.float32)
            val = np.where(hole_map.astype(bool), lut_sus[layer_map], val)
        lin[:, :, ch] = val
    lin *= (1.0 - specks)[:, :, None]
    lin = cv2.resize(lin, (view.width_px, view.height_px), interpolation=cv2.INTER_AREA)
    # Slight defocus: a Gaussian blur of about a pixel at 50x.
    lin = cv2.GaussianBlur(lin, (0, 0), DEFOCUS_PX[view.objective])
    # Vignetting: a smooth radial falloff of 12% at the corners.
    yy, xx = np.mgrid[0 : view.height_px, 0 : view.width_px].astype(np.float32)
    r2 = ((xx - view.width_px / 2) / (view.width_px / 2)) ** 2 + (
        (yy - view.height_px / 2) / (view.height_px / 2)
    ) ** 2
    lin *= (1.0 - 0.06 * r2)[:, :, None]
    # Camera noise: 1% shot-like plus read noise, slightly correlated (optics blur).
    noise = rng.normal(0.0, 1.0, lin.shape).astype(np.float32)
    noise = cv2.GaussianBlur(noise, (0, 0), 0.8) * 1.6
    lin = lin + noise * (0.01 * lin + 0.002) + DARK_OFFSET
    enc = linear_to_srgb(np.clip(lin, 0.0, 1.0))
    return np.clip(np.round(enc * 255.0), 0, 255).astype(np.uint8)


def _clip_halfplane(poly: np.ndarray, n: np.ndarray, c: float) -> list[np.ndarray]:
    """The part of a convex polygon with n . p >= c (Sutherland-Hodgman, one edge)."""
    out = []
    k = len(poly)
    for i in range(k):
        p, q = poly[i], poly[(i + 1) % k]
        dp, dq = n @ p - c, n @ q - c
        if dp >= 0:
            out.append(p)
        if (dp >= 0) != (dq >= 0):
            t = dp / (dp - dq)
            out.append(p + t * (q - p))
    return out
