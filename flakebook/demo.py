"""The demo campaign: an invented exfoliation run, rendered from flakebook's own models.

``build_demo(folder)`` writes a project file, its micrographs and its spectra into ``folder``,
deterministically (fixed seeds, a fixed clock). Everything here is invented for the demo: the
chips "K7-north" and "K7-south", the flake IDs and every value. The micrographs are rendered from
the thin-film contrast model (flakebook.optics) with cleaved edges along the crystal directions and
torn stretches between them, tape-residue specks, a slight defocus, noise, vignetting and a dark
offset (the 10x overviews saved as JPEG), and then surveyed with flakebook.imaging exactly as a
user's images would be; two bulk pieces beside thin flakes are catalogued as the survey reports
them (thick, flagged); the spectra are drawn from
simple line shapes at invented positions and fitted by the program (flakebook.pipeline
.attach_spectrum) as a user's spectra would be, so every flake's assignment combines its contrast,
Raman and PL evidence. One flake (K7N-02) lies on an invented polymer residue that makes it look
one layer thicker: its contrast says 3L, its Raman is ambiguous, and a drawn low-frequency
spectrum (shear and breathing modes) settles 2L; the conflict is shown and a manual assignment
records why. A Raman map across K7N-01 (its monolayer, its thicker terrace and the bare substrate
around) is drawn from the same line shapes with each point's layer number, fitted by the program
and stored over the flake's 50x micrograph.
"""

from __future__ import annotations

import datetime as _dt
import math
import threading
from collections.abc import Callable
from pathlib import Path

import numpy as np

# The chips' geometry and the camera (re-exported: flakebook.demo is the scenario's one name).
from flakebook.demo_render import (  # noqa: F401
    DARK_OFFSET,
    DEFOCUS_PX,
    HOLE_DEPTH_ERR_NM,
    HOLE_DEPTH_NM,
    HOLE_DIAMETER_UM,
    HOLE_PITCH_UM,
    LASER_NM,
    MATERIAL,
    NA_ILLUMINATION,
    OBJECTIVES,
    OXIDE_NM,
    SPECKS_PER_UM2,
    TEAR_BITE_UM,
    TEAR_ROUGHNESS_UM,
    TEAR_STEP_UM,
    TRUE_OXIDE_NM,
    DemoFlake,
    View,
    _clip_halfplane,
    _contrast_tables,
    _hexagon_um,
    _hole,
    _substrate,
    flake_polygon_um,
    hash_label,
    hole_centres_um,
    render_view,
    speck_table,
    step_line,
)
from flakebook.errors import InputError, check_cancel

PROJECT_NAME = "k7-campaign.flakebook"
START = _dt.datetime(2026, 3, 9, 9, 0, 0, tzinfo=_dt.UTC)
JPEG_QUALITY = 90  # the overviews' JPEG quality (a camera's default)


# Chip coordinates: the K7-south hole lattice has a hole centre at (0, 0), square, pitch 12 um.
FLAKES: tuple[DemoFlake, ...] = (
    DemoFlake("K7N-01", "K7-north", 1, (-120.0, -60.0), 11.0, 8.0, step_layers=3),
    DemoFlake(
        "K7N-02",
        "K7-north",
        2,
        (40.0, -90.0),
        9.0,
        37.0,
        tags=("raman-next",),
        notes="residue at one edge",
        looks_like=3,
    ),
    DemoFlake("K7N-03", "K7-north", 3, (130.0, 20.0), 10.0, 71.0, step_layers=6),
    DemoFlake("K7N-04", "K7-north", 5, (-60.0, 80.0), 9.5, 112.0),
    DemoFlake("K7N-05", "K7-north", 8, (70.0, 95.0), 10.0, 150.0, notes="thick reference flake"),
    DemoFlake("K7N-06", "K7-north", 1, (-150.0, 70.0), 7.0, 22.0),
    DemoFlake("K7S-01", "K7-south", 1, (-108.0, -72.0), 9.5, 15.0, tags=("raman-next",)),
    DemoFlake("K7S-02", "K7-south", 2, (36.0, -84.0), 10.5, 48.0, step_layers=4),
    DemoFlake("K7S-03", "K7-south", 3, (120.0, 24.0), 10.0, 80.0, tags=("raman-next",)),
    DemoFlake("K7S-04", "K7-south", 4, (-48.0, 60.0), 9.0, 101.0),
    DemoFlake("K7S-05", "K7-south", 6, (84.0, 96.0), 11.0, 133.0),
    DemoFlake("K7S-06", "K7-south", 2, (-144.0, 84.0), 8.5, 5.0, tags=("raman-next",)),
)

