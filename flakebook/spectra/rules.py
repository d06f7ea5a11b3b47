"""Rule tables: what a Raman or PL feature looks like at each layer number.

A :class:`RuleTable` holds, for one material and one laser line, one :class:`Rule` per feature:
its centre and spread (model uncertainty: the scatter of published values and of flakes between
labs) for N = 1..k and for the bulk, and the probability of detecting the feature at each N.
Between the last tabulated N = k and the bulk the centre, spread and detection probability are
interpolated linearly in 1/N (the bulk at 1/N = 0). Shear and breathing rules instead carry the
linear chain's bulk frequency (flakebook.spectra.chain). Tables are read from
``resources/raman_rules/<material>.json``; :func:`calibrate_table` refits one from a user's flakes
of known N and returns a new table (``to_dict``/``from_dict`` for the project file).

Feature kinds: ``position`` (a mode's centre, cm^-1; shares the spectrometer's calibration
offset), ``separation`` (centre of ``modes[1]`` minus centre of ``modes[0]``, cm^-1; the offset
cancels), ``presence`` (only whether the mode is seen), ``shear`` / ``breathing`` (the highest
shear / lowest breathing branch of the chain, cm^-1), ``pl_energy`` (A exciton, eV) and
``pl_ratio`` (log10 of the PL intensity relative to a reference monolayer).
"""

from __future__ import annotations

import json
import math
from collections.abc import Sequence
from dataclasses import dataclass, field, replace

import numpy as np

from flakebook._resources import resource_path
from flakebook.errors import InputError
from flakebook.spectra import chain

KINDS = ("position", "separation", "presence", "shear", "breathing", "pl_energy", "pl_ratio")
RAMAN_KINDS = ("position", "separation", "presence", "shear", "breathing")
MAX_N = 100  # the "more" bin averages N_max+1..MAX_N (DESIGN.md)
LASER_TOLERANCE_NM = 5.0
MATERIALS = ("MoS2", "MoSe2", "WS2", "WSe2")


def _floats(values, name: str, allow_none: bool = False) -> tuple:
    out = []
    for v in values:
        if v is None and allow_none:
            out.append(None)
            continue
        try:
            f = float(v)
        except (TypeError, ValueError):
            raise InputError(f"rule value {name}: {v!r} is not a number") from None
        if not math.isfinite(f):
            raise InputError(f"rule value {name}: {v!r} is not finite")
        out.append(f)
    return tuple(out)


