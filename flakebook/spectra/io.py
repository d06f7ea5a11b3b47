"""Reading spectra: two-column and multi-column text, JCAMP-DX, and flakebook's spectrum-map text.

Every reader returns a frozen dataclass whose arrays are read-only copies, with the x axis
ascending. Bad input raises :class:`~flakebook.errors.InputError` naming the file, what is wrong
and what is accepted: NaNs, a non-monotonic axis, one-point spectra, saturated detector counts,
an unreadable file, and x values that look like another unit than the one stated.

Text spectra (``read_spectrum``, ``read_spectra``)
    Columns separated by a comma, tab, semicolon or whitespace; decimal commas are read where the
    separator is not a comma (``520,7;1234`` or ``520,7<TAB>1234``). Lines before the data are
    header lines: ``key: value`` and ``key = value`` pairs go into ``metadata`` (a laser line
    such as ``Laser wavelength: 532 nm`` also as ``metadata["laser_nm"]``, an exposure such as
    ``Exposure (s) = 10`` as ``metadata["exposure_s"]``); the header line just above the data,
    when it has one name per column, names the columns (and may state the x unit:
    ``Raman shift (cm-1)``, ``Wavelength (nm)``, ``Energy (eV)``). Lines starting with ``#``,
    ``%`` or ``//`` are comments anywhere; their ``key: value`` pairs count as header lines.

Spectrum maps (``read_map``): flakebook's own text format, documented in
docs/spectrum-map-format.md and here::

    # any number of header lines (``key: value``), as for text spectra
    #flakebook-map x_unit=cm1 kind=raman
    spectral_axis  <s1> <s2> ... <sM>
    <x_um> <y_um> <I1> <I2> ... <IM>
    ...

The ``#flakebook-map`` line starts the map (``x_unit`` one of cm1, nm, ev, wavenumber-cm1;
``kind`` raman or pl; both optional, defaults cm1 and raman). The next line begins with the word
``spectral_axis`` and gives the M spectral axis values. Every following line is one spectrum:
the stage position x and y in micrometres, then its M intensities. Separators as for text
spectra (whitespace, tab, comma or semicolon; one kind throughout). The positions must form a
complete rectangular grid (every x with every y, any order); the spectra are returned as an
array ``[row, col, point]`` with rows along y and columns along x, both ascending.
"""

from __future__ import annotations

import contextlib
import io as _io
import re
from dataclasses import dataclass, field
from pathlib import Path
from types import MappingProxyType
from typing import Any

import numpy as np

from flakebook.errors import InputError

__all__ = [
    "X_UNITS",
    "KINDS",
    "Spectrum",
    "SpectrumSet",
    "SpectrumMap",
    "check_spectrum",
    "parse_table",
    "read_spectrum",
    "read_spectra",
    "read_jcamp",
    "read_map",
]

X_UNITS = ("cm1", "nm", "ev", "wavenumber-cm1")
KINDS = ("raman", "pl")
_COMMENT = ("#", "%", "//")
_MAP_TAG = "#flakebook-map"


def _frozen(a: np.ndarray) -> np.ndarray:
    a = np.array(a, dtype=float, copy=True)
    a.setflags(write=False)
    return a


@dataclass(frozen=True)
class Spectrum:
    """One spectrum: ``x`` ascending in ``x_unit`` (cm1, nm, ev, wavenumber-cm1), ``y`` counts."""

    x: np.ndarray
    y: np.ndarray
    x_unit: str = "cm1"
    kind: str = "raman"
    metadata: MappingProxyType = field(default_factory=lambda: MappingProxyType({}))

    def __post_init__(self) -> None:
        object.__setattr__(self, "x", _frozen(self.x))
        object.__setattr__(self, "y", _frozen(self.y))
        object.__setattr__(self, "metadata", MappingProxyType(dict(self.metadata)))