# Bulk pieces torn off beside thin flakes (each in its neighbour's 50x frame and in the
# overview): far thicker than contrast resolves, so the survey reports them as thick flakes
# (flagged, never dropped) and the catalogue keeps what the survey finds. No spectra.
BULK_PIECES: tuple[DemoFlake, ...] = (
    DemoFlake(
        "K7N-07",
        "K7-north",
        30,
        (-132.0, 62.0),
        4.5,
        22.0,
        tags=("bulk",),
        notes="bulk piece beside K7N-06 (about 30 layers)",
    ),  # fmt: skip
    DemoFlake(
        "K7N-08",
        "K7-north",
        65,
        (-40.0, 92.0),
        5.0,
        112.0,
        tags=("bulk",),
        notes="bulk piece beside K7N-04 (about 65 layers)",
    ),  # fmt: skip
)
PIECES: tuple[DemoFlake, ...] = FLAKES + BULK_PIECES  # everything drawn on the chips

# Flakes that go through thermometry (suspended over a hole), with an invented "true" kappa
# used to draw their power series.
THERMOMETRY = {"K7S-01": 33.0, "K7S-03": 24.0, "K7S-06": 28.0}
CHI_T_CM1_PER_K = -0.0108  # invented A1g temperature coefficient for the drawn series
BEAM_RADIUS_UM = 0.42
RAMAN_NA = 0.8  # the 50x objective the Raman spot is focused with (that of the hole images)


def _clock() -> Callable[[], _dt.datetime]:
    """A clock that starts at START and advances 20 s a call: reproducible timestamps."""
    state = {"t": START}
    lock = threading.Lock()

    def now() -> _dt.datetime:
        with lock:
            t = state["t"]
            state["t"] = t + _dt.timedelta(seconds=20)
            return t

    return now


# ---- spectra -------------------------------------------------------------------------------


def _lorentz(x: np.ndarray, x0: float, fwhm: float, height: float) -> np.ndarray:
    return height / (1.0 + ((x - x0) / (fwhm / 2.0)) ** 2)


# Invented line positions for the demo's drawn MoSe2 Raman spectra (cm^-1): A1g stiffens and
# E2g(1) softens with N; B2g(1) appears from 2 layers on; the Si line is attenuated by the flake.
def a1g_position_cm1(layers: int) -> float:
    """The demo's A1g position for N layers (drawn data, not a model)."""
    return 242.6 - 1.9 / layers


def raman_spectrum(layers: int, rng: np.random.Generator, *, a1g_shift_cm1: float = 0.0):
    """A drawn Raman spectrum (x in cm^-1, counts) of an N-layer flake on SiO2/Si."""
    x = np.linspace(100.0, 600.0, 1340)
    y = raman_mean(layers, x, a1g_shift_cm1=a1g_shift_cm1)
    y = rng.poisson(np.maximum(y, 0)).astype(float)
    return x, y


def raman_mean(layers: int, x: np.ndarray, *, a1g_shift_cm1: float = 0.0) -> np.ndarray:
    """The expected counts of :func:`raman_spectrum` (N = 0: the bare substrate's Si line)."""
    a1g = a1g_position_cm1(max(layers, 1)) + a1g_shift_cm1
    e2g = 287.4 - 0.35 * min(layers, 6)
    y = _lorentz(x, a1g, 4.2, 1800.0 * min(layers, 4) ** 0.6)
    y += _lorentz(x, e2g, 5.0, 260.0 * min(layers, 4) ** 0.5)
    if layers >= 2:
        y += _lorentz(x, 352.8, 4.5, 120.0 * min(layers - 1, 4) ** 0.7)
    y += _lorentz(x, 520.7, 3.6, 4200.0 * math.exp(-0.12 * layers))
    y += 60.0 + 0.05 * (x - 100.0)  # a gentle background
    return y


