"""Hand-off to analyses done outside flakebook: a JSON bundle of chosen flakes out, a CSV of
their results (thermal conductivity with its interval) back in.

The CSV's columns are ``flake_id, kappa_w_mk, kappa_p16_w_mk, kappa_p84_w_mk, method, note``
(INTERFACE.md); every row is checked before anything is stored.
"""

from __future__ import annotations

import csv
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
                    "spectra": [record_to_dict(s) for s in self.spectra_of(flake)],
                    "thermometry_series": [record_to_dict(s) for s in series],
                    "thermometry_results": [record_to_dict(r) for r in results],
                }
            )
        return {
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
                    "does not hold; nothing was imported"
                )
            pending.append(rec)
        with self.transaction():
            return [self.add(rec) for rec in pending]


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
                parsed[col] = float(cell)
            except ValueError:
                raise InputError(
                    f"{path} line {lineno}: {col} {cell!r} is not a number (W/mK); "
                    "nothing was imported"
                ) from None
        out.append((lineno, parsed))
    if not out:
        raise InputError(f"{path} has no result rows; {accepted}")
    return out
