"""The thermometry view: import a series on a membrane, see chi_T, chi_P and kappa, change the
weighting and see kappa recomputed in a worker, undo. Series drawn with invented coefficients;
the confocal (I^2) weighting's geometry factor is larger than the intensity one (REFERENCES.md:
2.04189 against 1.89805 for R/W = 5), so kappa must go up when it is chosen."""

from __future__ import annotations

import numpy as np


def _series(folder, kind, values, shift, seed):
    rng = np.random.default_rng(seed)
    folder.mkdir()
    rows = ["file," + ("stage_temperature_k" if kind == "temperature" else "power_mw")]
    for k, v in enumerate(values):
        x = np.linspace(200.0, 300.0, 500)
        y = 60 + 2000 / (1 + ((x - 241.5 - shift(v)) / 2.1) ** 2)
        (folder / f"s{k}.csv").write_text(
            "\n".join(f"{a:.4f},{b:.0f}" for a, b in zip(x, rng.poisson(y))) + "\n"
        )
        rows.append(f"s{k}.csv,{v}")
    (folder / "series.csv").write_text("\n".join(rows) + "\n")
    return str(folder / "series.csv")


def test_import_see_kappa_change_weighting_undo(qtbot, window, tmp_path, monkeypatch):
    from flakebook.gui.views import thermal

    s = window.session
    flake = s.project.find_flake("Q3W-002")  # the membrane over a hole
    s.project.add_beam_profile("50x", 532.0, 0.4, radius_err_um=0.02, method="edge scan")
    window.select_flake(flake.id)
    window.show_view("thermal")
    view = window.thermal
    assert "laser-safety" in view.caution.text()
    t = _series(tmp_path / "t", "temperature", [295, 315, 335, 355, 375],
                lambda v: -0.011 * (v - 295), 1)  # fmt: skip
    p = _series(tmp_path / "p", "power", [0.05, 0.1, 0.15, 0.2, 0.1], lambda v: -4.0 * v, 2)
    thermal.import_series(window, view, "temperature", t)
    asked = []
    monkeypatch.setattr(view, "confirm_power", lambda powers: asked.append(powers) or True)
    thermal.import_series(window, view, "power", p)
    assert asked and max(asked[0]) == 0.2
    assert "χ_T" in view.chi.text() and "χ_P" in view.chi.text()
    job = thermal.recompute_kappa(window, view)
    qtbot.waitUntil(lambda: bool(job.done.is_set() and view.details.get("kappa")), timeout=60000)
    first = view.details["kappa"]["kappa_w_mk"]
    assert "κ =" in view.kappa.text()
    view.weighting.setCurrentText("confocal")  # recomputes in a worker
    qtbot.waitUntil(
        lambda: view.details["kappa"]["options"].get("weighting") == "confocal", timeout=60000
    )
    second = view.details["kappa"]["kappa_w_mk"]
    assert second / first > 1.03
    window.undo_stack.undo()
    assert view.details["kappa"]["kappa_w_mk"] == first
    window.show_view("kappa")
    assert any(r["label"] == "Q3W-002" for r in window.kappa_view.rows)


def test_power_limit_is_kept_and_g_error_reaches_the_options(qtbot, window):
    """The power limit a user sets is kept for the next session (a new view reads it back,
    with the test's own settings folder from tests/conftest.py); the error of g goes into the
    heat-model options only together with g."""
    from flakebook.gui.views.thermal import ThermalView

    view = window.thermal
    view.max_power.setValue(0.35)
    again = ThermalView(window)
    assert again.max_power.value() == 0.35
    view.conductance_err.setValue(2e5)
    assert view.options().interface_conductance_err_w_m2k == 0.0  # no g: nothing to draw
    view.conductance.setValue(1e6)
    opts = view.options()
    assert (opts.interface_conductance_w_m2k, opts.interface_conductance_err_w_m2k) == (1e6, 2e5)
    again.deleteLater()


def test_conductance_from_a_supported_series_in_the_view(qtbot, window, tmp_path, monkeypatch):
    """A supported-part power series imported from the view is drawn with the membrane's power
    series; ticking 'g from the supported-part series' recomputes kappa with the fitted g,
    whose note reaches the view's warnings."""
    from flakebook.gui.views import thermal

    s = window.session
    flake = s.project.find_flake("Q3W-002")
    s.project.add_beam_profile("50x", 532.0, 0.4, radius_err_um=0.02, method="edge scan")
    window.select_flake(flake.id)
    window.show_view("thermal")
    view = window.thermal
    monkeypatch.setattr(view, "confirm_power", lambda powers: True)
    t = _series(tmp_path / "t", "temperature", [295, 315, 335, 355, 375],
                lambda v: -0.011 * (v - 295), 1)  # fmt: skip
    p = _series(tmp_path / "p", "power", [0.05, 0.1, 0.15, 0.2, 0.1], lambda v: -4.0 * v, 2)
    sp = _series(tmp_path / "s", "power", [0.05, 0.1, 0.15, 0.2, 0.1], lambda v: -0.6 * v, 3)
    for kind, path in (("temperature", t), ("power", p), ("supported-power", sp)):
        thermal.import_series(window, view, kind, path)
    assert "supported part" in view.chi.text()
    job = thermal.recompute_kappa(window, view)
    qtbot.waitUntil(lambda: bool(job.done.is_set() and view.details.get("kappa")), timeout=60000)
    view.g_from_series.setChecked(True)  # recomputes in a worker
    qtbot.waitUntil(
        lambda: view.details["kappa"]["options"].get("conductance_from_series") is True,
        timeout=60000,
    )
    assert not view.conductance.isEnabled()
    assert "from the supported-part power series" in view.warnings.text()


def test_kappa_and_its_interval_share_one_rounding():
    """The project's rounding rule (two significant figures of the uncertainty, here the
    narrower side of the interval) applied to kappa and both ends alike."""
    from flakebook.gui.views.thermal import SHARE_NAMES, kappa_interval_text

    assert kappa_interval_text(25.96, 21.08, 33.04) == "26.0 W/mK (16–84%: 21.1–33.0)"
    assert kappa_interval_text(30.1, 30.1, 30.1) == "30 W/mK (16–84%: 30–30)"
    assert kappa_interval_text(31.237, 30.412, 32.15) == "31.24 W/mK (16–84%: 30.41–32.15)"
    assert SHARE_NAMES["hole_depth"] == "hole depth"