def pl_spectrum(layers: int, rng: np.random.Generator):
    """A drawn PL spectrum (x in nm, counts): strong direct-gap emission for 1L only."""
    x = np.linspace(700.0, 950.0, 1024)
    ev = 1239.84198 / x
    if layers == 1:
        y = 9000.0 * np.exp(-0.5 * ((ev - 1.570) / 0.022) ** 2)
    else:
        # Invented: the A exciton red-shifts towards its bulk energy as layers are added.
        y = 350.0 / layers * np.exp(-0.5 * ((ev - (1.52 + 0.05 / layers)) / 0.03) ** 2)
        y += 120.0 / layers * np.exp(-0.5 * ((ev - 1.40 + 0.02 * layers) / 0.06) ** 2)
    y += 40.0
    return x, rng.poisson(y).astype(float)


# Invented bulk frequencies of the demo's drawn interlayer modes (cm^-1), the branches of a linear
# chain: highest shear w cos(pi/2N), lowest breathing w sin(pi/2N).
DEMO_SHEAR_BULK_CM1 = 24.6
DEMO_BREATHING_BULK_CM1 = 46.2


def low_frequency_spectrum(layers: int, rng: np.random.Generator):
    """A drawn low-frequency Raman spectrum (x in cm^-1 from the filter edge, counts) with the
    shear and breathing modes of an N-layer flake (none for 1L)."""
    x = np.linspace(6.0, 60.0, 720)
    y = 80.0 + 900.0 * np.exp(-(x - 6.0) / 3.0)  # the edge filter's Rayleigh wing
    if layers >= 2:
        y += _lorentz(x, DEMO_SHEAR_BULK_CM1 * math.cos(math.pi / (2 * layers)), 1.4, 420.0)
        y += _lorentz(x, DEMO_BREATHING_BULK_CM1 * math.sin(math.pi / (2 * layers)), 1.6, 260.0)
    return x, rng.poisson(y).astype(float)


# The demo's Raman map: a 27 x 27 raster at 1 um steps across K7N-01 (a monolayer with a
# thicker terrace beyond a step edge) and the bare substrate around it, in chip coordinates.
MAP_FLAKE = "K7N-01"
MAP_STEP_UM = 1.0
MAP_HALF_SPAN = 13  # grid points either side of the flake's centre
MAP_COUNTS_SCALE = 0.5  # a map's shorter exposure than the single spectra's


def terrace_layers_at(flake: DemoFlake, pts_um: np.ndarray) -> np.ndarray:
    """The scenario's layer number at chip points (0 off the flake): the truth the map's
    spectra are drawn with, and that the map's fits are checked against."""
    import cv2

    poly = flake_polygon_um(flake).astype(np.float32)
    pts = np.asarray(pts_um, float).reshape(-1, 2)
    inside = np.array(
        [cv2.pointPolygonTest(poly, (float(a), float(b)), False) >= 0 for a, b in pts]
    )
    out = np.where(inside, flake.layers, 0)
    if flake.step_layers:
        n, c = step_line(flake)
        out = np.where(inside & (pts @ n > c), flake.step_layers, out)
    return out.astype(int)


def map_grid_um(flake: DemoFlake) -> tuple[np.ndarray, np.ndarray]:
    """The map's x and y positions (chip um)."""
    k = np.arange(-MAP_HALF_SPAN, MAP_HALF_SPAN + 1) * MAP_STEP_UM
    return flake.center_um[0] + k, flake.center_um[1] + k


