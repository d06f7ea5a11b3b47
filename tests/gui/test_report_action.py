"""File > Write report in the window: the dialog, the report written in a worker, progress,
Cancel, the Open button and the messages of a file that cannot be written.

The projects are invented: the demo campaign (``flakebook demo``: chips K7-north and K7-south)
and the small chip "Q3-west" of conftest.py. The window's report is compared with what the
command line (``flakebook report``) writes for the same selection, and the HTML is read back
with the standard library's html.parser; the PDF's page size and text with poppler-utils
(pdfinfo, pdftotext), programs independent of Qt's writer. The rest checks the project's own
behaviour (common practice, no source).
"""

from __future__ import annotations

import re
import shutil
import subprocess
import threading
from html.parser import HTMLParser
from pathlib import Path

import pytest
from PySide6.QtCore import QThreadPool, QTimer
from PySide6.QtGui import QKeySequence
from PySide6.QtWidgets import QApplication, QMessageBox

from flakebook.cli import main
from flakebook.errors import InputError
from flakebook.report.content import Selection
from flakebook.store import Flake, Project

TIMEOUT_MS = 90000


@pytest.fixture(scope="module")
def demo(tmp_path_factory) -> Path:
    """The demo campaign, built once for this module (about 15 s)."""
    from flakebook.demo import build_demo

    return Path(build_demo(tmp_path_factory.mktemp("demo")))


def _stop(w) -> None:
    w.jobs.abandon_all()
    QThreadPool.globalInstance().waitForDone(10000)


@pytest.fixture
def demo_window(qtbot, demo):
    """The window with the demo campaign open read-only (a report only reads)."""
    from flakebook.gui.mainwindow import MainWindow

    w = MainWindow()
    qtbot.addWidget(w)
    w.resize(1300, 850)
    w.show()
    w.open_project(demo, read_only=True)
    qtbot.waitUntil(lambda: not w.jobs.busy, timeout=TIMEOUT_MS)
    yield w
    w.close_project()
    _stop(w)


class _Page(HTMLParser):
    def __init__(self) -> None:
        super().__init__()
        self.cards: list[str] = []

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        if tag == "div" and a.get("class") == "card":
            self.cards.append(a.get("id", "").removeprefix("flake-"))


def _cards(path: Path) -> list[str]:
    page = _Page()
    page.feed(path.read_text(encoding="utf-8"))
    page.close()
    return page.cards


def _through_dialog(qtbot, w, fill) -> None:
    """Trigger File > Write report, let ``fill(dialog)`` set it up, press Write."""
    from flakebook.gui.report_dialog import ReportDialog

    tries = {"n": 0}

    def act():
        dialogs = [d for d in QApplication.topLevelWidgets()
                   if isinstance(d, ReportDialog) and d.isVisible()]  # fmt: skip
        if not dialogs:
            tries["n"] += 1
            if tries["n"] < 100:
                QTimer.singleShot(20, act)
            return
        d = dialogs[0]
        fill(d)
        if d.ok.isEnabled():
            d.ok.click()
        else:
            d.reject()

    QTimer.singleShot(0, act)
    w.a_report.trigger()


def _wait(qtbot, w) -> None:
    qtbot.waitUntil(lambda: not w.jobs.busy, timeout=TIMEOUT_MS)


def _cli(project: Path, out: Path, select: str, *extra: str) -> Path:
    assert main(["report", str(project), "--out", str(out), "--select", select, *extra]) == 0
    return out


def test_the_action_is_in_the_file_menu_with_a_key_of_its_own(demo_window):
    w = demo_window
    file_menu = w.menuBar().actions()[0].menu()
    assert w.a_report in file_menu.actions()
    assert w.a_report.text().replace("&", "") == "Write report…"
    keys = w.a_report.shortcut().toString()
    assert keys == QKeySequence("Ctrl+Shift+R").toString()
    others = [a for a in w.actions() if a is not w.a_report and a.shortcut().toString() == keys]
    assert others == []
    assert w.a_report.isEnabled()  # a read-only project can be reported on
    w.close_project()
    assert not w.a_report.isEnabled()


