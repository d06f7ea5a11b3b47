"""The campaign report (``flakebook report``) of a freshly built demo project, in HTML and PDF.

The checks are structural (common practice, no source): the HTML parses with the standard
library's html.parser, every embedded figure decodes with OpenCV, the catalogue's numbers are the
project's values rounded as the window's catalogue shows them, and the PDF's pages and text are
read back with poppler-utils (pdfinfo, pdftotext), a program independent of Qt's writer.
"""

from __future__ import annotations

import base64
import re
import shutil
import subprocess
from html.parser import HTMLParser
from pathlib import Path

import cv2
import numpy as np
import pytest

from flakebook.cli import main
from flakebook.errors import InputError
from flakebook.report.content import Selection
from flakebook.store import Project
from flakebook.wording import probability_text


@pytest.fixture(scope="module")
def demo(tmp_path_factory) -> Path:
    """The demo campaign, built once for this module (about 15 s)."""
    from flakebook.demo import build_demo

    return Path(build_demo(tmp_path_factory.mktemp("demo")))


class _Page(HTMLParser):
    def __init__(self) -> None:
        super().__init__()
        self.images: list[str] = []
        self.cards: list[str] = []
        self.chipmaps: list[str] = []
        self.tables_in_maps: list[list[list[str]]] = []
        self._in_map = False
        self.tables: dict[str, list[list[str]]] = {}
        self._table: str | None = None
        self._cell: list[str] | None = None

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        if tag == "img":
            self.images.append(a.get("src", ""))
        if tag == "div" and a.get("class") == "card":
            self.cards.append(a.get("id", ""))
            self._in_map = False
        if tag == "div" and a.get("class") == "chipmap":
            self.chipmaps.append(a.get("id", ""))
            self._in_map = True
        if self._in_map and tag == "img":
            self.chipmaps[-1] += " img"
        if self._in_map and tag == "table":
            self.tables_in_maps.append([])
            self._table = f"map{len(self.tables_in_maps)}"
            self.tables[self._table] = self.tables_in_maps[-1]
        if tag == "table" and a.get("id"):
            self._table = a["id"]
            self.tables[self._table] = []
        if self._table and tag == "tr":
            self.tables[self._table].append([])
        if self._table and tag in ("td", "th"):
            self._cell = []

    def handle_endtag(self, tag):
        if tag == "table":
            self._table = None
        if tag in ("td", "th") and self._cell is not None and self._table:
            self.tables[self._table][-1].append("".join(self._cell))
            self._cell = None

    def handle_data(self, data):
        if self._cell is not None:
            self._cell.append(data)


def _html(demo: Path, out: Path, *args: str) -> _Page:
    assert main(["report", str(demo), "--out", str(out), "--format", "json", *args]) == 0
    page = _Page()
    page.feed(out.read_text(encoding="utf-8"))
    page.close()
    return page


def test_html_report_has_every_flake_and_decodable_figures(demo, tmp_path):
    page = _html(demo, tmp_path / "campaign.html")
    with Project.open(demo, read_only=True) as p:
        labels = sorted(f.label for f in p.records("flake"))
    assert sorted(c.removeprefix("flake-") for c in page.cards) == labels
    assert len(page.images) >= len(labels)  # at least a micrograph per flake
    for src in page.images:
        assert src.startswith("data:image/png;base64,"), src[:40]
        img = cv2.imdecode(np.frombuffer(base64.b64decode(src.split(",", 1)[1]), np.uint8), 1)
        assert img is not None and img.shape[0] > 50 and img.shape[1] > 50
    assert not list(tmp_path.glob(".*.tmp"))  # written through a temporary file