@dataclass(frozen=True)
class SpectrumSet:
    """Several spectra on one axis: ``y[i]`` is spectrum ``names[i]`` on ``x`` (ascending)."""

    x: np.ndarray
    y: np.ndarray
    names: tuple[str, ...]
    x_unit: str = "cm1"
    kind: str = "raman"
    metadata: MappingProxyType = field(default_factory=lambda: MappingProxyType({}))

    def __post_init__(self) -> None:
        object.__setattr__(self, "x", _frozen(self.x))
        object.__setattr__(self, "y", _frozen(np.atleast_2d(self.y)))
        object.__setattr__(self, "names", tuple(self.names))
        object.__setattr__(self, "metadata", MappingProxyType(dict(self.metadata)))

    def __len__(self) -> int:
        return self.y.shape[0]

    def spectrum(self, i: int) -> Spectrum:
        """The ``i``-th spectrum as a :class:`Spectrum` (its name in ``metadata["name"]``)."""
        meta = dict(self.metadata, name=self.names[i])
        return Spectrum(self.x, self.y[i], self.x_unit, self.kind, meta)


@dataclass(frozen=True)
class SpectrumMap:
    """A map: ``spectra[row, col, :]`` on ``x``; rows at ``y_um``, columns at ``x_um`` (stage)."""

    x: np.ndarray
    spectra: np.ndarray
    x_um: np.ndarray
    y_um: np.ndarray
    x_unit: str = "cm1"
    kind: str = "raman"
    metadata: MappingProxyType = field(default_factory=lambda: MappingProxyType({}))

    def __post_init__(self) -> None:
        for name in ("x", "spectra", "x_um", "y_um"):
            object.__setattr__(self, name, _frozen(getattr(self, name)))
        object.__setattr__(self, "metadata", MappingProxyType(dict(self.metadata)))

    @property
    def shape(self) -> tuple[int, int]:
        """(rows, columns) of the map."""
        return self.spectra.shape[:2]


# ---------------------------------------------------------------------------------------------
# validation


def _runs_at(y: np.ndarray, level: float, tol: float) -> int:
    """Length of the longest run of consecutive points within ``tol`` of ``level``."""
    hit = np.abs(y - level) <= tol
    if not hit.any():
        return 0
    edges = np.diff(np.concatenate(([0], hit.astype(np.int8), [0])))
    starts, ends = np.flatnonzero(edges == 1), np.flatnonzero(edges == -1)
    return int((ends - starts).max())


