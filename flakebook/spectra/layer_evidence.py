"""Layer evidence from Raman and PL features, the Si-line attenuation and an AFM step height.

Every function returns :class:`flakebook.evidence.Evidence` items: a likelihood over
N = 1..max_layers plus the "more" bin (the likelihood averaged over N = max_layers+1..100; for
Raman the rule table runs to its bulk value there). A feature that was found gives
p_detect(N) x Normal(value; centre(N), error^2 + spread(N)^2); one that was looked for and not
found gives 1 - p_detect(N). Positions that move with the spectrometer's calibration offset (a
single mode's centre, shear and breathing modes) are handed over on one shared grid of
``raman_offset_cm1`` (:func:`raman_offset_grid`), so that :func:`flakebook.evidence.combine`
marginalises the offset once for all of them; a separation of two modes, and a Stokes/anti-Stokes
pair (:func:`stokes_pair`), do not depend on it. The Si-line ratio is handed over on the shared
``oxide_nm`` grid, evaluated with the optics model (flakebook.optics.absorptance).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from flakebook.errors import InputError
from flakebook.evidence import Evidence, GridLikelihood, ParameterGrid, parameter_grid
from flakebook.spectra.rules import MAX_N, RuleTable, load_rule_table
from flakebook.wording import value_with_error

DEFAULT_CALIBRATION_ERR_CM1 = (
    0.5  # a spectrometer checked on the Si line; common practice, no source
)
DEFAULT_FILTER_EDGE_CM1 = 8.0  # lowest shift a notch/edge filter passes; common practice, no source
AFM_OFFSET_NM = 0.5  # residue/adsorbate step offset on SiO2; value from memory
AFM_OFFSET_ERR_NM = 0.4  # value from memory
POLARIZATIONS = ("parallel", "crossed", "unpolarized")
_LOG0 = -np.inf


@dataclass(frozen=True)
class Feature:
    """One fitted Raman feature (the fitter's output is mapped onto it).

    ``mode``: the trade's name (``"A1g"``, ``"E2g"``, ``"B2g"``, ``"shear"``, ``"breathing"``);
    ``found`` False means it was looked for and not seen (centre may then be None).
    ``offset_free``: the centre does not carry the spectrometer's offset (a Stokes/anti-Stokes
    pair, :func:`stokes_pair`).
    """

    mode: str
    center_cm1: float | None = None
    center_err_cm1: float | None = None
    found: bool = True
    height: float | None = None
    area: float | None = None
    snr: float | None = None
    offset_free: bool = False

    def __post_init__(self) -> None:
        if self.found:
            c, e = self.center_cm1, self.center_err_cm1
            if c is None or e is None or not (math.isfinite(c) and math.isfinite(e) and e > 0):
                raise InputError(
                    f"Raman feature {self.mode!r}: a found mode needs a finite centre and an "
                    f"error > 0 in cm^-1 (got {c!r} +- {e!r})"
                )


@dataclass(frozen=True)
class PLFeature:
    """The PL A exciton: peak energy (eV) and intensity relative to a reference monolayer
    measured the same way (both optionally normalised by one Raman mode of their own spectra)."""

    found: bool = True
    peak_ev: float | None = None
    peak_err_ev: float | None = None
    ratio_to_monolayer: float | None = None
    ratio_err_rel: float | None = None


def stokes_pair(stokes: Feature, anti_stokes: Feature) -> Feature:
    """One feature from a mode's Stokes and anti-Stokes lines fitted together.

    The anti-Stokes centre is given on the Raman-shift axis (negative). With both found the
    centre is (S - AS)/2, free of the spectrometer's offset, with error sqrt(eS^2 + eAS^2)/2;
    with one found, that one (carrying the offset); with neither, not found.
    """
    if stokes.mode != anti_stokes.mode:
        raise InputError(
            f"a Stokes/anti-Stokes pair must be one mode (got {stokes.mode!r} and "
            f"{anti_stokes.mode!r})"
        )
    if anti_stokes.found and anti_stokes.center_cm1 >= 0:
        raise InputError(
            f"anti-Stokes centre of {anti_stokes.mode!r} must be negative on the Raman-shift "
            f"axis (got {anti_stokes.center_cm1!r} cm^-1)"
        )
    if stokes.found and anti_stokes.found:
        snr = None
        if stokes.snr is not None and anti_stokes.snr is not None:
            snr = math.hypot(stokes.snr, anti_stokes.snr)
        return Feature(
            stokes.mode,
            (stokes.center_cm1 - anti_stokes.center_cm1) / 2.0,
            math.hypot(stokes.center_err_cm1, anti_stokes.center_err_cm1) / 2.0,
            True,
            height=_sum(stokes.height, anti_stokes.height),
            area=_sum(stokes.area, anti_stokes.area),
            snr=snr,
            offset_free=True,
        )
    if stokes.found:
        return stokes
    if anti_stokes.found:
        return Feature(
            stokes.mode,
            -anti_stokes.center_cm1,
            anti_stokes.center_err_cm1,
            True,
            anti_stokes.height,
            anti_stokes.area,
            anti_stokes.snr,
            offset_free=False,
        )
    return Feature(stokes.mode, found=False)


def _sum(a, b):
    return None if a is None or b is None else a + b


def raman_offset_grid(calibration_err_cm1: float = DEFAULT_CALIBRATION_ERR_CM1) -> ParameterGrid:
    """The shared grid of the spectrometer's calibration offset (cm^-1, centred on 0)."""
    if not (math.isfinite(calibration_err_cm1) and calibration_err_cm1 >= 0):
        raise InputError(
            f"the spectrometer calibration error must be >= 0 cm^-1 (got {calibration_err_cm1!r})"
        )
    return parameter_grid("raman_offset_cm1", 0.0, calibration_err_cm1, lower=None)