def test_a_chip_map_per_sample_with_each_flake_where_the_scenario_put_it(demo, tmp_path):
    """Truth: the demo scenario's chip coordinates of each flake and bulk piece (flakebook.demo.PIECES)."""
    from flakebook import demo as scenario

    page = _html(demo, tmp_path / "campaign.html")
    with Project.open(demo, read_only=True) as p:
        samples = [s.name for s in p.samples()]
    assert page.chipmaps == [f"chip-{s} img" for s in samples]  # one map, one figure each
    truth = {f.label: f for f in scenario.PIECES}  # the bulk pieces too
    bulk = {f.label for f in scenario.BULK_PIECES}
    listed, wrong = set(), 0
    for table in page.tables_in_maps:
        header, *rows = table
        col = {h: i for i, h in enumerate(header)}
        for r in rows:
            f = truth[r[col["Flake"]]]
            x, y = float(r[col["centre x (µm)"]]), float(r[col["centre y (µm)"]])
            assert np.hypot(x - f.center_um[0], y - f.center_um[1]) < 2 * f.radius_um
            if f.label in bulk:  # thicker than contrast resolves: the "more than" bin
                assert r[col["N"]].startswith(">"), (f.label, r[col["N"]])
            else:
                wrong += r[col["N"]] != f"{f.layers}L"
            listed.add(r[col["Flake"]])
    assert listed == set(truth)
    assert wrong <= 1  # the layer numbers are the analysis's, at most one off the scenario
    text = (tmp_path / "campaign.html").read_text(encoding="utf-8")
    assert text.count("nothing is left off the map") == len(samples)
    page = _html(demo, tmp_path / "s.html", "--select", "sample:K7-south")
    assert page.chipmaps == ["chip-K7-south img"]


def test_catalogue_numbers_are_the_projects_rounded_as_displayed(demo, tmp_path):
    """Areas and margins to 0.1 um, probabilities to 2 decimals, kappa to 3 figures: as the
    window's catalogue shows them."""
    page = _html(demo, tmp_path / "campaign.html")
    header, *rows = page.tables["catalogue"]
    with Project.open(demo, read_only=True) as p:
        export = {r["flake_id"]: r for r in p.export_rows()}
        margin = {r.label: r.margin_um for r in p.catalogue()}
        top = p.max_layers
    assert len(rows) == len(export)
    col = {h: i for i, h in enumerate(header)}
    for r in rows:
        want = export[r[col["Flake"]]]
        assert r[col["Area (µm²)"]] == f"{want['area_um2']:.1f}"
        assert abs(float(r[col["Area (µm²)"]]) - want["area_um2"]) <= 0.05
        pr = want["probability"]  # None for a layer number set by hand: an empty cell
        assert r[col["Probability"]] == ("" if pr is None else probability_text(pr))
        # the top value is the "more than N_max" bin (a bulk piece), shown as in the window
        n = want["layers"]
        assert r[col["Layers"]] == (f">{top}L" if n > top else f"{n}L")
        assert r[col["Holes covered"]] == str(want["holes_covered"])
        m = margin[r[col["Flake"]]]
        assert r[col["Margin (µm)"]] == ("" if m is None else f"{m:.1f}")
        k = want["kappa_w_mk"]
        assert r[col["κ (W/mK)"]] == ("" if k is None else f"{k:.3g}")
        if k is not None:
            assert abs(float(r[col["κ (W/mK)"]]) - k) / k < 0.006


def test_selection_by_tag_sample_and_thermal(demo, tmp_path):
    with Project.open(demo, read_only=True) as p:
        tagged = sorted(f.label for f in p.records("flake") if "raman-next" in f.tags)
        by_id = {f.id: f.label for f in p.records("flake")}
        thermal = sorted({by_id[r.flake_id] for r in p.records("thermometry_result")
                          if r.kappa_w_mk is not None})  # fmt: skip
        kappa = sorted(r["flake_id"] for r in p.export_rows() if r["kappa_w_mk"] is not None)
    page = _html(demo, tmp_path / "t.html", "--select", "tag:raman-next")
    assert sorted(c.removeprefix("flake-") for c in page.cards) == tagged
    page = _html(demo, tmp_path / "s.html", "--select", "sample:K7-south")
    assert all(c.startswith("flake-K7S-") for c in page.cards) and page.cards
    page = _html(demo, tmp_path / "k.html", "--select", "thermal")
    cards = sorted(c.removeprefix("flake-") for c in page.cards)
    assert cards == thermal and cards  # every stored kappa result, not the outside one
    assert set(cards) <= set(kappa)