def check_spectrum(
    x: np.ndarray,
    y: np.ndarray,
    *,
    source: str = "spectrum",
    kind: str = "raman",
    x_unit: str = "cm1",
    laser_nm: float | None = None,
    detector_limit: float | None = None,
    saturation_run: int = 3,
    unit_stated: bool = False,
) -> tuple[np.ndarray, np.ndarray]:
    """Check one spectrum and return ``(x, y)`` as new arrays with x ascending.

    ``y`` may be 2-D (spectra along the first axis, points along the last). Raises InputError
    for: NaN or infinite values; fewer than 2 points; an x axis that is not strictly monotonic
    (a descending axis is reordered, not refused); saturated counts, that is any value at or
    above ``detector_limit`` (such as 65535 for a 16-bit detector) or a flat run of at least
    ``saturation_run`` consecutive points at the spectrum's maximum; a Raman axis stated (or
    taken by default) as cm^-1 whose values look like a wavelength in nm. The last check is a
    plausibility test, skipped when ``unit_stated`` is true (the user gave the unit): x values
    all within the Stokes side of ``laser_nm`` (laser_nm .. 1.6 laser_nm, or 300-1100 without a
    laser line) sampled finer than 0.1 per point, which no common Raman spectrometer does in cm^-1.
    """
    if kind not in KINDS:
        raise InputError(f"{source}: kind {kind!r} is not known; accepted: {', '.join(KINDS)}")
    if x_unit not in X_UNITS:
        raise InputError(
            f"{source}: x unit {x_unit!r} is not known; accepted: {', '.join(X_UNITS)}"
        )
    x = np.array(x, dtype=float)
    y = np.array(y, dtype=float)
    if x.ndim != 1 or y.shape[-1] != x.size:
        raise InputError(
            f"{source}: x has {x.size} values but the spectrum has {y.shape[-1]}; "
            "accepted: one intensity per x value"
        )
    if x.size < 2:
        raise InputError(
            f"{source}: the spectrum has {x.size} point(s); accepted: at least 2 points "
            "(a fit needs many more)"
        )
    for name, arr in (("x", x), ("intensity", y)):
        bad = ~np.isfinite(arr)
        if bad.any():
            where = np.argwhere(bad)[0]
            raise InputError(
                f"{source}: {int(bad.sum())} {name} value(s) are NaN or infinite (first at point "
                f"{int(where[-1]) + 1}); accepted: finite numbers only (remove or fill those points)"
            )
    dx = np.diff(x)
    if np.all(dx < 0):
        x, y = x[::-1], y[..., ::-1]
        dx = -dx[::-1]
    if not np.all(dx > 0):
        i = int(np.flatnonzero(dx <= 0)[0])
        raise InputError(
            f"{source}: the x axis is not monotonic (x[{i + 1}] = {x[i]:g}, x[{i + 2}] = "
            f"{x[i + 1]:g}); accepted: strictly increasing or strictly decreasing x"
        )
    flat = y.reshape(-1, x.size)
    for j, row in enumerate(flat):
        label = source if flat.shape[0] == 1 else f"{source} (spectrum {j + 1})"
        if detector_limit is not None and np.any(row >= detector_limit):
            n = int(np.sum(row >= detector_limit))
            raise InputError(
                f"{label}: {n} point(s) reach the detector limit {detector_limit:g}: the detector "
                "saturated; accepted: counts below the limit (shorter exposure or lower power)"
            )
        peak = float(row.max())
        tol = 1e-9 * max(abs(peak), 1.0)
        if peak > 0 and saturation_run > 1 and _runs_at(row, peak, tol) >= saturation_run:
            raise InputError(
                f"{label}: {_runs_at(row, peak, tol)} consecutive points sit flat at the maximum "
                f"{peak:g}: the detector saturated; accepted: spectra whose top is not clipped "
                "(shorter exposure or lower power)"
            )
    if kind == "raman" and x_unit == "cm1" and not unit_stated:
        lo, hi = (laser_nm, 1.6 * laser_nm) if laser_nm else (300.0, 1100.0)
        step = float(np.median(dx))
        if x[0] > lo and x[-1] < hi and step < 0.1:
            raise InputError(
                f"{source}: a Raman shift axis from {x[0]:g} to {x[-1]:g} cm^-1 sampled every "
                f"{step:.3g} looks like a wavelength in nm; give --x-unit nm with --laser-nm "
                "(accepted units: cm1, nm, ev, wavenumber-cm1)"
            )
    return x, y


# ---------------------------------------------------------------------------------------------
# text parsing

_NUM = re.compile(r"^[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?$|^[+-]?(nan|inf|infinity)$", re.I)


def _split(line: str, delim: str | None) -> list[str]:
    if delim is None:
        return line.split()
    return [t.strip() for t in line.split(delim)]


def _numbers(tokens: list[str], decimal_comma: bool) -> list[float] | None:
    out = []
    for t in tokens:
        if decimal_comma:
            t = t.replace(",", ".")
        if not _NUM.match(t):
            return None
        out.append(float(t))
    return out