def raman_map(flake: DemoFlake, rng: np.random.Generator):
    """A drawn Raman map across ``flake``: (axis in cm^-1, spectra [row, col, point], x_um,
    y_um). Each spectrum is the mean spectrum of the layer numbers under the laser spot (a
    Gaussian of 1/e^2 radius BEAM_RADIUS_UM, 5 x 5 sub-points), with Poisson noise."""
    x = np.linspace(150.0, 560.0, 548)
    xs, ys = map_grid_um(flake)
    sub = np.linspace(-1.0, 1.0, 5) * BEAM_RADIUS_UM
    sx, sy = np.meshgrid(sub, sub)
    weight = np.exp(-2.0 * (sx**2 + sy**2) / BEAM_RADIUS_UM**2).ravel()
    weight /= weight.sum()
    means = {}
    cube = np.empty((ys.size, xs.size, x.size))
    for r, yc in enumerate(ys):
        for c, xc in enumerate(xs):
            pts = np.column_stack([xc + sx.ravel(), yc + sy.ravel()])
            n_at = terrace_layers_at(flake, pts)
            y = np.zeros_like(x)
            for n in np.unique(n_at):
                if n not in means:
                    means[n] = raman_mean(int(n), x) * MAP_COUNTS_SCALE
                y += weight[n_at == n].sum() * means[n]
            cube[r, c] = rng.poisson(np.maximum(y, 0)).astype(float)
    return x, cube, xs, ys


def write_map(path: Path, x, cube, xs, ys) -> None:
    """A map in flakebook's map text format (docs/spectrum-map-format.md)."""
    lines = [
        "# invented demo map across " + MAP_FLAKE,
        f"# laser: {LASER_NM:g} nm",
        "# exposure (s): 1",
        "#flakebook-map x_unit=cm1 kind=raman",
        "spectral_axis " + " ".join(f"{v:.3f}" for v in x),
    ]
    for r, yv in enumerate(ys):
        for c, xv in enumerate(xs):
            lines.append(f"{xv:g} {yv:g} " + " ".join(f"{v:.0f}" for v in cube[r, c]))
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")


def _add_map(project, folder: Path, rng) -> None:
    """Draw, write, fit and store the demo's Raman map over the flake's 50x micrograph (placed
    by the image's stage position: the map's positions are chip coordinates)."""
    from flakebook.pipeline_maps import find_image, store_map
    from flakebook.spectra.io import read_map
    from flakebook.store import Sample

    flake = next(f for f in FLAKES if f.label == MAP_FLAKE)
    path = folder / "spectra" / f"{MAP_FLAKE}_map_532.txt"
    write_map(path, *raman_map(flake, rng))
    image = find_image(project, f"{MAP_FLAKE}_50x")
    store_map(
        project,
        project.get(Sample, image.sample_id),
        read_map(path),
        image=image,
        source_path=path,
        name=f"{MAP_FLAKE} map",
        notes="invented demo map: a 1 um raster across the monolayer, its thicker terrace and the "
        "bare substrate",
    )


def _write_spectrum(path: Path, x: np.ndarray, y: np.ndarray, unit: str) -> None:
    head = "raman_shift_cm1,counts" if unit == "cm-1" else "wavelength_nm,counts"
    lines = [head] + [f"{a:.4f},{b:.0f}" for a, b in zip(x, y)]
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")


# ---- the project ---------------------------------------------------------------------------


