"""The report's figures, drawn offscreen through :class:`flakebook.render.plots.Plot`:
contrast versus N with the measurement, a spectrum with its fitted lines, omega(T) and omega(P),
and kappa versus N. Each returns PNG bytes (or None when there is nothing to draw).
"""

from __future__ import annotations

import math

import numpy as np

from flakebook.render.palette import layer_hex
from flakebook.render.plots import Plot
from flakebook.store import Image, Project, Sample, Spectrum

CHANNEL_COLOURS = {"r": "#D55E00", "g": "#009E73", "b": "#0072B2", "mono": "#000000"}


def contrast_figure(project: Project, contrast: dict, layers: int | None) -> bytes | None:
    """Model contrast versus N per channel (thin-film model with the sample's calibration) and
    the measured contrast of the flake drawn at its layer number."""
    from flakebook.pipeline import calibration_values, contrast_likelihood

    image_id = contrast.get("image_id")
    if image_id is None:
        return None
    image = project.get(Image, int(image_id))
    sample = project.get(Sample, image.sample_id)
    nmax = project.max_layers
    lk, _note = contrast_likelihood(
        sample, image, calibration_values(project, sample), contrast["contrast"],
        contrast.get("contrast_err"), geometry=contrast.get("geometry", "supported"),
        max_layers=nmax, explain=False,
    )  # fmt: skip
    n = np.arange(1, lk.model_contrast.shape[0] + 1)
    plot = Plot(
        title="Optical contrast versus layer number",
        xlabel="layer number N",
        ylabel="contrast C",
        width_px=560,
        height_px=330,
        note="C = (R_reference - R_flake)/R_reference per camera channel; lines: thin-film "
        "model; points: this flake",
    )
    for j, ch in enumerate(lk.channels):
        colour = CHANNEL_COLOURS.get(ch, "#555555")
        plot.line(n, lk.model_contrast[:, j], colour, f"model {ch}")
        if layers is not None and ch in contrast["contrast"]:
            err = (contrast.get("contrast_err") or {}).get(ch)
            plot.points([layers], [contrast["contrast"][ch]], colour,
                        yerr=None if err is None else [err])  # fmt: skip
    return plot.png()


def _profile(kind: str, x: np.ndarray, center: float, fwhm: float, height: float) -> np.ndarray:
    if kind == "gaussian":
        s = fwhm / (2 * math.sqrt(2 * math.log(2)))
        return height * np.exp(-0.5 * ((x - center) / s) ** 2)
    lor = height / (1 + ((x - center) / (0.5 * fwhm)) ** 2)
    if kind in ("voigt", "pseudo-voigt"):  # drawn as an equal-weight pseudo-Voigt
        s = fwhm / (2 * math.sqrt(2 * math.log(2)))
        return 0.5 * lor + 0.5 * height * np.exp(-0.5 * ((x - center) / s) ** 2)
    return lor


