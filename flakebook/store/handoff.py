"""Hand-off to analyses done outside flakebook: a JSON bundle of chosen flakes out, a CSV of
their results (thermal conductivity with its interval) back in.

The CSV's columns are ``flake_id, kappa_w_mk, kappa_p16_w_mk, kappa_p84_w_mk, method, note``
(INTERFACE.md); every row is checked before anything is stored.
"""

from __future__ import annotations

import csv
import math
import os
from collections.abc import Iterable
from pathlib import Path
from typing import Any

import flakebook
from flakebook.errors import InputError
from flakebook.store._util import RecordRef, id_of
from flakebook.store.records import ExternalResult, Flake, Sample, layer_spacing_nm, record_to_dict


class Handoff:
    """Bundles out and results in (a mixin of :class:`~flakebook.store.project.Project`).

    Relies on the project core (``_path``, ``transaction``, ``get``, ``add``) and on
    :class:`~flakebook.store.kinds.RecordKinds` (``find_flake``, ``latest_assignment``,
    ``thermometry_of``, ``holes_covered_by``, ``spectra_of``).
    """

    def handoff_bundle(self, flakes: Iterable[RecordRef | str]) -> dict[str, Any]:
        """A JSON-able bundle of flakes for an outside analysis: each flake with its sample
        (substrate, hole pattern), latest assignment, covered holes, spectra (with data),
        thermometry series and results."""
        out = []
        for key in flakes:
            flake = self.find_flake(key) if isinstance(key, str) else self.get(Flake, id_of(key))
            sample = self.get(Sample, flake.sample_id)
            asg = self.latest_assignment(flake)
            series, results = self.thermometry_of(flake)
            out.append(
                {
                    "flake_id": flake.label,
                    "sample": sample.name,
                    "material": sample.material,
                    "substrate": [layer.to_dict() for layer in sample.substrate],
                    "hole_pattern": None
                    if sample.hole_pattern is None
                    else sample.hole_pattern.to_dict(),
                    "layers": None if asg is None else asg.layers,
                    "probability": None if asg is None else asg.probability,
                    "layer_spacing_nm": layer_spacing_nm(sample.material),
                    "holes": [
                        {
                            "hole_id": hole.id,
                            "radius_um": hole.radius_um,
                            "radius_err_um": hole.radius_err_um,
                            "fully_covered": link.fully_covered,
                            "covered_fraction": link.covered_fraction,
                            "margin_um": link.margin_um,
                        }
                        for link, hole in self.holes_covered_by(flake)
                    ],
                    "thickness_nm": None
                    if asg is None or layer_spacing_nm(sample.material) is None
                    else round(asg.layers * layer_spacing_nm(sample.material), 6),
                    "thermometry": _thermometry_summary(self, series, results),
                    "spectra": [record_to_dict(s) for s in self.spectra_of(flake)],
                    "thermometry_series": [record_to_dict(s) for s in series],
                    "thermometry_results": [record_to_dict(r) for r in results],
                }
            )
        return {
            "format": "flakebook-handoff",
            "format_version": 1,
            "flakebook_version": flakebook.__version__,
            "project": self._path.name,
            "flakes": out,
        }

    def import_external_results(self, csv_file: str | os.PathLike) -> list[ExternalResult]:
        """Import a hand-off CSV (columns ``flake_id, kappa_w_mk, kappa_p16_w_mk,
        kappa_p84_w_mk, method, note``). Every row is checked first; one bad row imports
        nothing and raises :class:`InputError` naming the row."""
        rows = _read_handoff_csv(Path(csv_file))
        pending = []
        for lineno, row in rows:
            try:
                flake = self.find_flake(row["flake_id"])
            except InputError:
                raise InputError(
                    f"{csv_file} line {lineno}: no flake {row['flake_id']!r} in {self._path.name}; "
                    "nothing was imported"
                ) from None
            try:
                rec = ExternalResult(
                    flake_id=flake.id,
                    kappa_w_mk=row["kappa_w_mk"],
                    kappa_p16_w_mk=row["kappa_p16_w_mk"],
                    kappa_p84_w_mk=row["kappa_p84_w_mk"],
                    method=row["method"],
                    note=row["note"],
                    source_file=Path(csv_file).name,
                )
            except InputError as exc:
                raise InputError(f"{csv_file} line {lineno}: {exc}; nothing was imported") from None
            k, lo, hi = rec.kappa_w_mk, rec.kappa_p16_w_mk, rec.kappa_p84_w_mk
            if k is not None and ((lo is not None and lo > k) or (hi is not None and hi < k)):
                raise InputError(
                    f"{csv_file} line {lineno}: kappa_p16_w_mk <= kappa_w_mk <= kappa_p84_w_mk "
                    f"does not hold ({lo}, {k}, {hi}); accepted: an ordered interval; nothing "
                    "was imported"
                )
            pending.append(rec)
        with self.transaction():
            return [self.add(rec) for rec in pending]