def _guess_format(line: str) -> tuple[str | None, bool] | None:
    """Separator and decimal comma of a data line, or None when it is not all numbers."""
    candidates: list[tuple[str | None, bool]] = []
    if ";" in line:
        candidates.append((";", True))
    if "\t" in line:
        candidates += [("\t", True), ("\t", False)]
    if "," in line:
        toks = line.split()
        if len(toks) > 1 and all("," in t for t in toks):
            candidates.append((None, True))
        candidates.append((",", False))
    candidates.append((None, False))
    for delim, dec in candidates:
        toks = [t for t in _split(line, delim) if t != ""] if delim is None else _split(line, delim)
        if delim is not None and toks and toks[-1] == "":
            toks = toks[:-1]  # a trailing separator
        vals = _numbers(toks, dec)
        if vals is not None and len(vals) >= 1:
            return delim, dec
    return None


def _header_pair(line: str) -> tuple[str, str] | None:
    m = re.match(r"^\s*([^:=]+?)\s*[:=]\s*(.+?)\s*$", line)
    if not m:
        return None
    return m.group(1).strip(), m.group(2).strip()


def _metadata(pairs: dict[str, str]) -> dict[str, Any]:
    meta: dict[str, Any] = dict(pairs)
    for key, value in pairs.items():
        k = key.lower()
        num = re.search(r"[-+]?\d+(?:[.,]\d+)?(?:[eE][-+]?\d+)?", value)
        if num is None:
            continue
        v = float(num.group(0).replace(",", "."))
        if "laser" in k or "excitation" in k:
            if "power" in k:
                if "mw" in (k + value).lower():
                    meta.setdefault("laser_power_mw", v)
            elif "nm" in (k + value).lower() or 200 < v < 2000:
                meta.setdefault("laser_nm", v)
        elif "exposure" in k or "integration" in k or "acquisition time" in k:
            scale = 1e-3 if re.search(r"\bms\b|\(ms\)", (k + " " + value).lower()) else 1.0
            meta.setdefault("exposure_s", v * scale)
        elif "accumulation" in k:
            meta.setdefault("accumulations", v)
    return meta


def unit_from_label(label: str) -> str | None:
    """The x unit a column label states (cm1, nm, ev, wavenumber-cm1), or None."""
    s = label.lower().replace(" ", "")
    if "shift" in s or "raman" in s:
        return "cm1"
    if "cm-1" in s or "cm^-1" in s or "1/cm" in s or "cm⁻¹" in s or "wavenumber" in s:
        return "wavenumber-cm1" if ("absolute" in s or "abs" in s) else "cm1"
    if "ev" in s or "energy" in s:
        return "ev"
    if "nm" in s or "wavelength" in s or "lambda" in s:
        return "nm"
    return None


@dataclass(frozen=True)
class _Table:
    data: np.ndarray  # (rows, columns)
    names: tuple[str, ...] | None
    meta: dict[str, Any]
    first_data_line: int


def parse_table(text: str, source: str = "text") -> _Table:
    """Numbers, column names and header metadata of a delimited text table (see module doc)."""
    lines = text.splitlines()
    pairs: dict[str, str] = {}
    last_header: str | None = None
    fmt = None
    rows: list[list[float]] = []
    start = -1
    for i, raw in enumerate(lines):
        line = raw.strip().lstrip("\ufeff")
        if not line:
            continue
        if line.startswith(_COMMENT):
            pair = _header_pair(line.lstrip("#%/ "))
            if pair:
                pairs.setdefault(*pair)
            continue
        if fmt is None:
            guess = _guess_format(line)
            if guess is None:
                pair = _header_pair(line)
                if pair:
                    pairs.setdefault(*pair)
                last_header = line
                continue
            fmt, start = guess, i
        toks = _split(line, fmt[0])
        if fmt[0] is not None and toks and toks[-1] == "":
            toks = toks[:-1]
        vals = _numbers(toks, fmt[1])
        if vals is None:
            raise InputError(
                f"{source}, line {i + 1}: {raw.strip()[:40]!r} is not a row of numbers; accepted: "
                "header lines before the data, then one row of numbers per line"
            )
        if rows and len(vals) != len(rows[0]):
            raise InputError(
                f"{source}, line {i + 1}: {len(vals)} column(s) where the data above have "
                f"{len(rows[0])}; accepted: the same number of columns on every data line"
            )
        rows.append(vals)
    if not rows:
        raise InputError(
            f"{source}: no rows of numbers found; accepted: text with an x column and one or more "
            "intensity columns (comma, tab, semicolon or whitespace separated)"
        )
    names = None
    if last_header is not None and fmt is not None:
        toks = [t.strip().strip('"') for t in _split(last_header, fmt[0])]
        if fmt[0] is None and len(toks) != len(rows[0]):
            toks = [t.strip().strip('"') for t in re.split(r"[,;\t]", last_header)]
        if len(toks) == len(rows[0]):
            names = tuple(toks)
    return _Table(np.array(rows, dtype=float), names, _metadata(pairs), start)