def test_methods_name_sources_and_the_laser_caution(demo, tmp_path):
    out = tmp_path / "m.html"
    _html(demo, out, "--select", "thermal")
    text = out.read_text(encoding="utf-8")
    assert "Follow your institution&#x27;s laser-safety rules and local regulations." in text
    assert "Hsu et al. 2019" in text  # the n,k data the contrast model used
    assert "Balandin et al." in text  # the heat model's published source
    assert "Monte Carlo" in text and "flakebook 0." in text


def test_bad_choices_exit_2_and_write_nothing(demo, tmp_path):
    assert main(["report", str(demo), "--out", str(tmp_path / "r.docx")]) == 2
    assert main(["report", str(demo), "--out", str(tmp_path / "r.html"), "--select", "x"]) == 2
    assert main(["report", str(demo), "--out", str(tmp_path / "r.html"),
                 "--select", "sample:nope"]) == 2  # fmt: skip
    assert list(tmp_path.iterdir()) == []
    with pytest.raises(InputError):
        Selection.parse("tag:")


@pytest.mark.skipif(shutil.which("pdfinfo") is None, reason="poppler-utils (pdfinfo) missing")
@pytest.mark.parametrize("paper", ["a4", "letter"])
def test_pdf_pages_and_text(demo, tmp_path, paper):
    out = tmp_path / "campaign.pdf"
    assert main(["report", str(demo), "--out", str(out), "--paper", paper]) == 0
    info = subprocess.run(["pdfinfo", str(out)], capture_output=True, text=True, check=True)
    pages = int(re.search(r"Pages:\s+(\d+)", info.stdout).group(1))
    size = re.search(r"Page size:\s+([\d.]+) x ([\d.]+)", info.stdout)
    with Project.open(demo, read_only=True) as p:
        labels = [f.label for f in p.records("flake")]
    f = len(labels)
    assert 2 + f <= pages <= 2 + 2 * f
    w, h = float(size.group(1)), float(size.group(2))
    # ISO 216 A4 is 210 x 297 mm (595 x 842 pt); US Letter 8.5 x 11 in (612 x 792 pt).
    assert (round(w), round(h)) == ((595, 842) if paper == "a4" else (612, 792))
    if shutil.which("pdftotext") is None:
        pytest.skip("poppler-utils (pdftotext) missing: the PDF's text is not checked")
    text = subprocess.run(["pdftotext", str(out), "-"], capture_output=True, text=True).stdout
    for label in labels:
        assert label in text
    assert "Chip map of K7-north" in text and "Chip map of K7-south" in text


def test_empty_project_says_so(tmp_path, capsys):
    Project.create(tmp_path / "empty.flakebook").close()
    out = tmp_path / "empty.html"
    assert main(["report", str(tmp_path / "empty.flakebook"), "--out", str(out)]) == 0
    text = out.read_text(encoding="utf-8")
    assert "no flakes yet" in text and "no samples yet" in text
    assert "no flake cards" in capsys.readouterr().err


def test_missing_images_are_named_not_fatal(demo, tmp_path, capsys):
    copy = tmp_path / "copy"
    shutil.copytree(demo.parent, copy)
    shutil.rmtree(copy / "images")
    out = tmp_path / "r.html"
    assert main(["report", str(copy / demo.name), "--out", str(out)]) == 0
    page = _html(copy / demo.name, out)
    text = out.read_text(encoding="utf-8")
    assert "micrograph not shown" in text and "the file is missing" in text
    assert len(page.cards) > 0
    assert "image not readable" in capsys.readouterr().err