def _thermometry_summary(project, series, results) -> dict[str, Any]:
    """What an outside heat-transport analysis needs, from the stored records: the absorptance
    at the laser line (with its error), the beam radius W, and each series' fitted mode centres
    with their stage temperatures or powers and acquisition metadata."""
    kappa = [r for r in results if r.kappa_w_mk is not None]
    coeff = [r for r in results if r.kappa_w_mk is None and r.details.get("series")]
    out: dict[str, Any] = {
        "laser_nm": None,
        "absorptance": None,
        "absorptance_err": None,
        "beam_radius_um": None,
        "beam_radius_err_um": None,
        "beam_method": None,
        "chi_t_cm1_per_k": None,
        "chi_t_err_cm1_per_k": None,
        "chi_p_cm1_per_mw": None,
        "chi_p_err_cm1_per_mw": None,
        "chi_covariance": None,
        "series": [],
    }
    if kappa:
        k = kappa[-1]
        inp = k.details.get("inputs", {})
        out.update(
            laser_nm=inp.get("laser_nm"),
            absorptance=k.absorptance,
            absorptance_err=k.absorptance_err,
            beam_radius_um=inp.get("beam_radius_um"),
            beam_radius_err_um=inp.get("beam_radius_err_um"),
            beam_method=inp.get("beam_method"),
        )
    if coeff:
        c = coeff[-1]
        out.update(
            chi_t_cm1_per_k=c.chi_t_cm1_per_k,
            chi_t_err_cm1_per_k=c.chi_t_err_cm1_per_k,
            chi_p_cm1_per_mw=c.chi_p_cm1_per_mw,
            chi_p_err_cm1_per_mw=c.chi_p_err_cm1_per_mw,
            chi_covariance=c.details.get("covariance"),
        )
        fitted = c.details["series"]
    else:
        fitted = {}
    for s in series:
        spectra = project.spectra_of_series(s)
        by_id = {}
        f = fitted.get(s.kind)
        if f is not None and f.get("series_id") == s.id:
            by_id = {p["spectrum_id"]: p for p in f["points"]}
        out["series"].append(
            {
                "series_id": s.id,
                "kind": s.kind,
                "mode": (f or {}).get("mode") or s.mode,
                "laser_nm": s.laser_nm,
                "notes": s.notes,
                "points": [
                    {
                        "spectrum_id": sp.id,
                        "stage_temperature_k": sp.stage_temperature_k,
                        "power_mw": sp.power_mw,
                        "integration_s": sp.integration_s,
                        "source_path": sp.source_path,
                        "metadata": dict(sp.metadata),
                        "center_cm1": by_id.get(sp.id, {}).get("center_cm1"),
                        "center_err_cm1": by_id.get(sp.id, {}).get("center_err_cm1"),
                        "fwhm_cm1": by_id.get(sp.id, {}).get("fwhm_cm1"),
                    }
                    for sp in spectra
                ],
            }
        )
    return out


#: Above this a "thermal conductivity" is a mistake (diamond is about 2e3 W/mK).
KAPPA_LIMIT_W_MK = 1e4
_HANDOFF_COLUMNS = ("flake_id", "kappa_w_mk", "kappa_p16_w_mk", "kappa_p84_w_mk", "method", "note")


def _read_handoff_csv(path: Path) -> list[tuple[int, dict[str, Any]]]:
    accepted = f"accepted: a CSV with the columns {', '.join(_HANDOFF_COLUMNS)}"
    try:
        text = path.read_text(encoding="utf-8-sig")
    except OSError as exc:
        raise InputError(f"{path} cannot be read: {exc.strerror}") from None
    except UnicodeDecodeError:
        raise InputError(f"{path} is not UTF-8 text; {accepted}") from None
    reader = csv.DictReader(text.splitlines())
    header = [h.strip() for h in (reader.fieldnames or [])]
    missing = [c for c in _HANDOFF_COLUMNS if c not in header]
    if missing:
        raise InputError(f"{path} lacks the column(s) {', '.join(missing)}; {accepted}")
    out = []
    for lineno, raw in enumerate(reader, start=2):
        row = {(k or "").strip(): (v or "").strip() for k, v in raw.items() if k is not None}
        if None in raw:
            raise InputError(f"{path} line {lineno} has more cells than columns; {accepted}")
        if not any(row.values()):
            continue
        if not row["flake_id"]:
            raise InputError(f"{path} line {lineno} has no flake_id; nothing was imported")
        parsed: dict[str, Any] = {
            "flake_id": row["flake_id"],
            "method": row["method"],
            "note": row["note"],
        }
        for col in ("kappa_w_mk", "kappa_p16_w_mk", "kappa_p84_w_mk"):
            cell = row[col]
            if cell == "":
                parsed[col] = None
                continue
            try:
                value = float(cell)
            except ValueError:
                raise InputError(
                    f"{path} line {lineno}: {col} {cell!r} is not a number (W/mK); "
                    "nothing was imported"
                ) from None
            if not (math.isfinite(value) and 0 < value < KAPPA_LIMIT_W_MK):
                raise InputError(
                    f"{path} line {lineno}: {col} {cell} is not a thermal conductivity; accepted: "
                    f"a finite number above 0 and below {KAPPA_LIMIT_W_MK:g} W/mK; nothing was "
                    "imported"
                )
            parsed[col] = value
        out.append((lineno, parsed))
    if not out:
        raise InputError(f"{path} has no result rows; {accepted}")
    return out
