"""The catalogue's kappa-versus-layer-number view, driven with pytest-qt: error bars on the
points in linear and log axes, a click selects the flake everywhere, a comparison series from a
CSV (a bad row named by its line), exports to CSV, PNG and SVG. The kappas are invented."""

from __future__ import annotations

import csv

import numpy as np
import pytest
from PySide6.QtGui import QImage

from flakebook.errors import InputError


def _rows(window):
    p = window.session.project
    rows = []
    for n, label in ((1, "Q3W-001"), (2, "Q3W-002"), (3, "Q3W-003")):
        f = p.flake_by_label(label)
        rows.append({"id": f.id, "label": label, "source": "flakebook", "layers": n,
                     "kappa_w_mk": 30.0 - 3 * n, "kappa_p16_w_mk": 25.0 - 3 * n,
                     "kappa_p84_w_mk": 36.0 - 3 * n, "stale": False, "method": "test"})  # fmt: skip
    return rows


def _bars_and_points(view):
    import pyqtgraph as pg

    items = view.plot.getPlotItem().items
    bars = [i for i in items if isinstance(i, pg.ErrorBarItem)]
    dots = [i for i in items if isinstance(i, pg.ScatterPlotItem)]
    return bars, dots


@pytest.mark.parametrize("log", [False, True])
def test_points_sit_on_their_error_bars(window, log):
    """Common practice, no source: a point and its 16-84% bar share one place, also on log
    axes."""
    view = window.views["kappa"]
    view.set_points(_rows(window))
    view.log_x.setChecked(log)
    view.log_y.setChecked(log)
    (bar,), (dots,) = _bars_and_points(view)
    bx = np.asarray(bar.opts["x"], float)
    by = np.asarray(bar.opts["y"], float)
    px, py = (np.asarray(a, float) for a in dots.getData())
    np.testing.assert_allclose(px, bx)
    np.testing.assert_allclose(py, by)


def test_click_selects_and_exports_and_comparison(window, tmp_path):
    view = window.views["kappa"]
    rows = _rows(window)
    view.set_points(rows)
    (_, (dots,)) = _bars_and_points(view)
    pts = dots.points()
    dots.sigClicked.emit(dots, [pts[1]], None)
    assert window.current_flake == rows[1]["id"]
    view.set_points(rows)  # the view follows the project (which has no kappa of its own here)

    out = view.export_csv(tmp_path / "k.csv")
    got = list(csv.DictReader(out.read_text().splitlines()))
    assert [r["flake_id"] for r in got] == [r["label"] for r in rows]
    assert [float(r["kappa_w_mk"]) for r in got] == [r["kappa_w_mk"] for r in rows]
    png = view.export_picture(tmp_path / "k.png")
    assert not QImage(str(png)).isNull()
    svg = view.export_picture(tmp_path / "k.svg")
    assert "<svg" in svg.read_text()[:2000]

    good = tmp_path / "cmp.csv"
    good.write_text("layers,kappa_w_mk\n1,40\n2,35\n", encoding="utf-8")
    assert view.load_comparison(good) == 2
    bad = tmp_path / "bad.csv"
    bad.write_text("layers,kappa_w_mk\n1,40\n2,abc\n", encoding="utf-8")
    with pytest.raises(InputError, match="line 3"):
        view.load_comparison(bad)


@pytest.mark.parametrize("log", [False, True])
def test_layer_axis_is_whole_numbers_and_groups_stand_side_by_side(window, log):
    """Common practice, no source: N is an integer, so the axis is labelled at whole layer
    numbers only and spans half a layer beyond the points; flakebook's result and an external
    one for the same N stand side by side (not one hidden behind the other), each nearer its own
    integer than any other."""
    view = window.views["kappa"]
    rows = _rows(window)
    ext = dict(rows[1], source="external", kappa_w_mk=24.0)
    view.log_x.setChecked(log)
    view.set_points([*rows, ext])
    _, dots = _bars_and_points(view)
    ours, theirs = (np.asarray(d.getData()[0], float) for d in dots)
    to_n = (lambda x: 10**x) if log else (lambda x: x)
    assert np.all(np.abs(to_n(ours) - np.array([1, 2, 3])) < 0.25)
    assert abs(to_n(theirs[0]) - 2) < 0.25
    assert abs(ours[1] - theirs[0]) > 0.01
    ticks = view.plot.getAxis("bottom")._tickLevels[0]
    assert [label for _, label in ticks] == ["1", "2", "3"]
    lo, hi = view.plot.getViewBox().viewRange()[0]
    if not log:
        assert (lo, hi) == pytest.approx((0.5, 3.5))