@dataclass(frozen=True)
class Rule:
    """One feature's behaviour with N. Lists run over N = 1..k; ``bulk_*`` is N -> infinity.

    ``centers``/``spreads`` may hold None where the feature does not exist (e.g. a mode absent
    in the monolayer); ``detect`` is the probability that a fit finds the feature at each N.
    For ``shear``/``breathing`` the centre is ``chain_bulk_cm1`` times cos(pi/2N) or sin(pi/2N),
    the spread sqrt((f(N) chain_bulk_err_cm1)^2 + floor^2).
    """

    feature: str
    kind: str
    modes: tuple[str, ...]
    unit: str
    centers: tuple = ()
    spreads: tuple = ()
    bulk_center: float | None = None
    bulk_spread: float | None = None
    detect: tuple = ()
    bulk_detect: float = 0.98
    floor: float = 0.0
    chain_bulk_cm1: float | None = None
    chain_bulk_err_cm1: float | None = None
    source: str = ""
    from_memory: bool = True
    note: str = ""
    calibrated_from: int = 0

    def __post_init__(self) -> None:
        if self.kind not in KINDS:
            raise InputError(
                f"rule {self.feature!r}: kind {self.kind!r} unknown; accepted: {KINDS}"
            )
        if self.kind in ("shear", "breathing"):
            if not (self.chain_bulk_cm1 and self.chain_bulk_cm1 > 0):
                raise InputError(f"rule {self.feature!r} needs chain_bulk_cm1 > 0")
        elif self.kind != "presence":
            if len(self.centers) == 0 or len(self.centers) != len(self.spreads):
                raise InputError(
                    f"rule {self.feature!r}: centres and spreads must be lists of one length"
                )
            if self.bulk_center is None or self.bulk_spread is None:
                raise InputError(f"rule {self.feature!r} needs bulk_center and bulk_spread")
            if any(s is not None and s <= 0 for s in self.spreads) or self.bulk_spread <= 0:
                raise InputError(f"rule {self.feature!r}: every spread must be > 0")
        if not self.detect:
            raise InputError(f"rule {self.feature!r} needs detection probabilities per N")
        if any(not 0.0 <= d <= 1.0 for d in (*self.detect, self.bulk_detect)):
            raise InputError(f"rule {self.feature!r}: detection probabilities must lie in [0, 1]")

    @property
    def offset_shared(self) -> bool:
        """True when the feature moves with the spectrometer's calibration offset."""
        return self.kind in ("position", "shear", "breathing")

    def _interp(self, values: Sequence, bulk: float, n: np.ndarray) -> np.ndarray:
        k = len(values)
        vals = np.array([np.nan if v is None else v for v in values], dtype=float)
        out = np.empty(n.shape)
        inside = n <= k
        out[inside] = vals[n[inside].astype(int) - 1]
        far = ~inside
        last = vals[-1]
        out[far] = bulk + (last - bulk) * k / n[far]
        return out

    def center(self, layers) -> np.ndarray:
        """Expected value at each N (NaN where the feature does not exist)."""
        n = np.asarray(layers, dtype=float)
        if self.kind == "shear":
            return np.where(n > 1, chain.highest_shear_cm1(n, self.chain_bulk_cm1), np.nan)
        if self.kind == "breathing":
            return np.where(n > 1, chain.lowest_breathing_cm1(n, self.chain_bulk_cm1), np.nan)
        if self.kind == "presence":
            return np.full(n.shape, np.nan)
        return self._interp(self.centers, self.bulk_center, n)

    def spread(self, layers) -> np.ndarray:
        """Model standard deviation at each N."""
        n = np.asarray(layers, dtype=float)
        if self.kind in ("shear", "breathing"):
            f = self.center(n) / self.chain_bulk_cm1
            err = self.chain_bulk_err_cm1 or 0.0
            return np.sqrt((f * err) ** 2 + self.floor**2)
        if self.kind == "presence":
            return np.full(n.shape, np.nan)
        return np.sqrt(self._interp(self.spreads, self.bulk_spread, n) ** 2 + self.floor**2)

    def detection(self, layers) -> np.ndarray:
        """Probability that the feature is found at each N."""
        n = np.asarray(layers, dtype=float)
        return np.clip(self._interp(self.detect, self.bulk_detect, n), 0.0, 1.0)

    @property
    def method(self) -> str:
        """Readable name with its source, for the user."""
        memo = ", value from memory" if self.from_memory else ""
        cal = f", calibrated on {self.calibrated_from} flakes" if self.calibrated_from else ""
        return f"{self.feature} ({self.source}{memo}{cal})"

    def to_dict(self) -> dict:
        d = {
            "feature": self.feature,
            "kind": self.kind,
            "modes": list(self.modes),
            "unit": self.unit,
            "detect": list(self.detect),
            "bulk_detect": self.bulk_detect,
            "floor": self.floor,
            "source": self.source,
            "from_memory": self.from_memory,
            "note": self.note,
            "calibrated_from": self.calibrated_from,
        }
        if self.kind in ("shear", "breathing"):
            d["chain_bulk_cm1"] = self.chain_bulk_cm1
            d["chain_bulk_err_cm1"] = self.chain_bulk_err_cm1
        elif self.kind != "presence":
            d.update(
                centers=list(self.centers),
                spreads=list(self.spreads),
                bulk_center=self.bulk_center,
                bulk_spread=self.bulk_spread,
            )
        return d

    @classmethod
    def from_dict(cls, d: dict) -> Rule:
        if not isinstance(d, dict) or "feature" not in d or "kind" not in d:
            raise InputError("a rule must be an object with at least 'feature' and 'kind'")
        name = str(d["feature"])
        known = {f for f in cls.__dataclass_fields__}
        unknown = set(d) - known
        if unknown:
            raise InputError(
                f"rule {name!r}: unknown keys {sorted(unknown)}; accepted: {sorted(known)}"
            )
        kw = dict(d)
        kw["modes"] = tuple(str(m) for m in d.get("modes", ()))
        kw["centers"] = _floats(d.get("centers", ()), f"{name}.centers", allow_none=True)
        kw["spreads"] = _floats(d.get("spreads", ()), f"{name}.spreads", allow_none=True)
        kw["detect"] = _floats(d.get("detect", ()), f"{name}.detect")
        for key in ("bulk_center", "bulk_spread", "chain_bulk_cm1", "chain_bulk_err_cm1"):
            if d.get(key) is not None:
                kw[key] = _floats([d[key]], f"{name}.{key}")[0]
        for key in ("bulk_detect", "floor"):
            if key in d:
                kw[key] = _floats([d[key]], f"{name}.{key}")[0]
        return cls(**kw)