def _bins(ll_all: np.ndarray, max_layers: int) -> np.ndarray:
    """Columns N = 1..MAX_N -> N = 1..max_layers plus the log-mean of the rest ("more")."""
    head = ll_all[..., :max_layers]
    tail = ll_all[..., max_layers:]
    top = np.max(tail, axis=-1, keepdims=True)
    with np.errstate(invalid="ignore", divide="ignore"):
        safe = np.where(np.isfinite(top), top, 0.0)
        more = safe[..., 0] + np.log(np.mean(np.exp(tail - safe), axis=-1))
    more = np.where(np.isfinite(top[..., 0]), more, -np.inf)
    return np.concatenate([head, more[..., None]], axis=-1)


def _check_max(max_layers: int) -> int:
    if not (isinstance(max_layers, (int, np.integer)) and 1 <= max_layers < MAX_N):
        raise InputError(f"max_layers must be an integer 1..{MAX_N - 1} (got {max_layers!r})")
    return int(max_layers)


def _gauss_ll(x: np.ndarray, mu: np.ndarray, var: np.ndarray) -> np.ndarray:
    with np.errstate(invalid="ignore"):
        out = -0.5 * ((x - mu) ** 2 / var + np.log(2 * np.pi * var))
    return np.where(np.isfinite(mu), out, _LOG0)


def _log(p: np.ndarray) -> np.ndarray:
    with np.errstate(divide="ignore"):
        return np.log(p)


def _best_text(like: np.ndarray, max_layers: int) -> str:
    best = int(np.argmax(like))
    return f">{max_layers}L" if best == max_layers else f"{best + 1}L"


def _evidence(rule, ll: np.ndarray, grid: ParameterGrid | None, max_layers, what: str, inputs):
    """Evidence from log-likelihood columns N = 1..MAX_N (rows: grid nodes when grid given)."""
    binned = _bins(ll, max_layers)
    if not np.any(np.isfinite(binned)):
        raise InputError(
            f"{rule.feature}: {what} is impossible at every layer number under the table "
            f"({rule.method}); check the mode's label or calibrate the table"
        )
    if grid is not None:
        g = GridLikelihood(grid, binned, method=rule.method)
        like = g.likelihood
    else:
        g = None
        like = np.exp(binned - np.max(binned))
    reason = f"{what}: most like {_best_text(like, max_layers)}"
    if rule.note:
        reason += f" ({rule.note})"
    return Evidence(rule.method, like, reason, grid=g, inputs=inputs)


