"""The report builder's progress and cancel hooks (INTERFACE.md, "Inside the core": progress
(fraction, text) and a cancel event, Cancelled when it is set), and the selection of chosen
flakes the window uses.

The project is a small invented one built through the store API: chip "R5-east" (MoS2 on
SiO2/Si) with five flakes and no images (their cards say so). The checks are of the project's
own contract (common practice, no source); the HTML is read back with the standard library's
html.parser, independent of the code that wrote it.
"""

from __future__ import annotations

import threading
from html.parser import HTMLParser
from pathlib import Path

import pytest

from flakebook.cli import main
from flakebook.errors import Cancelled, InputError
from flakebook.render.report import write_report
from flakebook.report.content import Selection, build_report
from flakebook.store import Project

LABELS = ["R5E-01", "R5E-02", "R5E-03", "R5E-04", "R5E-05"]


@pytest.fixture
def small(tmp_path) -> Path:
    path = tmp_path / "r5.flakebook"
    with Project.create(path) as p:
        sample = p.add_sample("R5-east", "MoS2", "SiO2:90,Si")
        for i, label in enumerate(LABELS):
            p.add_flake(sample, label, tags=("membrane",) if i % 2 == 0 else ())
    return path


class _Cards(HTMLParser):
    def __init__(self) -> None:
        super().__init__()
        self.cards: list[str] = []

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        if tag == "div" and a.get("class") == "card":
            self.cards.append(a.get("id", "").removeprefix("flake-"))


def _cards(path: Path) -> list[str]:
    page = _Cards()
    page.feed(path.read_text(encoding="utf-8"))
    page.close()
    return page.cards


def test_progress_rises_to_one_and_names_every_card(small, tmp_path):
    seen: list[tuple[float, str]] = []
    out = tmp_path / "r.html"
    with Project.open(small, read_only=True) as p:
        write_report(p, out, progress=lambda f, t="": seen.append((f, t)))
    fractions = [f for f, _ in seen]
    assert fractions == sorted(fractions) and 0.0 <= fractions[0] and fractions[-1] == 1.0
    card_texts = [t for _, t in seen if t.startswith("card of flake")]
    assert len(card_texts) == len(LABELS)
    for label in LABELS:
        assert any(label in t for t in card_texts)
    assert _cards(out) == LABELS


@pytest.mark.parametrize("stop_after", [0, 2, 4])
def test_cancel_between_cards_raises_and_keeps_the_earlier_file(small, tmp_path, stop_after):
    out = tmp_path / "r.html"
    out.write_text("an earlier report", encoding="utf-8")
    cancel = threading.Event()
    cards = []

    def progress(fraction, text=""):
        if text.startswith("card of flake"):
            cards.append(text)
            if len(cards) > stop_after:
                cancel.set()

    with Project.open(small, read_only=True) as p, pytest.raises(Cancelled):
        write_report(p, out, progress=progress, cancel=cancel)
    assert len(cards) == stop_after + 1  # it stopped at the next card, not at the end
    assert out.read_text(encoding="utf-8") == "an earlier report"
    assert sorted(x.name for x in tmp_path.iterdir()) == ["r.html", "r5.flakebook"]


def test_cancel_set_before_writes_nothing(small, tmp_path):
    cancel = threading.Event()
    cancel.set()
    with Project.open(small, read_only=True) as p:
        with pytest.raises(Cancelled):
            write_report(p, tmp_path / "r.pdf", cancel=cancel)
        with pytest.raises(Cancelled):
            build_report(p, "all", cancel=cancel)
    assert not (tmp_path / "r.pdf").exists()


def test_without_hooks_the_command_line_writes_the_same_report(small, tmp_path):
    """The hooks change nothing in what is written: the command line (no hooks) and a call
    with them write the same bytes."""
    cli, hooked = tmp_path / "cli.html", tmp_path / "hooked.html"
    assert main(["report", str(small), "--out", str(cli), "--select", "tag:membrane"]) == 0
    with Project.open(small, read_only=True) as p:
        write_report(p, hooked, select="tag:membrane", progress=lambda f, t="": None,
                     cancel=threading.Event())  # fmt: skip
    assert hooked.read_bytes() == cli.read_bytes()
    assert _cards(cli) == ["R5E-01", "R5E-03", "R5E-05"]


def test_chosen_flakes_in_catalogue_order(small, tmp_path):
    sel = Selection.of_flakes(["R5E-04", "R5E-02", "R5E-04"])
    assert sel.labels == ("R5E-04", "R5E-02")
    assert sel.describe() == "2 chosen flakes (R5E-04, R5E-02)"
    assert Selection.of_flakes(["R5E-03"]).describe() == "the chosen flake R5E-03"
    out = tmp_path / "c.html"
    with Project.open(small, read_only=True) as p:
        assert [f.label for f in sel.flakes(p)] == ["R5E-02", "R5E-04"]
        write_report(p, out, select=sel)
        with pytest.raises(InputError, match="R5E-99.*not in the project"):
            Selection.of_flakes(["R5E-01", "R5E-99"]).flakes(p)
    assert _cards(out) == ["R5E-02", "R5E-04"]
    with pytest.raises(InputError):  # the command line does not take such a selection
        Selection.parse("flakes:R5E-01")