@dataclass(frozen=True)
class RuleTable:
    """The rules of one material at one laser line, with the layer's mass constants."""

    material: str
    laser_nm: float
    rules: tuple[Rule, ...]
    formula_mass_u: float
    a_angstrom: float
    layer_spacing_nm: float
    constants_source: str = ""
    calibration_note: str = ""
    provenance: dict = field(default_factory=dict, compare=False)

    def rule(self, feature: str) -> Rule:
        for r in self.rules:
            if r.feature == feature:
                return r
        raise InputError(
            f"{self.material} at {self.laser_nm:g} nm has no rule {feature!r}; accepted: "
            f"{[r.feature for r in self.rules]}"
        )

    def rules_of(self, kind: str) -> tuple[Rule, ...]:
        return tuple(r for r in self.rules if r.kind == kind)

    @property
    def mass_per_area_kg_m2(self) -> float:
        return chain.mass_per_area(self.formula_mass_u, self.a_angstrom)

    def force_constant_n_m3(self, kind: str) -> float:
        """The chain force constant per area of the shear or breathing rule (N/m^3)."""
        (r,) = self.rules_of(kind) or (None,)
        if r is None:
            raise InputError(f"{self.material} has no {kind} rule")
        return chain.force_constant_n_m3(r.chain_bulk_cm1, self.mass_per_area_kg_m2)

    def to_dict(self) -> dict:
        return {
            "material": self.material,
            "laser_nm": self.laser_nm,
            "formula_mass_u": self.formula_mass_u,
            "a_angstrom": self.a_angstrom,
            "layer_spacing_nm": self.layer_spacing_nm,
            "constants_source": self.constants_source,
            "calibration_note": self.calibration_note,
            "rules": [r.to_dict() for r in self.rules],
        }

    def to_json(self) -> str:
        return json.dumps(self.to_dict(), indent=1)

    @classmethod
    def from_dict(cls, d: dict) -> RuleTable:
        try:
            return cls(
                material=str(d["material"]),
                laser_nm=float(d["laser_nm"]),
                rules=tuple(Rule.from_dict(r) for r in d["rules"]),
                formula_mass_u=float(d["formula_mass_u"]),
                a_angstrom=float(d["a_angstrom"]),
                layer_spacing_nm=float(d["layer_spacing_nm"]),
                constants_source=str(d.get("constants_source", "")),
                calibration_note=str(d.get("calibration_note", "")),
            )
        except (KeyError, TypeError) as exc:
            raise InputError(
                f"a rule table needs material, laser_nm, rules, formula_mass_u, a_angstrom and "
                f"layer_spacing_nm ({exc!s} missing or malformed)"
            ) from None

    @classmethod
    def from_json(cls, text: str) -> RuleTable:
        try:
            return cls.from_dict(json.loads(text))
        except json.JSONDecodeError as exc:
            raise InputError(
                f"a rule table must be JSON ({exc.msg} at line {exc.lineno})"
            ) from None


def available_lines(material: str) -> tuple[float, ...]:
    """Laser lines (nm) with a rule table for ``material``."""
    return tuple(float(k) for k in _material_file(material)["lines"])


def _material_file(material: str) -> dict:
    name = {m.lower(): m for m in MATERIALS}.get(str(material).lower())
    if name is None:
        raise InputError(f"no Raman/PL rules for material {material!r}; accepted: {MATERIALS}")
    with open(resource_path(f"raman_rules/{name}.json"), encoding="utf-8") as fh:
        return json.load(fh)


def load_rule_table(material: str, laser_nm: float = 532.0) -> RuleTable:
    """The published rule table of ``material`` at the laser line nearest ``laser_nm`` (within
    5 nm; resonance changes intensities and some positions, so no other line is substituted)."""
    data = _material_file(material)
    lines = {float(k): v for k, v in data["lines"].items()}
    best = min(lines, key=lambda x: abs(x - float(laser_nm)))
    if abs(best - float(laser_nm)) > LASER_TOLERANCE_NM:
        raise InputError(
            f"no {data['material']} rules for a {laser_nm:g} nm laser; accepted lines: "
            f"{sorted(lines)} nm (or calibrate a table from your own flakes of known N)"
        )
    entry = lines[best]
    return RuleTable(
        material=data["material"],
        laser_nm=best,
        rules=tuple(Rule.from_dict(r) for r in entry["rules"]),
        formula_mass_u=float(data["formula_mass_u"]),
        a_angstrom=float(data["a_angstrom"]),
        layer_spacing_nm=float(data["layer_spacing_nm"]),
        constants_source=str(data.get("constants_source", "")),
    )


