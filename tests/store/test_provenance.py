"""Provenance and staleness: changed inputs mark what was computed from them; recompute brings
them up to date (common practice, no source)."""

from __future__ import annotations

import numpy as np
import pytest
from store_helpers import write_image

from flakebook.store import (
    Evidence,
    register_recomputer,
    unregister_recomputer,
)


def _area_likelihood(project, rec: Evidence) -> dict:
    """A test recomputer: the likelihood peaks at N = round(area of the appearance in um^2)."""
    app = project.get("appearance", next(r.id for r in rec.inputs if r.kind == "appearance"))
    n = project.max_layers + 1
    lk = np.full(n, 0.01)
    lk[min(n - 1, max(0, round(app.area_um2) - 1))] = 1.0
    return {"likelihood": lk, "parameters": {"area_um2": app.area_um2}}


@pytest.fixture
def flake_with_evidence(project, tmp_path):
    s = project.add_sample("K7-north", "MoSe2", oxide_nm=285)
    img = project.add_image(s, write_image(tmp_path / "a.png"), pixel_size_um=0.5)
    f = project.add_flake(s, "K7N-001")
    a = project.add_appearance(f, img, [[0, 0], [4, 0], [4, 4], [0, 4]])  # 2 um x 2 um = 4 um^2
    ev = project.add_evidence(f, np.ones(16), method="area-test", inputs=[a, img])
    asg = project.add_assignment(f, 4, probability=0.8, method="combine-test", inputs=[ev])
    return project, f, img, a, ev, asg


def test_editing_an_outline_marks_evidence_stale_and_recompute_clears_it(flake_with_evidence):
    p, f, img, a, ev, asg = flake_with_evidence
    assert not p.catalogue()[0].stale
    p.update(a, outline_px=[[0, 0], [6, 0], [6, 6], [0, 6]])  # now 9 um^2
    assert p.get("appearance", a.id).area_um2 == pytest.approx(9.0)
    assert p.get("evidence", ev.id).stale
    assert p.get("assignment", asg.id).stale, "staleness follows derived-from-derived"
    assert p.catalogue()[0].stale and p.export_rows()[0]["stale"] is True
    report = p.recompute_stale(
        recompute={"area-test": _area_likelihood, "combine-test": lambda pr, r: {}}
    )
    assert report.ok
    assert report.recomputed == (("evidence", ev.id), ("assignment", asg.id))
    new = p.get("evidence", ev.id)
    assert not new.stale and new.revision == 2
    assert int(np.argmax(new.likelihood)) + 1 == 9
    assert {r.kind: r.revision for r in new.inputs} == {"appearance": 2, "image": 1}
    assert p.get("assignment", asg.id).inputs[0].revision == 2
    assert not p.catalogue()[0].stale


def test_registered_recomputer_and_unregistered_method(flake_with_evidence):
    p, f, img, a, ev, asg = flake_with_evidence
    p.update(a, outline_px=[[0, 0], [2, 0], [2, 2]])
    report = p.recompute_stale()
    assert report.unregistered == (("evidence", ev.id, "area-test"),)
    assert report.failed == (("assignment", asg.id, "its input evidence 1 stays stale"),)
    assert p.get("evidence", ev.id).stale, "no function: reported, not silently cleared"
    register_recomputer("area-test", _area_likelihood)
    register_recomputer("combine-test", lambda pr, r: {"probability": 0.5})
    try:
        report = p.recompute_stale()
    finally:
        unregister_recomputer("area-test")
        unregister_recomputer("combine-test")
    assert report.ok and len(report.recomputed) == 2
    assert p.get("assignment", asg.id).probability == 0.5


def test_a_failing_recomputer_is_reported_and_changes_nothing(flake_with_evidence):
    p, f, img, a, ev, asg = flake_with_evidence
    p.update(a, outline_px=[[0, 0], [2, 0], [2, 2]])

    def broken(project, rec):
        raise ValueError("no optical constants for this material")

    report = p.recompute_stale(recompute={"area-test": broken, "combine-test": lambda pr, r: {}})
    assert report.failed[0][:2] == ("evidence", ev.id)
    assert "no optical constants" in report.failed[0][2]
    assert p.get("evidence", ev.id).revision == 1 and p.get("evidence", ev.id).stale


def test_new_pixel_size_rescales_um_and_marks_dependents(flake_with_evidence):
    p, f, img, a, ev, asg = flake_with_evidence
    h = p.add_hole(img, (2, 2), 1.0, radius_err_um=0.1)
    assert h.radius_um == 0.5
    p.update(img, pixel_size_um=0.25)
    assert p.get("appearance", a.id).area_um2 == pytest.approx(1.0)
    hole = p.get("hole", h.id)
    assert hole.radius_um == pytest.approx(0.25) and hole.radius_err_um == pytest.approx(0.05)
    assert p.get("evidence", ev.id).stale


def test_cancel_undoes_the_whole_recompute(flake_with_evidence):
    import threading

    from flakebook.errors import Cancelled

    p, f, img, a, ev, asg = flake_with_evidence
    p.update(a, outline_px=[[0, 0], [2, 0], [2, 2]])
    cancel = threading.Event()

    def cancelling(project, rec):
        cancel.set()
        return _area_likelihood(project, rec)

    with pytest.raises(Cancelled):
        p.recompute_stale(
            recompute={"area-test": cancelling, "combine-test": lambda pr, r: {}}, cancel=cancel
        )
    assert p.get("evidence", ev.id).stale and p.get("evidence", ev.id).revision == 1


def test_evidence_from_an_outdated_input_is_stored_stale(flake_with_evidence):
    p, f, img, a, ev, asg = flake_with_evidence
    p.update(a, outline_px=[[0, 0], [3, 0], [3, 3]])
    late = p.add_evidence(f, np.ones(16), method="area-test", inputs=[a])  # a is revision 1
    assert late.stale