@pytest.mark.parametrize(
    ("choice", "value", "select"),
    [("tag", "raman-next", "tag:raman-next"), ("sample", "K7-south", "sample:K7-south"),
     ("thermal", None, "thermal")],
)  # fmt: skip
def test_window_writes_what_the_command_line_writes(
    qtbot, demo_window, demo, tmp_path, choice, value, select
):
    w = demo_window
    out = tmp_path / "window.html"
    counts = {}

    def fill(d):
        d.path.setText(str(out))
        d.set_choice(choice, value)
        counts["line"] = d.count.text()
        counts["n"] = d.flake_count

    _through_dialog(qtbot, w, fill)
    job = w._report_job
    texts: list[str] = []
    job.signals.progress.connect(lambda f, t: texts.append(t))
    _wait(qtbot, w)
    assert w.errors == []
    cli = _cli(demo, tmp_path / "cli.html", select)
    assert out.read_bytes() == cli.read_bytes()  # one builder for the window and the command line
    cards = _cards(out)
    assert len(cards) == counts["n"] > 0
    assert f"{counts['n']} flake card" in counts["line"]
    # the selection's flakes, read from the export rows (the JSON contract of INTERFACE.md)
    with Project.open(demo, read_only=True) as p:
        rows = p.export_rows()
        tags = {f.label: f.tags for f in p.records(Flake)}
    expected = {
        "tag": [r["flake_id"] for r in rows if "raman-next" in tags[r["flake_id"]]],
        "sample": [r["flake_id"] for r in rows if r["sample"] == "K7-south"],
        "thermal": [r["flake_id"] for r in rows if r["kappa_w_mk"] is not None],
    }[choice]
    assert set(cards) <= set(expected) and (choice == "thermal" or set(cards) == set(expected))
    assert sum(t.startswith("card of flake") for t in texts) == len(cards)
    assert str(out) in w.hint_label.text() and "Report written" in w.hint_label.text()


def test_count_line_follows_the_choices_live(demo_window, demo):
    w = demo_window
    d = w.report_dialog(show=False)
    with Project.open(demo, read_only=True) as p:
        rows = p.export_rows()
    assert d.choice() == "all" and d.flake_count == len(rows)
    assert d.count.text().startswith(f"The report will hold {len(rows)} flake cards")
    d.sample.setCurrentIndex(d.sample.findText("K7-south"))  # picking a sample checks its button
    assert d.choice() == "sample"
    assert d.flake_count == sum(r["sample"] == "K7-south" for r in rows)
    d.buttons_of["all"].setChecked(True)
    d.sample.activated.emit(d.sample.findText("K7-south"))  # the same name picked again
    assert d.choice() == "sample"
    assert d.tag.findText("raman-next") >= 0
    assert not d.paper.isEnabled()  # paper is for a PDF
    d.path.setText(str(Path(d.path.text()).with_suffix(".pdf")))
    assert d.paper.isEnabled()
    assert not d.buttons_of["chosen"].isEnabled()  # no flake selected in the window
    with pytest.raises(ValueError):
        d.set_choice("chosen")
    d.deleteLater()


def test_an_empty_selection_or_a_bad_name_disables_write(qtbot, window):
    w = window  # Q3-west: three flakes, no thermometry, no tags
    d = w.report_dialog(show=False)
    assert d.ok.isEnabled() and d.flake_count == 3
    d.set_choice("thermal")
    assert d.flake_count == 0 and not d.ok.isEnabled()
    assert "holds no flakes" in d.reason.text() and d.reason.isVisibleTo(d)
    assert "0 flake cards" in d.count.text()
    assert not d.buttons_of["tag"].isEnabled()  # no flake has a tag
    d.set_choice("all")
    assert d.ok.isEnabled() and not d.reason.isVisibleTo(d)
    d.path.setText(str(Path(d.path.text()).with_suffix(".docx")))
    assert not d.ok.isEnabled() and ".html or .pdf" in d.reason.text()
    d.path.setText("")
    assert not d.ok.isEnabled() and "Choose the report file" in d.reason.text()
    d.deleteLater()