def _read_text(path: str | Path) -> tuple[str, str]:
    p = Path(path)
    try:
        raw = p.read_bytes()
    except OSError as exc:
        raise InputError(
            f"{p}: cannot be read ({exc.strerror or exc}); accepted: a readable text file"
        ) from None
    if b"\x00" in raw[:4096]:
        raise InputError(
            f"{p}: looks like a binary file; accepted: text spectra (CSV, tab, semicolon or "
            "whitespace separated), JCAMP-DX (.jdx, .dx) or flakebook map text"
        )
    for enc in ("utf-8", "latin-1"):
        try:
            return raw.decode(enc), str(p)
        except UnicodeDecodeError:
            continue
    raise AssertionError("latin-1 decodes every byte string")


def _resolve_unit(
    x_unit: str | None, label_unit: str | None, kind: str, source: str
) -> tuple[str, bool]:
    if x_unit is not None and x_unit not in X_UNITS:
        raise InputError(
            f"{source}: x unit {x_unit!r} is not known; accepted: {', '.join(X_UNITS)}"
        )
    if x_unit is not None and label_unit is not None and x_unit != label_unit:
        raise InputError(
            f"{source}: the x column is labelled in {label_unit} but {x_unit} was given; "
            f"accepted: the file's own unit ({label_unit}) or a file whose label matches"
        )
    if x_unit is not None:
        return x_unit, True
    if label_unit is not None:
        if kind == "raman" and label_unit in ("nm", "ev"):
            raise InputError(
                f"{source}: a Raman spectrum whose x column is labelled in {label_unit}; give "
                "--x-unit nm (or ev) with --laser-nm to convert it to a Raman shift"
            )
        return label_unit, True
    return ("cm1" if kind == "raman" else "nm"), False


def read_spectra(
    path: str | Path,
    *,
    kind: str = "raman",
    x_unit: str | None = None,
    detector_limit: float | None = None,
    laser_nm: float | None = None,
) -> SpectrumSet:
    """Read a text file of one x column followed by one or more intensity columns.

    ``x_unit`` None takes the unit from the x column's label if it states one, else cm1 for
    Raman and nm for PL. ``laser_nm`` None takes it from the header when present. Names come
    from the column header line, else ``"1"``, ``"2"``, ...
    """
    text, source = _read_text(path)
    table = parse_table(text, source)
    if table.data.shape[1] < 2:
        raise InputError(
            f"{source}: only one column of numbers; accepted: an x column followed by one or "
            "more intensity columns"
        )
    label_unit = unit_from_label(table.names[0]) if table.names else None
    unit, stated = _resolve_unit(x_unit, label_unit, kind, source)
    laser = laser_nm if laser_nm is not None else table.meta.get("laser_nm")
    x, y = check_spectrum(
        table.data[:, 0],
        table.data[:, 1:].T,
        source=source,
        kind=kind,
        x_unit=unit,
        laser_nm=laser,
        detector_limit=detector_limit,
        unit_stated=stated,
    )
    n = y.shape[0]
    names = table.names[1:] if table.names else tuple(str(i + 1) for i in range(n))
    meta = dict(table.meta, source=source)
    if laser is not None:
        meta["laser_nm"] = float(laser)
    return SpectrumSet(x, y, names, unit, kind, meta)