@dataclass(frozen=True)
class KnownFlake:
    """One observation of a feature on a flake of known N (for :func:`calibrate_table`).

    ``value`` is in the rule's unit (a centre or separation in cm^-1, an energy in eV, a
    log10 ratio); ``error`` its standard error.
    """

    layers: int
    feature: str
    value: float
    error: float


def calibrate_table(table: RuleTable, flakes: Sequence[KnownFlake]) -> RuleTable:
    """A new table refitted from flakes of known N (the given table is not changed).

    Per feature: for ``shear``/``breathing`` the chain's bulk frequency is refitted
    (chain.fit_bulk_frequency; its error becomes the fit's). For tabulated features, each N
    with observations gets the Gaussian update of its centre (prior: the table's centre and
    spread; each flake: its error and the rule's ``floor``, the flake-to-flake scatter), and
    the new spread is sqrt(posterior variance + floor^2); N without observations are shifted by
    the mean offset of the observed ones and keep their spread. ``presence`` rules are kept.
    """
    by_feature: dict[str, list[KnownFlake]] = {}
    for f in flakes:
        if not isinstance(f, KnownFlake):
            raise InputError("calibration needs KnownFlake(layers, feature, value, error) items")
        if not (isinstance(f.layers, (int, np.integer)) and 1 <= f.layers <= MAX_N):
            raise InputError(f"a known flake's layer number must be 1..{MAX_N} (got {f.layers!r})")
        if not (math.isfinite(f.value) and math.isfinite(f.error) and f.error > 0):
            raise InputError(
                f"known flake {f.feature!r} at {f.layers}L: value must be finite and error > 0"
            )
        table.rule(f.feature)
        by_feature.setdefault(f.feature, []).append(f)
    if not by_feature:
        raise InputError("calibration needs at least one flake of known N")
    new_rules = []
    for r in table.rules:
        obs = by_feature.get(r.feature)
        if not obs:
            new_rules.append(r)
            continue
        if r.kind in ("shear", "breathing"):
            fit = chain.fit_bulk_frequency(
                r.kind, [o.layers for o in obs], [o.value for o in obs], [o.error for o in obs]
            )
            new_rules.append(
                replace(
                    r,
                    chain_bulk_cm1=fit.bulk_cm1,
                    chain_bulk_err_cm1=fit.bulk_err_cm1,
                    calibrated_from=len(obs),
                )
            )
            continue
        if r.kind == "presence":
            new_rules.append(r)
            continue
        k = max(len(r.centers), max(o.layers for o in obs))
        n_all = np.arange(1, k + 1)
        cen = r.center(n_all)
        spr = np.sqrt(np.maximum(r.spread(n_all) ** 2 - r.floor**2, 1e-12))
        new_c, new_s = cen.copy(), spr.copy()
        shifts, shift_w = [], []
        for n in sorted({o.layers for o in obs}):
            at = [o for o in obs if o.layers == n]
            v = np.array([o.error**2 + r.floor**2 for o in at])
            x = np.array([o.value for o in at])
            prec = 1.0 / spr[n - 1] ** 2 + np.sum(1.0 / v)
            mean = (cen[n - 1] / spr[n - 1] ** 2 + np.sum(x / v)) / prec
            shifts.append(mean - cen[n - 1])
            shift_w.append(prec)
            new_c[n - 1], new_s[n - 1] = mean, math.sqrt(1.0 / prec)
        observed = {o.layers for o in obs}
        shift = float(np.average(shifts, weights=shift_w))
        for n in n_all:
            if n not in observed:
                new_c[n - 1] = cen[n - 1] + shift
        new_rules.append(
            replace(
                r,
                centers=tuple(float(c) for c in new_c),
                spreads=tuple(float(s) for s in new_s),
                bulk_center=float(r.bulk_center + shift),
                calibrated_from=len(obs),
            )
        )
    note = f"calibrated on {len(flakes)} observations of flakes of known N"
    return replace(table, rules=tuple(new_rules), calibration_note=note)
