"""Layer maps from a Raman map: every spectrum fitted (flakebook.spectra.mapfit), maps of each
mode's position, of the separations the rule table uses, and of the most likely layer number.

:func:`analyse_map` takes a :class:`~flakebook.spectra.io.SpectrumMap` on a Raman-shift axis (or
converts it with the laser line), fits the first-order modes of :func:`~flakebook.spectra.analyse.
peak_specs` in every spectrum (Lorentzian lines; the interlayer modes are left to single
spectra, whose lines are placed one by one), and reads each pixel's Raman evidence
(layer_evidence.raman_evidence, the offset marginalised per pixel) into the most likely N and
its probability. No Si-line calibration per pixel: one shift for the whole map
(``shift_cm1``), as for a series. Pure numpy/scipy.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from flakebook.errors import InputError, check_cancel
from flakebook.evidence import combine
from flakebook.spectra.analyse import peak_specs, raman_axis
from flakebook.spectra.layer_evidence import Feature, raman_evidence, raman_offset_grid
from flakebook.spectra.mapfit import MapFit, fit_map
from flakebook.spectra.rules import RuleTable, load_rule_table


@dataclass(frozen=True)
class MapLayers:
    """Maps of shape ``(rows, cols)`` (rows along ``y_um``, columns along ``x_um``).

    ``maps`` holds named float arrays (NaN where a line was not found): ``<mode>_center_cm1``,
    ``<mode>_center_err_cm1``, ``<mode>_fwhm_cm1``, ``<mode>_height``, the separations
    ``<b>-<a>_separation_cm1`` of the table's separation rules, ``layers`` (most likely N,
    max_layers + 1 for "more"; NaN where no evidence) and ``probability``.
    """

    x_um: np.ndarray
    y_um: np.ndarray
    maps: dict
    fit: MapFit
    max_layers: int
    warnings: tuple[str, ...] = ()


def analyse_map(
    spectrum_map,
    material: str,
    *,
    laser_nm: float = 532.0,
    table: RuleTable | None = None,
    shift_cm1: float = 0.0,
    calibration_err_cm1: float = 0.5,
    max_layers: int = 15,
    progress=None,
    cancel=None,
) -> MapLayers:
    """Fit every spectrum of ``spectrum_map`` and map positions, separations and the layer
    number (module docstring). ``progress``/``cancel`` as everywhere in the core."""
    if spectrum_map.kind != "raman":
        raise InputError(f"a layer map needs a Raman map; this one is {spectrum_map.kind!r}")
    table = table or load_rule_table(material, laser_nm)
    x = raman_axis(spectrum_map.x, spectrum_map.x_unit, laser_nm) + float(shift_cm1)
    data = np.asarray(spectrum_map.spectra, dtype=float)
    order = np.argsort(x, kind="stable")
    x, data = x[order], data[..., order]
    specs = [
        s for s in peak_specs(table, x) if s.mode not in ("shear", "breathing") and not s.is_doublet
    ]
    if not specs:
        raise InputError(
            f"no Raman mode of {material} lies in the map's range {x.min():.0f}-{x.max():.0f} "
            "cm^-1; accepted: a map covering the first-order modes"
        )

    def part(lo, hi):
        if progress is None:
            return None
        return lambda f, msg: progress(lo + (hi - lo) * f, msg)

    fit = fit_map(x, data, specs, progress=part(0.0, 0.8), cancel=cancel)
    rows, cols = data.shape[:2]
    maps: dict[str, np.ndarray] = {}
    for i, mode in enumerate(fit.modes):
        maps[f"{mode}_center_cm1"] = fit.center[..., i]
        maps[f"{mode}_center_err_cm1"] = fit.center_err[..., i]
        maps[f"{mode}_fwhm_cm1"] = fit.fwhm[..., i]
        maps[f"{mode}_height"] = fit.height[..., i]
    for rule in table.rules_of("separation"):
        a, b = rule.modes
        if a in fit.modes and b in fit.modes:
            sep, err = fit.separation(a, b)
            maps[f"{b}-{a}_separation_cm1"] = sep
            maps[f"{b}-{a}_separation_err_cm1"] = err
    layers = np.full((rows, cols), np.nan)
    prob = np.full((rows, cols), np.nan)
    grid = raman_offset_grid(calibration_err_cm1)
    warnings = []
    skipped = 0
    for r in range(rows):
        check_cancel(cancel)
        for c in range(cols):
            feats = []
            for i, mode in enumerate(fit.modes):
                ok = bool(fit.found[r, c, i]) and np.isfinite(fit.center_err[r, c, i])
                ok = ok and fit.center_err[r, c, i] > 0
                if ok:
                    feats.append(
                        Feature(mode, float(fit.center[r, c, i]), float(fit.center_err[r, c, i]))
                    )
                else:
                    feats.append(Feature(mode, found=False))
            try:
                ev = raman_evidence(feats, table, max_layers=max_layers, offset_grid=grid)
                post = combine(list(ev)) if ev else None
            except InputError:
                post, skipped = None, skipped + 1
            if post is not None:
                layers[r, c] = post.layers
                prob[r, c] = post.probability
        if progress is not None:
            progress(0.8 + 0.2 * (r + 1) / rows, "layer number per spectrum")
    if skipped:
        warnings.append(
            f"{skipped} {'spectrum' if skipped == 1 else 'spectra'} of the map fit no layer "
            "number of the table"
        )
    maps["layers"] = layers
    maps["probability"] = prob
    for v in maps.values():
        v.setflags(write=False)
    return MapLayers(
        np.array(spectrum_map.x_um),
        np.array(spectrum_map.y_um),
        maps,
        fit,
        max_layers,
        tuple(warnings),
    )