def read_spectrum(
    path: str | Path,
    *,
    kind: str = "raman",
    x_unit: str | None = None,
    detector_limit: float | None = None,
    laser_nm: float | None = None,
) -> Spectrum:
    """Read a two-column text spectrum (x, intensity); see :func:`read_spectra` for the options.

    A JCAMP-DX file (its first label ``##TITLE=``) is passed to :func:`read_jcamp`. A file
    with several intensity columns is refused here (use :func:`read_spectra`).
    """
    text, source = _read_text(path)
    if text.lstrip().upper().startswith("##TITLE"):
        return read_jcamp(path, kind=kind, x_unit=x_unit, detector_limit=detector_limit)
    spectra = read_spectra(
        path, kind=kind, x_unit=x_unit, detector_limit=detector_limit, laser_nm=laser_nm
    )
    if len(spectra) != 1:
        raise InputError(
            f"{source}: {len(spectra)} intensity columns; accepted here: one (x, intensity); "
            "read several spectra with read_spectra"
        )
    s = spectra.spectrum(0)
    meta = dict(s.metadata)
    meta.pop("name", None)
    return Spectrum(s.x, s.y, s.x_unit, s.kind, meta)


_JCAMP_UNITS = {
    "1/cm": "cm1",
    "cm-1": "cm1",
    "cm^-1": "cm1",
    "raman shift": "cm1",
    "nanometers": "nm",
    "nm": "nm",
    "ev": "ev",
}


def read_jcamp(
    path: str | Path,
    *,
    kind: str = "raman",
    x_unit: str | None = None,
    detector_limit: float | None = None,
) -> Spectrum:
    """Read a JCAMP-DX spectrum (IUPAC open standard, via the ``jcamp`` package).

    ``##XUNITS`` of 1/CM is taken as a Raman shift in cm^-1 (JCAMP-DX writes Raman spectra
    with XUNITS=1/CM), NANOMETERS as nm. Header labels go into ``metadata`` (lower case);
    ``##$LASER WAVELENGTH`` or a label naming the laser gives ``metadata["laser_nm"]``.
    """
    import jcamp

    text, source = _read_text(path)
    if not text.lstrip().upper().startswith("##TITLE"):
        raise InputError(
            f"{source}: not a JCAMP-DX file (it must start with ##TITLE=); accepted: JCAMP-DX "
            "4.24 or 5 with ##XYDATA or ##XYPOINTS"
        )
    try:
        with contextlib.redirect_stdout(_io.StringIO()):  # the parser prints its checks
            d = jcamp.read(_io.StringIO(text))
    except Exception as exc:  # noqa: BLE001 - any parser failure is a bad file
        raise InputError(
            f"{source}: the JCAMP-DX data cannot be read ({type(exc).__name__}: {exc}); "
            "accepted: ##XYDATA=(X++(Y..Y)) or ##XYPOINTS=(XY..XY) with ##FIRSTX, ##LASTX, "
            "##NPOINTS"
        ) from None
    x, y = np.asarray(d.get("x", []), float), np.asarray(d.get("y", []), float)
    if x.size != y.size or x.size == 0:
        raise InputError(
            f"{source}: the JCAMP-DX file gives {x.size} x and {y.size} y values; accepted: "
            "equal counts matching ##NPOINTS"
        )
    label = str(d.get("xunits", "")).strip().lower()
    label_unit = _JCAMP_UNITS.get(label) or (unit_from_label(label) if label else None)
    unit, stated = _resolve_unit(x_unit, label_unit, kind, source)
    pairs = {k: v for k, v in d.items() if k not in ("x", "y", "xydata", "xypoints", "children")}
    meta = _metadata({k: str(v) for k, v in pairs.items()})
    meta.update({k: v for k, v in pairs.items() if isinstance(v, int | float | str)})
    meta["source"] = source
    x, y = check_spectrum(
        x,
        y,
        source=source,
        kind=kind,
        x_unit=unit,
        laser_nm=meta.get("laser_nm"),
        detector_limit=detector_limit,
        unit_stated=stated,
    )
    return Spectrum(x, y, unit, kind, meta)