def build_demo(
    folder: str | Path,
    *,
    progress: Callable[[float, str], None] | None = None,
    cancel: threading.Event | None = None,
) -> Path:
    """Write the demo campaign into ``folder`` (created; must not hold a project already).

    Returns the path of the project file. Deterministic: the same flakebook gives the same rows
    and the same files.
    """
    from flakebook.imaging.survey import survey_image
    from flakebook.optics.absorptance import absorptance
    from flakebook.optics.materials import get_material
    from flakebook.pipeline import survey_options
    from flakebook.store import Project

    def report(frac: float, text: str) -> None:
        if progress is not None:
            progress(frac, text)

    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / PROJECT_NAME
    if path.exists():
        raise InputError(f"{path} already exists; accepted: a folder without a demo project")
    (folder / "images").mkdir(exist_ok=True)
    (folder / "spectra").mkdir(exist_ok=True)
    rng = np.random.default_rng(20260309)
    mat = get_material(MATERIAL)
    spacing = mat.layer_spacing_nm

    project = Project.create(path, clock=_clock(), user="demo")
    try:
        north = project.add_sample("K7-north", MATERIAL, oxide_nm=OXIDE_NM, notes="plain chip")
        south = project.add_sample(
            "K7-south",
            MATERIAL,
            oxide_nm=OXIDE_NM,
            hole_pattern={
                "bottom": "au",
                "diameter_um": HOLE_DIAMETER_UM,
                "pitch_um": HOLE_PITCH_UM,
                "lattice": "square",
                "angle_deg": 0.0,
                "depth_nm": HOLE_DEPTH_NM,
                "depth_err_nm": HOLE_DEPTH_ERR_NM,
            },
            notes="holey chip: square lattice of gold-bottomed holes",
        )
        samples = {"K7-north": north, "K7-south": south}
        for s in samples.values():
            project.add_calibration(
                s,
                oxide_nm=OXIDE_NM,
                oxide_err_nm=3.0,
                dark_offset={"r": DARK_OFFSET, "g": DARK_OFFSET, "b": DARK_OFFSET},
                dark_offset_err={"r": 0.001, "g": 0.001, "b": 0.001},
                contrast_scale={"r": 1.0, "g": 1.0, "b": 1.0},
                contrast_scale_err={"r": 0.02, "g": 0.02, "b": 0.02},
                method="nominal (chip datasheet oxide, camera dark offset)",
            )
        flakes = {f.label: project.add_flake(samples[f.sample], f.label, tags=f.tags,
                                             notes=f.notes) for f in PIECES}  # fmt: skip

        # The 50x shots first (each names its flake), then the overviews, whose flakes are
        # linked to those by stage position.
        views: list[View] = []
        for f in FLAKES:
            views.append(View(f"{f.label}_50x", f.sample, "50x", f.center_um, 800, 600))
        for name in ("K7-north", "K7-south"):
            views.append(View(f"{name}_10x_overview", name, "10x", (0.0, 0.0), 1100, 760))

        for k, view in enumerate(views):
            check_cancel(cancel)
            report(0.05 + 0.6 * k / len(views), f"rendering {view.name}")
            img = render_view(view, PIECES, rng)
            import cv2

            if view.objective == "10x":  # overviews saved as a camera's JPEG
                file = folder / "images" / f"{view.name}.jpg"
                cv2.imwrite(str(file), img[:, :, ::-1], [cv2.IMWRITE_JPEG_QUALITY, JPEG_QUALITY])
            else:
                file = folder / "images" / f"{view.name}.png"
                cv2.imwrite(str(file), img[:, :, ::-1])
            um_px, na_obj = OBJECTIVES[view.objective]
            image = project.add_image(
                samples[view.sample],
                file,
                pixel_size_um=um_px,
                objective=view.objective,
                na_objective=na_obj,
                na_illumination=NA_ILLUMINATION,
                illumination="halogen",
                camera={"bit_depth": 8, "encoding": "srgb", "exposure_ms": 12.0},
                stage_x_um=view.center_um[0],
                stage_y_um=view.center_um[1],
                width_px=view.width_px,
                height_px=view.height_px,
            )
            result = survey_image(
                file,
                **survey_options(project, samples[view.sample], image),
                min_area_um2=20.0 if view.objective == "50x" else 30.0,
            )
            _store_survey(project, image, view, result, flakes)

        project.assign(
            flakes["K7N-03"],
            3,
            reason="contrast in r, g and b says 3L; the B2g(1) mode is present and the A1g sits "
            "between the 2L and 4L flakes' positions",
            who="demo",
        )
        report(0.7, "spectra")
        _add_spectra(project, folder, flakes, rng)
        # The Raman/PL rule table calibrated on K7-north's flakes of known N (assigned by hand),
        # then the spectra of that chip re-read with it.
        from flakebook.pipeline import calibrate_rules

        calibrate_rules(project, north, laser_nm=LASER_NM)
        project.recompute_stale()
        report(0.75, "Raman map")
        _add_map(project, folder, np.random.default_rng(20260310))
        report(0.8, "thermometry")
        _add_thermometry(project, folder, flakes, rng, mat, spacing, absorptance)
        project.add_external_result(
            flakes["K7S-03"],
            kappa_w_mk=25.5,
            kappa_p16_w_mk=21.0,
            kappa_p84_w_mk=30.5,
            method="finite-element heat model with interface conductance (colleague's analysis)",
            note="sent back after the hand-off; includes the supported region",
            source_file="handoff-results.csv",
        )
        report(1.0, "done")
    except BaseException:
        project.close()
        raise
    project.close()
    return path