def spectrum_figure(project: Project, entry) -> bytes | None:
    """The measured spectrum (Si-line calibration applied), its baseline (the fit's method) and
    the fitted lines redrawn from the stored fit (centre, width, height of each line)."""
    from flakebook.spectra.analyse import pl_axis, raman_axis
    from flakebook.spectra.processing import estimate_baseline

    spec = project.get(Spectrum, entry.spectrum_id)
    laser = spec.laser_nm or entry.settings.get("laser_nm") or 532.0
    unit = {"cm-1": "cm1", "nm": "nm", "ev": "ev"}[spec.x_unit]
    if spec.kind == "raman":
        x = raman_axis(spec.x, unit, laser) + float(entry.calibration.get("shift_cm1") or 0.0)
        y = np.asarray(spec.y, float)
        xlabel, key = "Raman shift (cm⁻¹)", "cm1"
    elif spec.kind == "pl":
        x, y = pl_axis(spec.x, spec.y, unit, laser)
        xlabel, key = "photon energy (eV)", "ev"
    else:
        return None
    order = np.argsort(x)
    x, y = np.asarray(x)[order], np.asarray(y)[order]
    plot = Plot(
        title=f"{entry.name} ({spec.kind})",
        xlabel=xlabel,
        ylabel="counts",
        width_px=560,
        height_px=300,
        note=f"fit: {entry.settings.get('peak_model', '-')} lines on a "
        f"{entry.settings.get('baseline', '-')} baseline, redrawn from the stored fit",
    )
    plot.line(x, y, "#888888", "measured", width=1.0)
    try:
        base = np.asarray(
            estimate_baseline(x, y, method=entry.settings.get("baseline", "imodpoly")).baseline
        )
    except Exception:  # a baseline that cannot be redrawn: show the lines on zero
        base = np.zeros_like(x)
    model = entry.settings.get("peak_model", "lorentzian")
    total = np.zeros_like(x)
    found = False
    for p in entry.peaks:
        c, w, h = p.get(f"center_{key}"), p.get(f"fwhm_{key}"), p.get("height")
        if not p.get("found") or c is None or w is None or h is None:
            continue
        found = True
        total += _profile(model, x, float(c), float(w), float(h))
    if found:
        plot.line(x, base, "#56B4E9", "baseline", dash=True, width=1.0)
        plot.line(x, base + total, "#D55E00", "fitted lines", width=1.6)
    return plot.png()


def series_figure(series: dict, kind: str) -> bytes | None:
    """omega(T) or omega(P): the fitted A1g centres with their errors and the fitted line."""
    s = series.get(kind)
    if not s or not s.get("points"):
        return None
    pts = s["points"]
    x = np.array([p["x"] for p in pts], float)
    y = np.array([p["center_cm1"] if p["center_cm1"] is not None else np.nan for p in pts])
    e = np.array([p.get("center_err_cm1") or np.nan for p in pts], float)
    fit = s.get("fit") or {}
    if kind == "temperature":
        title, xlabel = f"{s.get('mode', '')} centre versus stage temperature", "temperature (K)"
    else:
        title, xlabel = f"{s.get('mode', '')} centre versus laser power", "incident power (mW)"
    plot = Plot(title=title, xlabel=xlabel, ylabel="centre (cm⁻¹)", width_px=420, height_px=280)
    plot.points(x, y, "#0072B2", "measured", yerr=e)
    if fit.get("slope") is not None:
        xs = np.linspace(np.nanmin(x), np.nanmax(x), 20)
        plot.line(xs, fit["intercept"] + fit["slope"] * xs, "#D55E00", "fit")
    return plot.png()


def kappa_figure(rows: list[dict], *, max_layers: int = 15) -> bytes | None:
    """kappa versus layer number with the 16-84% intervals, coloured by layer number."""
    rows = [r for r in rows if r.get("kappa_w_mk") is not None and r.get("layers")]
    if not rows:
        return None
    plot = Plot(
        title="Thermal conductivity versus layer number",
        xlabel="layer number N",
        ylabel="κ (W/mK)",
        width_px=560,
        height_px=330,
        note="points: latest result per flake; bars: 16-84% interval",
    )
    ns = sorted({int(r["layers"]) for r in rows})
    plot.x_ticks = list(range(min(ns), max(ns) + 1))
    # flakebook's and an external analysis's result at one N stand side by side, not on top
    # of each other (the same offsets as the window's view)
    both = {int(r["layers"]) for r in rows if r.get("source") == "external"} & {
        int(r["layers"]) for r in rows if r.get("source", "flakebook") == "flakebook"
    }
    for r in rows:
        n = int(r["layers"])
        x = n + (0.12 if r.get("source") == "external" else -0.12) * (n in both)
        plot.points([x], [r["kappa_w_mk"]], layer_hex(n) if n <= 7 else "#555555",
                    ylo=[r.get("kappa_p16_w_mk") or np.nan],
                    yhi=[r.get("kappa_p84_w_mk") or np.nan])  # fmt: skip
    return plot.png()