def raman_evidence(
    features: Sequence[Feature],
    table: RuleTable | str,
    *,
    max_layers: int = 15,
    offset_grid: ParameterGrid | None = None,
    calibration_err_cm1: float = DEFAULT_CALIBRATION_ERR_CM1,
    polarization: str = "parallel",
    filter_edge_cm1: float = DEFAULT_FILTER_EDGE_CM1,
) -> tuple[Evidence, ...]:
    """One :class:`Evidence` per rule of ``table`` whose modes are among ``features``.

    ``table``: a :class:`RuleTable` or a material name (532 nm table). Positions that carry the
    spectrometer's offset come on ``offset_grid`` (made with :func:`raman_offset_grid` from
    ``calibration_err_cm1`` when not given; pass one grid to every call on one spectrometer). In
    crossed polarisation the breathing modes are forbidden: not seeing one is no evidence, seeing
    one is refused. Modes predicted below ``filter_edge_cm1`` cannot be detected.
    """
    max_layers = _check_max(max_layers)
    if isinstance(table, str):
        table = load_rule_table(table)
    if polarization not in POLARIZATIONS:
        raise InputError(f"polarization {polarization!r} unknown; accepted: {POLARIZATIONS}")
    by_mode: dict[str, Feature] = {}
    for f in features:
        if not isinstance(f, Feature):
            raise InputError("Raman evidence needs Feature items (mode, centre, error, found)")
        key = f.mode.strip().lower()
        if key in by_mode:
            raise InputError(f"mode {f.mode!r} given twice; accepted: one feature per mode")
        by_mode[key] = f
    grid = offset_grid if offset_grid is not None else raman_offset_grid(calibration_err_cm1)
    if grid.parameter != "raman_offset_cm1":
        raise InputError(f"the offset grid must be of raman_offset_cm1 (got {grid.parameter!r})")
    n = np.arange(1, MAX_N + 1)
    out = []
    for rule in table.rules:
        if rule.kind not in ("position", "separation", "presence", "shear", "breathing"):
            continue
        feats = [by_mode.get(m.lower()) for m in rule.modes]
        if any(f is None for f in feats):
            continue
        inputs = {f.mode: (f.center_cm1, f.center_err_cm1, f.found) for f in feats}
        p_det = rule.detection(n)
        if rule.kind in ("shear", "breathing"):
            p_det = np.where(rule.center(n) >= filter_edge_cm1, p_det, 0.0)
            if rule.kind == "breathing" and polarization == "crossed":
                if feats[0].found:
                    raise InputError(
                        "a breathing mode cannot appear in crossed polarisation; check the "
                        "mode's label or the polarisation (accepted: parallel, unpolarized)"
                    )
                flat = np.ones(max_layers + 1)
                out.append(
                    Evidence(
                        rule.method,
                        flat,
                        "breathing mode not seen in crossed polarisation, where it is "
                        "forbidden: no evidence",
                        inputs=inputs,
                    )
                )
                continue
        if not all(f.found for f in feats):
            missing = ", ".join(f.mode for f in feats if not f.found)
            ll = _log(1.0 - p_det)
            out.append(_evidence(rule, ll, None, max_layers, f"{missing} not found", inputs))
            continue
        if rule.kind == "presence":
            out.append(
                _evidence(rule, _log(p_det), None, max_layers, f"{rule.modes[0]} found", inputs)
            )
            continue
        if rule.kind == "separation":
            x = feats[1].center_cm1 - feats[0].center_cm1
            err = math.hypot(feats[0].center_err_cm1, feats[1].center_err_cm1)
            shared = False
        else:
            x, err = feats[0].center_cm1, feats[0].center_err_cm1
            shared = not feats[0].offset_free
        mu, s = rule.center(n), rule.spread(n)
        var = err**2 + s**2
        what = f"{rule.feature} {value_with_error(x, err, 'cm^-1')}"
        if shared:
            ll = _gauss_ll(x - grid.nodes[:, None], mu[None, :], var[None, :]) + _log(p_det)
            out.append(_evidence(rule, ll, grid, max_layers, what, inputs))
        else:
            ll = _gauss_ll(x, mu, var) + _log(p_det)
            out.append(_evidence(rule, ll, None, max_layers, what, inputs))
    return tuple(out)