def test_cancel_midway_leaves_no_file(qtbot, demo_window, tmp_path, monkeypatch):
    """Cancel pressed while the second card is being drawn: the job stops, no file (nor a
    temporary one) is left, and the status bar says so."""
    import flakebook.gui.window.reports as reports
    from flakebook.gui.worker import Job

    w = demo_window
    pressed = threading.Event()
    cards: list[str] = []

    class Gated(Job):  # the worker waits at its second card until Cancel has been pressed
        def _progress(self, fraction, text=""):
            super()._progress(fraction, text)
            if text.startswith("card of flake"):
                cards.append(text)
                if len(cards) == 2:
                    pressed.wait(20)

    monkeypatch.setattr(reports, "Job", Gated)
    out = tmp_path / "stopped.html"
    job = w.write_report_file(out, Selection("all"))
    qtbot.waitUntil(lambda: len(cards) >= 2, timeout=TIMEOUT_MS)
    w.jobs.cancel_button.click()  # the status bar's Cancel, as a user presses it
    pressed.set()
    _wait(qtbot, w)
    assert pressed.is_set() and job.cancel_event.is_set()
    assert len(cards) == 2  # it stopped at the next card
    assert list(tmp_path.iterdir()) == []
    assert "Report cancelled" in w.hint_label.text() and w.errors == []
    assert w.findChild(type(w.jobs.cancel_button), "openReport") is None


def test_cancel_after_the_file_is_written_says_written(qtbot, demo_window, tmp_path, monkeypatch):
    """Cancel pressed once the file is whole: the report is there and the window says so."""
    import flakebook.gui.window.reports as reports
    from flakebook.gui.worker import Job

    class Late(Job):
        def _progress(self, fraction, text=""):
            super()._progress(fraction, text)
            if text.endswith(" written"):
                self.cancel()

    monkeypatch.setattr(reports, "Job", Late)
    w = demo_window
    out = tmp_path / "late.html"
    w.write_report_file(out, Selection("thermal"))
    _wait(qtbot, w)
    assert out.exists() and _cards(out)
    assert w.hint_label.text().startswith("Report written") and w.last_report == out


@pytest.mark.parametrize("case", ["folder_missing", "name_is_a_folder"])
def test_a_file_that_cannot_be_written_gives_the_clear_message(qtbot, demo_window, tmp_path, case):
    w = demo_window
    if case == "folder_missing":
        out = tmp_path / "no-such-folder" / "r.html"
        words = "does not exist"
    else:
        out = tmp_path / "taken.html"
        out.mkdir()
        words = "cannot be written"
    w.write_report_file(out, Selection("tag", "raman-next"))
    _wait(qtbot, w)
    action, exc = w.errors[-1]
    assert action == "Write report" and isinstance(exc, InputError) and words in str(exc)
    qtbot.waitUntil(lambda: bool(w.findChildren(QMessageBox, "errorDialog")), timeout=5000)
    box = w.findChildren(QMessageBox, "errorDialog")[-1]
    assert words in box.text() and "Traceback" not in box.text() + box.detailedText()
    assert str(out.name) in box.text()
    assert sorted(p.name for p in tmp_path.iterdir()) == (
        [] if case == "folder_missing" else ["taken.html"]
    )
    box.close()


def test_open_button_opens_the_report(qtbot, demo_window, tmp_path, monkeypatch):
    import flakebook.gui.window.reports as reports

    opened = []

    class Desktop:
        @staticmethod
        def openUrl(url):  # noqa: N802 - Qt's name
            opened.append(url.toLocalFile())
            return True

    monkeypatch.setattr(reports, "QDesktopServices", Desktop)
    w = demo_window
    out = tmp_path / "open-me.html"
    w.write_report_file(out, Selection("thermal"))
    _wait(qtbot, w)
    button = w.findChild(type(w.jobs.cancel_button), "openReport")
    assert button is not None and button.isVisible()
    button.click()
    assert opened == [str(out)]
    # a new report hides the button until it is written
    w.write_report_file(tmp_path / "next.html", Selection("thermal"))
    assert not button.isVisible()
    _wait(qtbot, w)
    assert button.isVisible() and w.last_report == tmp_path / "next.html"
    # the report belongs to the project: closing it takes the button away
    w.close_project()
    assert not button.isVisible() and w.last_report is None