def _store_survey(project, image, view, result, flakes) -> None:
    """Record the survey of one image, its flakes matched to the scenario's by position."""
    from flakebook.imaging.holes import signed_distance
    from flakebook.pipeline import link_by_stage, store_survey

    if view.objective == "10x":
        store_survey(project, image, result, flake_for=link_by_stage(project, image), assign=False,
                     parameters={"objective": view.objective})  # fmt: skip
        return
    here = [f for f in PIECES if f.sample == view.sample]
    centres = view.to_px(np.array([f.center_um for f in here]))

    def flake_for(sf):
        # A partial flake at the frame's edge or a neighbour's corner matches none.
        for f, c in zip(here, centres):
            if signed_distance(sf.outline_px, (float(c[0]), float(c[1]))) > 0:
                return flakes[f.label]
        return None

    store_survey(
        project,
        image,
        result,
        flake_for=flake_for,
        assign=view.objective == "50x",
        parameters={"objective": view.objective},
    )


def _add_spectra(project, folder: Path, flakes, rng) -> None:
    """Draw, write and attach each flake's Raman and PL spectra (fitted by the program), the
    conflict flake's low-frequency spectrum, and the assignment that it settles."""
    from flakebook.pipeline import attach_spectrum
    from flakebook.spectra.io import Spectrum

    def attach(flake, name, x, y, unit, kind, polarization="parallel", **fields):
        _write_spectrum(folder / "spectra" / name, x, y, unit)
        return attach_spectrum(
            project,
            flake,
            Spectrum(x, y, x_unit="cm1" if unit == "cm-1" else unit, kind=kind),
            source_path=folder / "spectra" / name,
            settings={"laser_nm": LASER_NM, "polarization": polarization},
            fields=fields,
        )

    for f in FLAKES:
        flake = flakes[f.label]
        x, y = raman_spectrum(f.layers, rng)
        attach(
            flake, f"{f.label}_raman_532.csv", x, y, "cm-1", "raman", power_mw=0.25,
            stage_temperature_k=295.0, integration_s=30.0,
            metadata={"grating_l_per_mm": 1800, "objective": "100x"},
        )  # fmt: skip
        x, y = pl_spectrum(f.layers, rng)
        attach(
            flake, f"{f.label}_pl_532.csv", x, y, "nm", "pl", power_mw=0.1,
            stage_temperature_k=295.0, integration_s=5.0,
            metadata={"grating_l_per_mm": 300, "objective": "100x"},
        )  # fmt: skip
    # The conflict: K7N-02's contrast says 3L (the residue), the low-frequency modes say 2L.
    x, y = low_frequency_spectrum(2, rng)
    got = attach(
        flakes["K7N-02"], "K7N-02_lowfreq_532.csv", x, y, "cm-1", "raman", power_mw=0.5,
        stage_temperature_k=295.0, integration_s=120.0,
        metadata={"grating_l_per_mm": 1800, "objective": "100x", "filter": "volume Bragg notch"},
    )  # fmt: skip
    fitted = {p["mode"]: p["center_cm1"] for p in got.analysis.peaks() if p["found"]}
    project.assign(
        flakes["K7N-02"],
        2,
        reason=f"the shear mode at {fitted['shear']:.1f} and the breathing mode at "
        f"{fitted['breathing']:.1f} cm^-1 are those of a bilayer; the contrast reads 3L because "
        "of the residue seen at one edge",
        who="demo",
    )


