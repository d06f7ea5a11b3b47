"""A sample's layer calibration from its own flakes of known N, recorded in a project.

These tests check the wiring (what is found, stored, re-read and said), not the physics of the
fit: the "measured" contrasts are the program's own thin-film model at a thicker oxide than the
sample's nominal one, so the truth here comes from the code and the test proves only that the
project path hands it through. The fit's physics is checked against tmm in tests/optics.
"""

from __future__ import annotations

import pytest

from flakebook.errors import InputError
from flakebook.optics.materials import get_material
from flakebook.optics.microscope import Illumination, Microscope, channel_contrast
from flakebook.optics.substrate import parse_substrate
from flakebook.pipeline import (
    CONTRAST_METHOD,
    add_combined,
    calibration_values,
    contrast_likelihood,
)
from flakebook.pipeline_calibration import (
    calibration_job,
    calibration_summary,
    known_flakes,
    layer_changes,
    layer_numbers,
    model_used,
    store_layer_calibration,
)
from flakebook.store import Project, Sample
from flakebook.store.recompute import load_recomputers
from flakebook.substrate import parse_substrate as parse_stack

TRUE_OXIDE_NM = 297.0
ERR = 0.004


def _contrasts(layers, oxide_nm):
    mic = Microscope(na_illumination=0.0, illumination=Illumination.halogen())
    table = channel_contrast(
        get_material("MoSe2"), list(layers), parse_substrate(f"SiO2:{oxide_nm:g},Si"), mic
    )
    return [dict(zip(mic.channel_names, row)) for row in table.contrast]


@pytest.fixture
def project(tmp_path):
    load_recomputers()
    img_file = tmp_path / "k9w_001.png"
    img_file.write_bytes(b"\x89PNG\r\n\x1a\n" + bytes(range(200)))
    p = Project.create(tmp_path / "c.flakebook")
    s = p.add_sample("K9-west", "MoSe2", "SiO2:285,Si")
    img = p.add_image(s, img_file, pixel_size_um=0.1, na_illumination=0.0, illumination="halogen")
    layers = [1, 2, 3, 4, 6, 3]
    for i, (_n, c) in enumerate(zip(layers, _contrasts(layers, TRUE_OXIDE_NM))):
        f = p.add_flake(s, f"K9W-{i + 1:02d}")
        a = p.add_appearance(f, img, [[0, 0], [50, 0], [50, 50], [0, 50]])
        t = p.add_terrace(a, [[0, 0], [50, 0], [50, 50], [0, 50]])
        err = {k: ERR for k in c}
        lk, _ = contrast_likelihood(s, img, None, c, err)
        ev = p.add_evidence(
            f,
            lk.likelihood,
            method=CONTRAST_METHOD,
            terrace=t,
            inputs=[s, img, a],
            parameters={
                "contrast": c,
                "contrast_err": err,
                "geometry": "supported",
                "image_id": img.id,
                "model": model_used(p, s),
            },
        )
        add_combined(p, f, t, [ev])
    yield p
    p.close()


def _sample(p) -> Sample:
    return p.sample_by_name("K9-west")


def test_missing_known_flakes_are_named_in_words(project):
    s = _sample(project)
    project.assign(project.find_flake("K9W-01"), 1, reason="Raman")
    project.assign(project.find_flake("K9W-03"), 3, reason="PL")
    with pytest.raises(InputError) as exc:
        calibration_job(project, s)
    assert str(exc.value).startswith(
        "calibration needs flakes of known N on this sample: 2 found (K9W-01 1L, K9W-03 3L); "
        "mark at least 3 flakes' layer numbers by hand or confirm them by spectra"
    )
    with pytest.raises(InputError, match="K9W-05.*neither set by hand nor confirmed"):
        calibration_job(project, s, ["K9W-01", "K9W-05"])


def test_calibration_is_stored_whole_and_rereads_with_reasons(project):
    s = _sample(project)
    for label, n in (("K9W-01", 1), ("K9W-02", 2), ("K9W-03", 3)):
        project.assign(project.find_flake(label), n, reason="Raman")
    # A confirmed flake counts as known too.
    project.update(project.find_flake("K9W-04"), status="confirmed")
    assert [k.label for k in known_flakes(project, s)] == ["K9W-01", "K9W-02", "K9W-03", "K9W-04"]
    run, chosen = calibration_job(project, s)
    assert len(chosen) == 4
    cal = run()
    assert cal.oxide_nm == pytest.approx(
        TRUE_OXIDE_NM, abs=4.0
    )  # the n,k coefficients take part of it
    before = layer_numbers(project, s)
    history_before = {f.id: len(project.assignments_of(f)) for f in project.flakes_of(s)}
    rec, marked = store_layer_calibration(project, s, cal)
    assert rec.model["oxide_nm"] == pytest.approx(cal.oxide_nm)
    assert rec.created_at and len(marked) == 6
    vals = calibration_values(project, s)
    assert vals["layer_calibration"].to_dict() == cal.to_dict()
    assert "oxide 29" in calibration_summary(rec) and rec.created_at[:10] in calibration_summary(
        rec
    )
    report = project.recompute_stale()
    assert not report.failed and not project.stale_records()
    changes = layer_changes(project, s, before)
    # Every computed reading whose N moved is a new assignment; the earlier one stays.
    for c in changes:
        f = project.find_flake(c["flake_id"])
        assert len(project.assignments_of(f)) == history_before[f.id] + 1
        assert c["reason"] == (
            f"re-read with the calibration of {rec.created_at[:10]}: "
            f"{c['from_layers']}L -> {c['to_layers']}L"
        )
    # The hand-set numbers are untouched; the unconfirmed 3L flake is read right.
    assert layer_numbers(project, s)[project.find_flake("K9W-01").id] == 1
    assert layer_numbers(project, s)[project.find_flake("K9W-06").id] == 3
    ev = project.evidence_of(project.find_flake("K9W-05"))[0]
    assert any(r.kind == "calibration" and r.id == rec.id for r in ev.inputs)


def test_rereading_that_changes_n_keeps_history(project):
    """A re-read that changes a flake's N adds an assignment saying why; the earlier reading
    stays in the flake's history, marked superseded."""
    s = _sample(project)
    f = project.find_flake("K9W-06")
    first = project.latest_assignment(f)
    # The sample's stack is changed to a much thinner oxide: its contrast is read again.
    project.update(s, substrate=parse_stack("SiO2:240,Si"))
    project.recompute_stale()
    now = project.latest_assignment(f)
    assert now.layers != first.layers
    assert now.id != first.id
    assert now.reason == (
        f"re-read on the substrate SiO2:240,Si (was SiO2:285,Si): {first.layers}L -> {now.layers}L"
    )
    old = [a for a in project.assignments_of(f) if a.id == first.id][0]
    assert old.layers == first.layers and old.parameters["superseded_by"] == now.id
