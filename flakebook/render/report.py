"""The campaign report written as one HTML file (figures embedded as PNG data: URIs, no outside
files) or as a PDF of the same content through Qt's printing support (QTextDocument printed on
a QPdfWriter, A4 or Letter). The content comes from :mod:`flakebook.report.content`.
"""

from __future__ import annotations

import base64
import html
import threading
from collections.abc import Callable
from pathlib import Path

from flakebook.errors import InputError, check_cancel
from flakebook.report.content import ReportContent, Selection, appearance_for_card, build_report
from flakebook.store import Flake, Project
from flakebook.store.outfile import write_file

PAPERS = ("a4", "letter")
SUFFIXES = (".html", ".pdf")

#: Parts of a report's progress: gathering the content, drawing the cards, then the file.
CONTENT_SHARE, CARDS_SHARE = 0.3, 0.6

_CSS = """
body { font-family: sans-serif; font-size: 10pt; color: #111; max-width: 60em; margin: 1em auto; }
h1 { font-size: 18pt; } h2 { font-size: 14pt; margin-top: 1.2em; } h3 { font-size: 11pt; }
table { border-collapse: collapse; margin: 0.4em 0; }
th, td { border: 1px solid #bbb; padding: 2px 6px; text-align: left; vertical-align: top; }
th { background: #e8e8e8; }
.caution { border: 2px solid #D55E00; padding: 6px; font-weight: bold; }
.note { color: #555; font-size: 9pt; }
.warn { color: #8a3b00; }
"""


#: On paper: smaller type, so that a flake's card fits on one or two pages.
_PRINT_CSS = "body { font-size: 7pt; } h2 { font-size: 11pt; } h3 { font-size: 8pt; }"


def _e(text) -> str:
    return html.escape(str(text), quote=True)


class _Doc:
    """HTML in the making, with its figures kept apart (name -> PNG bytes)."""

    def __init__(self, scale: float = 1.0) -> None:
        self.parts: list[str] = []
        self.figures: dict[str, bytes] = {}
        self.scale = scale  # figure widths on paper are smaller than on screen

    def _img(self, png: bytes, alt: str, width: int) -> str:
        name = f"fig{len(self.figures) + 1}.png"
        self.figures[name] = png
        return f'<img src="{name}" alt="{_e(alt)}" width="{round(width * self.scale)}">'

    def row(self, items: list[tuple[bytes | None, str, int]]) -> None:
        """Figures side by side (a table without borders)."""
        cells = [self._img(png, alt, w) for png, alt, w in items if png]
        if cells:
            self.add(
                '<table class="row"><tr>'
                + "".join(f'<td style="border: none">{c}</td>' for c in cells)
                + "</tr></table>"
            )

    def add(self, text: str) -> None:
        self.parts.append(text)

    def figure(self, png: bytes | None, alt: str, width: int) -> None:
        if not png:
            return
        self.add(f"<p>{self._img(png, alt, width)}</p>")

    def table(self, header, rows) -> None:
        self.add(
            '<table width="100%"><tr>' + "".join(f"<th>{_e(h)}</th>" for h in header) + "</tr>"
        )
        for r in rows:
            self.add("<tr>" + "".join(f"<td>{_e(c)}</td>" for c in r) + "</tr>")
        self.add("</table>")

    def html(self, *, embed: bool, css: str = _CSS) -> str:
        body = "\n".join(self.parts)
        if embed:
            for name, png in self.figures.items():
                uri = "data:image/png;base64," + base64.b64encode(png).decode("ascii")
                body = body.replace(f'src="{name}"', f'src="{uri}"')
        return (
            '<!DOCTYPE html>\n<html><head><meta charset="utf-8">'
            f"<title>flakebook report</title><style>{css}</style></head><body>\n{body}\n"
            "</body></html>\n"
        )


def _card_png(project: Project, flake_id: int, missing: set[int]) -> bytes | None:
    from flakebook.render.flakecard import flake_card
    from flakebook.render.plots import image_png

    flake = project.get(Flake, flake_id)
    app = appearance_for_card(project, flake, missing)
    if app is None:
        return None
    return image_png(flake_card(project, flake, appearance=app, size_px=360))