def pl_evidence(
    pl: PLFeature, table: RuleTable | str, *, max_layers: int = 15
) -> tuple[Evidence, ...]:
    """Evidence from the PL A exciton: its energy and its intensity relative to a reference
    monolayer (each Gaussian with the table's wide spreads: PL is weak evidence), or from its
    absence (1 - p_detect)."""
    max_layers = _check_max(max_layers)
    if isinstance(table, str):
        table = load_rule_table(table)
    if not isinstance(pl, PLFeature):
        raise InputError("PL evidence needs a PLFeature")
    n = np.arange(1, MAX_N + 1)
    energy = table.rules_of("pl_energy")
    ratio = table.rules_of("pl_ratio")
    if not energy:
        raise InputError(f"the {table.material} table has no PL rules")
    erule = energy[0]
    if not pl.found:
        ll = _log(1.0 - erule.detection(n))
        return (_evidence(erule, ll, None, max_layers, "no PL found", {"found": False}),)
    out = []
    p_det = erule.detection(n)
    if pl.peak_ev is not None:
        e = pl.peak_err_ev
        if not (math.isfinite(pl.peak_ev) and e is not None and math.isfinite(e) and e > 0):
            raise InputError(
                f"PL peak energy needs a finite value and an error > 0 in eV (got "
                f"{pl.peak_ev!r} +- {e!r})"
            )
        var = e**2 + erule.spread(n) ** 2
        ll = _gauss_ll(pl.peak_ev, erule.center(n), var) + _log(p_det)
        what = f"PL A exciton at {value_with_error(pl.peak_ev, e, 'eV')}"
        out.append(_evidence(erule, ll, None, max_layers, what, {"peak_ev": pl.peak_ev}))
    if pl.ratio_to_monolayer is not None and ratio:
        r, rel = pl.ratio_to_monolayer, pl.ratio_err_rel
        if not (math.isfinite(r) and r > 0 and rel is not None and math.isfinite(rel) and rel > 0):
            raise InputError(
                f"PL intensity ratio must be > 0 with a relative error > 0 (got {r!r} +- {rel!r})"
            )
        rrule = ratio[0]
        x, err = math.log10(r), rel / math.log(10.0)
        ll = _gauss_ll(x, rrule.center(n), err**2 + rrule.spread(n) ** 2)
        what = f"PL intensity {r:.3g} x the monolayer's"
        out.append(_evidence(rrule, ll, None, max_layers, what, {"ratio_to_monolayer": r}))
    if not out:
        raise InputError("a found PL peak needs its energy or its intensity ratio")
    return tuple(out)