def test_chosen_and_shown_flakes(qtbot, demo_window, demo, tmp_path):
    w = demo_window
    with Project.open(demo, read_only=True) as p:
        k7s = sorted(f.label for f in p.records(Flake) if f.label.startswith("K7S-"))
        picked = p.flake_by_label(k7s[1])
    w.select_flake(picked.id)
    out = tmp_path / "one.html"

    def fill_one(d):
        assert d.buttons_of["chosen"].isEnabled() and picked.label in d.buttons_of["chosen"].text()
        d.path.setText(str(out))
        d.set_choice("chosen")
        assert d.flake_count == 1

    _through_dialog(qtbot, w, fill_one)
    _wait(qtbot, w)
    assert _cards(out) == [picked.label]

    w.catalogue.search.setText("K7S-")  # the catalogue shows the K7-south flakes only
    out = tmp_path / "shown.html"

    def fill_shown(d):
        d.path.setText(str(out))
        d.set_choice("shown")
        assert d.flake_count == len(k7s)

    _through_dialog(qtbot, w, fill_shown)
    _wait(qtbot, w)
    assert _cards(out) == k7s
    assert out.read_bytes() != b"" and w.errors == []


def test_report_of_an_edit_just_made_in_a_read_write_window(qtbot, window, project_path, tmp_path):
    """The worker reads the project on a connection of its own while the window holds it
    read-write: an edit just made in the window is in the report."""
    w = window
    with Project.open(project_path, read_only=True) as p:
        flake = p.flake_by_label("Q3W-002")
    w.set_tags(flake.id, ["suspended"])
    out = tmp_path / "edit.html"

    def fill(d):
        assert d.tag.findText("suspended") >= 0 and d.buttons_of["tag"].isEnabled()
        d.path.setText(str(out))
        d.set_choice("tag", "suspended")

    _through_dialog(qtbot, w, fill)
    _wait(qtbot, w)
    assert w.errors == [] and _cards(out) == ["Q3W-002"]
    assert (
        out.read_bytes() == _cli(project_path, tmp_path / "cli.html", "tag:suspended").read_bytes()
    )


@pytest.mark.skipif(shutil.which("pdfinfo") is None, reason="poppler-utils (pdfinfo) missing")
def test_pdf_on_letter_paper_from_the_window(qtbot, demo_window, demo, tmp_path):
    w = demo_window
    out = tmp_path / "campaign.pdf"

    def fill(d):
        d.path.setText(str(out))
        d.paper.setCurrentIndex(d.paper.findData("letter"))
        d.set_choice("thermal")

    _through_dialog(qtbot, w, fill)
    _wait(qtbot, w)
    assert w.errors == [] and out.read_bytes()[:5] == b"%PDF-"
    info = subprocess.run(["pdfinfo", str(out)], capture_output=True, text=True, check=True)
    size = re.search(r"Page size:\s+([\d.]+) x ([\d.]+)", info.stdout)
    # US Letter is 8.5 x 11 in, 612 x 792 pt (ANSI/ASME Y14.1).
    assert (round(float(size.group(1))), round(float(size.group(2)))) == (612, 792)
    if shutil.which("pdftotext") is None:
        pytest.skip("poppler-utils (pdftotext) missing: the PDF's text is not checked")
    text = subprocess.run(["pdftotext", str(out), "-"], capture_output=True, text=True).stdout
    with Project.open(demo, read_only=True) as p:
        labels = [f.label for f in Selection("thermal").flakes(p)]
    assert labels and all(label in text for label in labels)
