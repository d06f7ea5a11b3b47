"""Reading a thermometry series from disk: which spectrum was taken at which temperature or power.

A folder of spectra with a small CSV (columns ``file`` and ``stage_temperature_k`` or
``power_mw``), the CSV itself, or a folder whose spectra carry the value in their headers. Pure
file reading and checks (no project); :mod:`flakebook.pipeline_thermal` stores what it finds.
"""

from __future__ import annotations

import csv
import math
from dataclasses import dataclass
from pathlib import Path

from flakebook.errors import InputError

VALUE_COLUMN = {
    "temperature": "stage_temperature_k",
    "power": "power_mw",
    "supported-power": "power_mw",
}
_SPECTRUM_SUFFIXES = (".csv", ".txt", ".dat", ".tsv", ".dx", ".jdx", ".asc")


@dataclass(frozen=True)
class SeriesFile:
    """One spectrum of a series: its file and the stage temperature (K) or power (mW)."""

    path: Path
    value: float
    order: int


def _value_from_metadata(meta: dict, kind: str) -> float | None:
    keys = (
        ("stage_temperature_k", "temperature_k", "stage temperature", "temperature")
        if kind == "temperature"
        else ("power_mw", "laser_power_mw", "power at sample", "power")
    )
    lower = {str(k).lower(): v for k, v in meta.items()}
    for key in keys:
        v = lower.get(key)
        if v is None:
            continue
        try:
            return float(str(v).split()[0].replace(",", "."))
        except ValueError:
            continue
    return None


def series_files(source: str | Path, kind: str) -> list[SeriesFile]:
    """The spectra of a series and their values: ``source`` is a CSV with the columns ``file``
    and ``stage_temperature_k`` (temperature) or ``power_mw`` (power), files relative to the
    CSV; or a folder holding such a CSV; or a folder of spectra whose headers give the values."""
    if kind not in VALUE_COLUMN:
        raise InputError(f"series kind {kind!r} is not known; accepted: temperature, power")
    column = VALUE_COLUMN[kind]
    source = Path(source)
    if not source.exists():
        raise InputError(f"{source}: no such file or folder; accepted: a folder or a CSV")
    table = source
    if source.is_dir():
        tables = []
        for p in sorted(source.glob("*.csv")):
            head = p.read_text(encoding="utf-8-sig", errors="replace").splitlines()[:1]
            if head and "file" in [h.strip() for h in head[0].split(",")]:
                tables.append(p)
        if len(tables) > 1:
            raise InputError(
                f"{source} holds several series tables ({', '.join(t.name for t in tables)}); "
                "accepted: one, or give the CSV itself"
            )
        table = tables[0] if tables else None
    if table is None:
        return _files_from_metadata(source, kind)
    try:
        text = table.read_text(encoding="utf-8-sig")
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"{table} cannot be read as UTF-8 text ({exc})") from None
    reader = csv.DictReader(text.splitlines())
    header = [h.strip() for h in (reader.fieldnames or [])]
    if "file" not in header or column not in header:
        raise InputError(
            f"{table} lacks the column(s) {', '.join(c for c in ('file', column) if c not in header)}"
            f"; accepted: a CSV with the columns file and {column}"
        )
    out = []
    for lineno, raw in enumerate(reader, start=2):
        row = {(k or "").strip(): (v or "").strip() for k, v in raw.items() if k}
        if not any(row.values()):
            continue
        try:
            value = float(row[column])
        except ValueError:
            raise InputError(
                f"{table} line {lineno}: {column} {row[column]!r} is not a number; accepted: "
                + ("kelvin" if kind == "temperature" else "mW at the sample")
            ) from None
        path = table.parent / row["file"]
        if not path.is_file():
            raise InputError(f"{table} line {lineno}: the spectrum {row['file']!r} is not there")
        out.append(SeriesFile(path, value, len(out)))
    return _checked(out, table, kind)


def _files_from_metadata(folder: Path, kind: str) -> list[SeriesFile]:
    from flakebook.spectra.io import read_spectrum

    out = []
    for p in sorted(folder.iterdir()):
        if p.suffix.lower() not in _SPECTRUM_SUFFIXES or not p.is_file():
            continue
        value = _value_from_metadata(dict(read_spectrum(p).metadata), kind)
        if value is None:
            raise InputError(
                f"{p} does not state its {VALUE_COLUMN[kind]}; accepted: a CSV with the columns "
                f"file and {VALUE_COLUMN[kind]} beside the spectra"
            )
        out.append(SeriesFile(p, value, len(out)))
    return _checked(out, folder, kind)


def _checked(files: list[SeriesFile], where: Path, kind: str) -> list[SeriesFile]:
    if len(files) < 2:
        raise InputError(
            f"{where}: a {kind} series of {len(files)} spectrum(s) gives no slope; accepted: at "
            "least 3 spectra (5 or more advised)"
        )
    for f in files:
        bad = f.value <= 0 if kind == "temperature" else f.value < 0
        if not math.isfinite(f.value) or bad:
            raise InputError(
                f"{f.path.name}: {VALUE_COLUMN[kind]} {f.value!r} is not usable; accepted: "
                + ("a temperature above 0 K" if kind == "temperature" else "a power >= 0 mW")
            )
    return files