def compose(
    project: Project,
    content: ReportContent,
    *,
    pdf: bool = False,
    progress: Callable[[float, str], None] | None = None,
    cancel: threading.Event | None = None,
) -> _Doc:
    """The report's HTML and figures (figures drawn here, offscreen). ``progress(fraction,
    text)`` hears of each flake card drawn; a set ``cancel`` raises Cancelled between cards."""
    from flakebook.render.figures import (
        contrast_figure,
        kappa_figure,
        series_figure,
        spectrum_figure,
    )

    break_before = ' style="page-break-before: always"' if pdf else ""
    d = _Doc(0.9 if pdf else 1.0)
    d.add(f"<h1>{_e(content.title)}</h1>")
    d.add(
        f'<p class="note">Project file {_e(content.project_file)}; {_e(content.selection)}; '
        f"written by {_e(content.generated_with)}.</p>"
    )
    d.add(f'<p class="caution">{_e(content.methods.caution)}</p>')
    d.add("<h2>Summary</h2><ul>" + "".join(f"<li>{_e(s)}</li>" for s in content.summary) + "</ul>")
    if content.problems:
        d.add(
            "<h3>Problems found</h3><ul>"
            + "".join(f'<li class="warn">{_e(p)}</li>' for p in content.problems)
            + "</ul>"
        )
    if content.layer_counts:
        d.table(["Layer number", "Flakes"], [[k, str(v)] for k, v in content.layer_counts])
    d.add("<h2>Thermal conductivity versus layer number</h2>")
    if content.kappa_rows:
        d.figure(kappa_figure(content.kappa_rows, max_layers=content.max_layers),
                 "kappa versus layer number", 520)  # fmt: skip
        from flakebook.report.content import cell_text

        d.table(
            ["Flake", "Layers", "Thickness (nm)", "κ (W/mK)", "κ 16-84% (W/mK)"],
            [
                [r["flake_id"], cell_text("layers", r["layers"], content.max_layers),
                 cell_text("thickness_nm", r["thickness_nm"]),
                 cell_text("kappa_w_mk", r["kappa_w_mk"]),
                 cell_text("kappa_interval", (r["kappa_p16_w_mk"], r["kappa_p84_w_mk"]))]
                for r in content.kappa_rows
            ],
        )  # fmt: skip
    else:
        d.add("<p>No flake of this selection has a thermal conductivity yet.</p>")
    d.add("<h2>Catalogue</h2>")
    if content.catalogue_rows:
        d.add('<table id="catalogue" width="100%"><tr>'
              + "".join(f"<th>{_e(h)}</th>" for h in content.catalogue_header) + "</tr>")  # fmt: skip
        for r in content.catalogue_rows:
            d.add("<tr>" + "".join(f"<td>{_e(c)}</td>" for c in r) + "</tr>")
        d.add("</table>")
    else:
        d.add("<p>No flakes to list.</p>")
    _chip_maps(d, content, break_before)
    missing = {c.image_id for c in project.check_images() if c.status != "ok" and not c.embedded}
    for n_card, card in enumerate(content.cards):
        check_cancel(cancel)
        if progress is not None:
            progress(n_card / len(content.cards),
                     f"card of flake {card.label} ({n_card + 1} of {len(content.cards)})")  # fmt: skip
        d.add(f'<div class="card" id="flake-{_e(card.label)}">')
        d.add(f"<h2{break_before}>Flake {_e(card.label)}</h2>")
        d.add(
            f"<p>Sample {_e(card.sample)} ({_e(card.material)}); layer number "
            f"<b>{_e(card.layers)}</b> {_e(card.assigned_by)}, probability "
            f"{_e(card.probability)}"
            + (f"; or perhaps {_e(card.ambiguous)}" if card.ambiguous else "")
            + (f"; tags {_e(', '.join(card.tags))}" if card.tags else "")
            + ".</p>"
        )
        if card.manual_reason:
            d.add(f"<p>Set by hand: {_e(card.manual_reason)}</p>")
        for p in card.problems:
            d.add(f'<p class="warn">{_e(p)}</p>')
        figures: list[tuple[bytes | None, str, int]] = []
        if card.has_image:
            try:
                figures.append((_card_png(project, card.flake_id, missing),
                                f"micrograph of {card.label}", 320))  # fmt: skip
            except InputError as exc:
                d.add(f'<p class="warn">micrograph not shown: {_e(exc)}</p>')
        if card.contrast is not None:
            try:
                lay = int(card.layers.rstrip("L")) if card.layers[:1].isdigit() else None
                figures.append((contrast_figure(project, card.contrast, lay),
                                "contrast versus N", 460))  # fmt: skip
            except Exception as exc:  # the model cannot run (missing constants): say so
                d.add(f'<p class="warn">contrast model not drawn: {_e(exc)}</p>')
        d.row(figures)
        d.add("<h3>Layer evidence</h3>")
        if card.evidence:
            d.table(
                ["Evidence", "Alone it says", "What was measured", "Method and source"],
                [[e.name + (" (stale)" if e.stale else ""), e.alone, e.reason,
                  f"{e.method}; {e.source}"] for e in card.evidence],
            )  # fmt: skip
        else:
            d.add("<p>No layer evidence recorded.</p>")
        for c in card.conflicts:
            d.add(f'<p class="warn">Conflict: {_e(c)}</p>')
        if card.spectra:
            d.add("<h3>Spectra and fits</h3>")
        for i in range(0, len(card.spectra), 2):
            d.row([(spectrum_figure(project, s), f"spectrum {s.name}", 540)
                   for s in card.spectra[i : i + 2]])  # fmt: skip
        for s in card.spectra:
            rows = []
            for p in s.peaks:
                unit = "cm1" if s.kind == "raman" else "ev"
                u = "cm⁻¹" if unit == "cm1" else "eV"
                if not p.get("found"):
                    rows.append([p.get("mode", ""), "not found", "", ""])
                    continue
                rows.append([
                    p.get("mode", ""),
                    _vwe(p.get(f"center_{unit}"), p.get(f"center_err_{unit}"), u),
                    _num(p.get(f"fwhm_{unit}"), u),
                    _num(p.get("snr"), ""),
                ])  # fmt: skip
            if rows:
                d.table(["Line", "Centre", "FWHM", "Signal/noise"], rows)
            d.add(
                f'<p class="note">{_e(s.method)}; settings: '
                f"{_e(', '.join(f'{k} {v}' for k, v in s.settings.items()))}; "
                f"flakebook {_e(s.version)}"
                + (f"; Si line: {_e(s.calibration.get('method', ''))}" if s.calibration else "")
                + "</p>"
            )
            for w in s.warnings:
                d.add(f'<p class="warn">{_e(w)}</p>')
        if card.holes:
            d.add("<h3>Holes covered</h3>")
            d.table(
                ["Hole", "Lattice index", "Radius", "Found by", "Covered", "Fully", "Margin"],
                [[h["hole_id"], h["index"], h["radius"], h["source"], h["covered"], h["fully"],
                  h["margin"]] for h in card.holes],
            )  # fmt: skip
        for t in card.thermal:
            d.add("<h3>Raman thermometry</h3>")
            d.add(f"<p>κ = <b>{_e(t.kappa)}</b> (16-84%: {_e(t.interval)})</p>")
            d.row([(series_figure(t.series, "temperature"), "omega(T)", 380),
                   (series_figure(t.series, "power"), "omega(P)", 380)])  # fmt: skip
            d.table(["Input", "Value"], t.rows)
            if t.shares:
                d.table(["Share of the variance of κ", ""], t.shares)
            for w in t.warnings:
                d.add(f'<p class="warn">{_e(w)}</p>')
            d.add(f'<p class="note">{_e(t.method)}; {_e(t.source)}; flakebook {_e(t.version)}</p>')
        for x in card.external:
            d.add(f"<p>Outside analysis: {_e(x)}</p>")
        d.add("</div>")
    check_cancel(cancel)
    d.add(f"<h2{break_before}>Methods</h2>")
    for heading, paragraphs, bullets in content.methods.parts:
        d.add(f"<h3>{_e(heading)}</h3>")
        for p in paragraphs:
            d.add(f"<p>{_e(p)}</p>")
        if bullets:
            d.add("<ul>" + "".join(f"<li>{_e(b)}</li>" for b in bullets) + "</ul>")
    d.add(f'<p class="caution">{_e(content.methods.caution)}</p>')
    return d