def si_attenuation_evidence(
    ratio: float,
    ratio_err: float,
    material,
    substrate,
    oxide_grid: ParameterGrid,
    *,
    max_layers: int = 15,
    laser_nm: float = 532.0,
    na_objective: float = 0.0,
    model_rel_err: float = 0.03,
) -> Evidence:
    """Evidence from I_Si(under the flake) / I_Si(bare substrate), on the shared oxide grid.

    At each node the optics model (flakebook.optics.absorptance.si_raman_attenuation, supported
    flake) gives the ratio for N = 1..100; Gaussian with variance ratio_err^2 + (model_rel_err x
    model)^2. ``material``: a name or an optics Material; ``substrate``: an optics Substrate
    whose topmost SiO2 film takes each node's thickness.
    """
    from flakebook.optics.absorptance import si_raman_attenuation
    from flakebook.optics.materials import get_material

    max_layers = _check_max(max_layers)
    if not (math.isfinite(ratio) and ratio > 0 and math.isfinite(ratio_err) and ratio_err >= 0):
        raise InputError(
            f"the Si Raman ratio must be > 0 and its error >= 0 (got {ratio!r} +- {ratio_err!r})"
        )
    if not isinstance(oxide_grid, ParameterGrid) or oxide_grid.parameter != "oxide_nm":
        raise InputError("the Si-line evidence needs the shared oxide_nm grid (parameter_grid)")
    if substrate.oxide_index is None:
        raise InputError(f"substrate {substrate.spec!r} has no SiO2 film for the oxide grid")
    mat = get_material(material) if isinstance(material, str) else material
    n = np.arange(1, MAX_N + 1)
    rows = []
    for t in oxide_grid.nodes:
        model = si_raman_attenuation(
            mat, n, substrate.with_oxide(float(t)), laser_nm=laser_nm, na_objective=na_objective
        )
        var = ratio_err**2 + (model_rel_err * model) ** 2
        rows.append(-0.5 * ((ratio - model) ** 2 / var + np.log(var)))
    ll = _bins(np.array(rows), max_layers)
    g = GridLikelihood(oxide_grid, ll, method="Si Raman line attenuation (thin-film model)")
    method = f"Si Raman line attenuation under the flake (thin-film model, {mat.name} n,k)"
    reason = (
        f"Si line {value_with_error(ratio, ratio_err)} of the bare substrate: most like "
        f"{_best_text(g.likelihood, max_layers)}"
    )
    return Evidence.from_grid(method, g, reason, inputs={"ratio": ratio, "ratio_err": ratio_err})


def afm_evidence(
    height_nm: float,
    height_err_nm: float,
    *,
    material: str | None = None,
    layer_spacing_nm: float | None = None,
    offset_nm: float = AFM_OFFSET_NM,
    offset_err_nm: float = AFM_OFFSET_ERR_NM,
    spacing_rel_err: float = 0.02,
    max_layers: int = 15,
) -> Evidence:
    """Evidence from an AFM step height entered by hand: h = N d + offset, the offset (residue,
    adsorbed water, tip-sample forces on SiO2) with its own uncertainty; Gaussian with variance
    height_err^2 + offset_err^2 + (N d spacing_rel_err)^2. ``d`` is ``layer_spacing_nm`` or the
    material's (c/2 of the bulk cell, value from memory)."""
    max_layers = _check_max(max_layers)
    if layer_spacing_nm is None:
        if material is None:
            raise InputError("an AFM height needs the material or the layer spacing in nm")
        layer_spacing_nm = load_rule_table(material).layer_spacing_nm
    vals = (height_nm, height_err_nm, offset_nm, offset_err_nm, layer_spacing_nm)
    if not all(math.isfinite(v) for v in vals) or height_err_nm <= 0 or layer_spacing_nm <= 0:
        raise InputError(
            f"AFM height {height_nm!r} +- {height_err_nm!r} nm: accepted a finite height, an "
            "error > 0 and a layer spacing > 0 (nm)"
        )
    if offset_err_nm < 0:
        raise InputError(f"the AFM offset error must be >= 0 nm (got {offset_err_nm!r})")
    n = np.arange(1, MAX_N + 1)
    mu = n * layer_spacing_nm + offset_nm
    var = height_err_nm**2 + offset_err_nm**2 + (n * layer_spacing_nm * spacing_rel_err) ** 2
    ll = _bins(_gauss_ll(height_nm, mu, var), max_layers)
    like = np.exp(ll - ll.max())
    method = (
        f"AFM step height (layer spacing {layer_spacing_nm:g} nm, value from memory; offset "
        f"{offset_nm:g} +- {offset_err_nm:g} nm)"
    )
    reason = (
        f"step {value_with_error(height_nm, height_err_nm, 'nm')}: most like "
        f"{_best_text(like, max_layers)}"
    )
    return Evidence(method, like, reason, inputs={"height_nm": height_nm})