def _draw_series(project, folder: Path, flake, series, n, rng, steps, *, shift, name, power_mw,
                 temperature_k) -> None:  # fmt: skip
    """Draw, write and store one Raman spectrum per step of a series (the A1g shifted by
    ``shift(step)``); the program analyses them afterwards (flakebook.pipeline_thermal)."""
    for k, step in enumerate(steps):
        x, y = raman_spectrum(n, rng, a1g_shift_cm1=shift(step))
        file = name(k, step)
        _write_spectrum(folder / "spectra" / file, x, y, "cm-1")
        project.add_spectrum(
            flake, x, y, kind="raman", x_unit="cm-1", laser_nm=LASER_NM,
            power_mw=power_mw(step), stage_temperature_k=temperature_k(step), integration_s=60.0,
            series_id=series.id, source_path=f"spectra/{file}", metadata={"step": k},
        )  # fmt: skip


def _add_thermometry(project, folder: Path, flakes, rng, mat, spacing, absorptance) -> None:
    """Temperature and power series of the suspended flakes, analysed by the program.

    The power series are drawn from the Gaussian-beam disk result (the intensity-weighted
    temperature rise R_m = G / (2 pi kappa t) per absorbed watt, G from
    :func:`flakebook.thermal.model.geometry_factor_closed_form`) with an invented kappa; the
    analysis (mode fits, chi_T and chi_P, absorptance for the hole, Monte Carlo kappa) is the
    program's own, through :mod:`flakebook.pipeline_thermal`.
    """
    from flakebook.pipeline_thermal import ModelOptions, analyse_series, flake_kappa
    from flakebook.thermal.model import geometry_factor_closed_form

    beam = project.add_beam_profile(
        "50x", LASER_NM, BEAM_RADIUS_UM, radius_err_um=0.03, method="knife-edge scan",
        notes="demo: invented spot",
    )  # fmt: skip
    radius_um = HOLE_DIAMETER_UM / 2
    for label, kappa_true in THERMOMETRY.items():
        demo = next(f for f in FLAKES if f.label == label)
        flake = flakes[label]
        covered = project.holes_covered_by(flake)
        hole_id = covered[0][1].id if covered else None
        n = demo.layers
        t_m = n * spacing * 1e-9
        a = absorptance(
            mat,
            n,
            LASER_NM,
            _substrate(),
            geometry="suspended",
            hole=_hole(),
            na_objective=RAMAN_NA,
        ).absorptance_flake
        geom = geometry_factor_closed_form(radius_um, BEAM_RADIUS_UM)
        r_m = geom / (2 * math.pi * kappa_true * t_m)
        chi_p_true = CHI_T_CM1_PER_K * a * r_m * 1e-3  # cm^-1 per mW incident

        ts = project.add_thermometry_series(
            flake, "temperature", laser_nm=LASER_NM, mode="A1g", beam_profile_id=beam.id,
            hole_id=hole_id, notes="stage heated in a nitrogen-flushed cell; 0.01 mW probe",
        )  # fmt: skip
        temps = np.array([295.0, 315.0, 335.0, 355.0, 375.0])
        _draw_series(
            project, folder, flake, ts, n, rng, temps,
            shift=lambda temp: CHI_T_CM1_PER_K * (temp - 295.0),
            name=lambda k, temp, label=label: f"{label}_T{int(temp)}K.csv",
            power_mw=lambda temp: 0.01,
            temperature_k=float,
        )  # fmt: skip

        ps = project.add_thermometry_series(
            flake, "power", laser_nm=LASER_NM, mode="A1g", beam_profile_id=beam.id,
            hole_id=hole_id, notes="power ramped up then down at 295 K",
        )  # fmt: skip
        powers = np.array([0.01, 0.02, 0.03, 0.04, 0.05, 0.04, 0.02])
        _draw_series(
            project, folder, flake, ps, n, rng, powers,
            shift=lambda p, chi=chi_p_true: chi * p,
            name=lambda k, p, label=label: f"{label}_P{k:02d}_{round(p * 1000)}uW.csv",
            power_mw=float,
            temperature_k=lambda p: 295.0,
        )  # fmt: skip
        analyse_series(project, flake)
        flake_kappa(project, flake, ModelOptions(draws=4000))