def _chip_maps(d: _Doc, content: ReportContent, break_before: str) -> None:
    """A chip map per sample: the figure, what is not on it in words, and each flake's place
    (to drive the stage to)."""
    from flakebook.render.chipmap import (
        COORDINATES,
        POSITION_HEADER,
        chip_map_png,
        outline_note,
        position_rows,
        unplaced_text,
    )

    if not content.chip_maps:
        return
    d.add(f"<h2{break_before}>Chip maps</h2>")
    d.add(
        f'<p class="note">Positions are {_e(COORDINATES)}; the flakes are drawn from their '
        "outline in the finest placed image they appear in, filled by layer number.</p>"
    )
    for m, pattern in content.chip_maps:
        d.add(f'<div class="chipmap" id="chip-{_e(m.sample)}">')
        d.add(f"<h3>Chip map of {_e(m.sample)}</h3>")
        d.figure(chip_map_png(m, pattern=pattern, max_layers=content.max_layers),
                 f"chip map of {m.sample}", 720)  # fmt: skip
        d.add(f"<p>{_e(unplaced_text(m))} The {_e(outline_note(m))}.</p>")
        rows = position_rows(m, content.max_layers)
        if rows:
            d.table(list(POSITION_HEADER), rows)
        else:
            d.add("<p>No flake of this sample is on the map.</p>")
        d.add("</div>")