def read_map(
    path: str | Path, *, detector_limit: float | None = None, kind: str | None = None
) -> SpectrumMap:
    """Read a spectrum map in flakebook's map text format (module docstring)."""
    text, source = _read_text(path)
    lines = text.splitlines()
    tag = next((i for i, ln in enumerate(lines) if ln.strip().startswith(_MAP_TAG)), None)
    if tag is None:
        raise InputError(
            f"{source}: no '{_MAP_TAG}' line; accepted: flakebook map text (header lines, "
            f"'{_MAP_TAG}', a 'spectral_axis' line, then 'x_um y_um I1 .. IM' rows)"
        )
    opts = dict(re.findall(r"(\w+)=(\S+)", lines[tag]))
    unit = opts.get("x_unit", "cm1")
    kind = kind or opts.get("kind", "raman")
    pairs: dict[str, str] = {}
    for ln in lines[:tag]:
        pair = _header_pair(ln.strip().lstrip("#%/ "))
        if pair:
            pairs.setdefault(*pair)
    meta = dict(_metadata(pairs), source=source)
    body = [
        (i, ln.strip())
        for i, ln in enumerate(lines[tag + 1 :], start=tag + 2)
        if ln.strip() and not ln.strip().startswith(_COMMENT)
    ]
    if not body or not body[0][1].lower().startswith("spectral_axis"):
        raise InputError(
            f"{source}: the line after '{_MAP_TAG}' must start with 'spectral_axis' and give "
            "the spectral axis values; accepted: 'spectral_axis s1 s2 ... sM'"
        )
    axis_text = body[0][1][len("spectral_axis") :].strip(" \t,;")
    fmt = _guess_format(axis_text)
    axis = _numbers([t for t in _split(axis_text, fmt[0]) if t != ""], fmt[1]) if fmt else None
    if not axis:
        raise InputError(
            f"{source}, line {body[0][0]}: the spectral axis is not a list of numbers; "
            "accepted: 'spectral_axis s1 s2 ... sM'"
        )
    if len(body) < 2:
        raise InputError(f"{source}: the map has no spectra; accepted: 'x_um y_um I1 .. IM' rows")
    table = parse_table("\n".join(ln for _, ln in body[1:]), source)
    m = len(axis)
    if table.data.shape[1] != m + 2:
        raise InputError(
            f"{source}: spectrum rows have {table.data.shape[1]} values but the spectral axis "
            f"has {m}; accepted: x_um, y_um and then exactly {m} intensities per row"
        )
    px, py, spectra = table.data[:, 0], table.data[:, 1], table.data[:, 2:]
    xs, ys = np.unique(px), np.unique(py)
    if xs.size * ys.size != px.size:
        raise InputError(
            f"{source}: {px.size} spectra at {xs.size} x and {ys.size} y positions do not form a "
            "complete grid; accepted: one spectrum at every (x_um, y_um) of a rectangular grid"
        )
    col, row = np.searchsorted(xs, px), np.searchsorted(ys, py)
    cube = np.full((ys.size, xs.size, m), np.nan)
    cube[row, col] = spectra
    if np.isnan(cube).any() and not np.isnan(spectra).any():
        raise InputError(
            f"{source}: some (x_um, y_um) positions appear twice; accepted: one spectrum per "
            "position"
        )
    axis_arr, cube = check_spectrum(
        np.array(axis),
        cube,
        source=source,
        kind=kind,
        x_unit=unit,
        laser_nm=meta.get("laser_nm"),
        detector_limit=detector_limit,
        unit_stated="x_unit" in opts,  # a default cm1 axis that looks like nm is told so
    )
    return SpectrumMap(axis_arr, cube, xs, ys, unit, kind, meta)