def _vwe(v, e, unit: str) -> str:
    from flakebook.wording import value_with_error

    return value_with_error(v, e, unit) if v is not None else "-"


def _num(v, unit: str) -> str:
    from flakebook.wording import number_text

    return "-" if v is None else f"{number_text(v, 3)} {unit}".strip()


def _pdf_bytes(doc: _Doc, paper: str) -> bytes:
    from PySide6.QtCore import QBuffer, QByteArray, QIODevice, QMarginsF, QSizeF, QUrl
    from PySide6.QtGui import QImage, QPageLayout, QPageSize, QPdfWriter, QTextDocument

    data = QByteArray()
    buf = QBuffer(data)
    buf.open(QIODevice.OpenModeFlag.WriteOnly)
    writer = QPdfWriter(buf)
    size = QPageSize.PageSizeId.A4 if paper == "a4" else QPageSize.PageSizeId.Letter
    writer.setPageLayout(
        QPageLayout(
            QPageSize(size),
            QPageLayout.Orientation.Portrait,
            QMarginsF(15, 15, 15, 15),
            QPageLayout.Unit.Millimeter,
        )  # fmt: skip
    )
    writer.setResolution(144)
    writer.setTitle("flakebook report")
    text = QTextDocument()
    for name, png in doc.figures.items():
        img = QImage.fromData(png, "PNG")
        text.addResource(QTextDocument.ResourceType.ImageResource, QUrl(name), img)
    text.setHtml(doc.html(embed=False, css=_CSS + _PRINT_CSS))
    rect = writer.pageLayout().paintRectPixels(writer.resolution())
    text.setPageSize(QSizeF(rect.width(), rect.height()))
    text.print_(writer)
    buf.close()
    return bytes(data.data())


def write_report(
    project: Project,
    out: str | Path,
    *,
    select: str | Selection | None = None,
    paper: str = "a4",
    combined: Callable | None = None,
    progress: Callable[[float, str], None] | None = None,
    cancel: threading.Event | None = None,
) -> dict:
    """Write the campaign report to ``out`` (.html or .pdf) through a temporary file; returns
    a summary (path, flakes, figures, pages for a PDF is left to the reader).

    ``progress(fraction, text)`` hears of each flake gathered and each card drawn; a set
    ``cancel`` raises :class:`~flakebook.errors.Cancelled` before the file is written, so a
    cancelled report leaves no file (and an earlier file of that name as it was)."""
    from flakebook.render.export import ensure_app

    out = Path(out)
    suffix = out.suffix.lower()
    if suffix not in SUFFIXES:
        raise InputError(
            f"--out {out.name}: a report is written as HTML or PDF; accepted: a name ending in "
            ".html or .pdf"
        )
    if paper not in PAPERS:
        raise InputError(f"--paper {paper!r} is not a paper size; accepted: a4, letter")
    if not out.parent.is_dir():
        raise InputError(f"--out {out}: the folder {out.parent} does not exist")
    if combined is None:
        from flakebook.pipeline_spectra import flake_report as combined
    ensure_app()
    content = build_report(
        project, select, combined=combined, progress=_part(progress, 0.0, CONTENT_SHARE),
        cancel=cancel,
    )  # fmt: skip
    doc = compose(
        project, content, pdf=suffix == ".pdf",
        progress=_part(progress, CONTENT_SHARE, CARDS_SHARE), cancel=cancel,
    )  # fmt: skip
    if progress is not None:
        progress(CONTENT_SHARE + CARDS_SHARE, f"writing {out.name}")
    data: str | bytes = doc.html(embed=True) if suffix == ".html" else _pdf_bytes(doc, paper)
    check_cancel(cancel)  # the last moment: from here the file is written whole
    write_file(out, data)
    if progress is not None:
        progress(1.0, f"{out.name} written")
    return {
        "out": str(out),
        "format": suffix[1:],
        "flakes": [c.label for c in content.cards],
        "figures": len(doc.figures),
        "problems": list(content.problems),
    }


def _part(
    progress: Callable[[float, str], None] | None, start: float, share: float
) -> Callable[[float, str], None] | None:
    """``progress`` of one part of the work: its fraction 0-1 mapped onto start..start+share."""
    if progress is None:
        return None
    return lambda fraction, text="": progress(start + share * fraction, text)
