"""Raman, PL, Si-line and AFM layer evidence (flakebook.spectra.layer_evidence, rules)."""

import json

import numpy as np
import pytest

from flakebook.errors import InputError
from flakebook.evidence import combine, parameter_grid
from flakebook.spectra.layer_evidence import (
    Feature,
    PLFeature,
    afm_evidence,
    pl_evidence,
    raman_evidence,
    raman_offset_grid,
    si_attenuation_evidence,
    stokes_pair,
)
from flakebook.spectra.rules import KnownFlake, RuleTable, calibrate_table, load_rule_table


def _mos2_sep(sep, err=0.3, **kw):
    feats = [Feature("E2g", 385.0, err / np.sqrt(2)), Feature("A1g", 385.0 + sep, err / np.sqrt(2))]
    (ev,) = raman_evidence(feats, "MoS2", **kw)
    return ev


def test_lee_separations_give_one_and_two_layers():
    """E2g-A1g separations of about 19 cm^-1 (1L) and 22 cm^-1 (2L) (Lee et al., ACS Nano 4,
    2695 (2010); values from memory) are read as 1L and 2L; a bulk-like 25 cm^-1 is not 1L."""
    one = combine([_mos2_sep(19.0)])
    two = combine([_mos2_sep(22.0)])
    bulk = combine([_mos2_sep(25.2)])
    assert one.layers == 1 and one.probability > 0.95
    assert two.layers == 2 and two.probability > 0.5
    assert bulk.posterior[0] < 1e-6 and bulk.layers >= 4
    assert "Lee et al" in _mos2_sep(19.0).method and "from memory" in _mos2_sep(19.0).method


def test_separation_ignores_the_spectrometer_offset_but_a_position_does_not():
    """A separation of two modes cancels a common offset; a single mode's position is handed
    over on the shared raman_offset_cm1 grid (common practice, no source)."""
    ev = _mos2_sep(19.0)
    assert ev.grid is None
    (a1g,) = [e for e in raman_evidence([Feature("A1g", 241.5, 0.2)], "MoSe2") if "A1g" in e.method]
    assert a1g.grid is not None and a1g.grid.grid.parameter == "raman_offset_cm1"


def test_b2g_absent_in_monolayer_mose2():
    """The MoSe2 B2g mode near 353 cm^-1 is absent in the monolayer (Tonndorf et al., Opt.
    Express 21, 4908 (2013); from memory): not seeing it favours 1L, seeing it rules 1L out."""
    (absent,) = raman_evidence([Feature("B2g", found=False)], "MoSe2")
    (seen,) = raman_evidence([Feature("B2g", 353.0, 0.5)], "MoSe2")
    assert int(np.argmax(absent.likelihood)) == 0
    assert seen.likelihood[0] < 0.05 * seen.likelihood[1]
    (wse2,) = raman_evidence([Feature("B2g", found=False)], "WSe2")
    assert int(np.argmax(wse2.likelihood)) == 0


def test_breathing_mode_in_crossed_polarisation():
    """Breathing modes vanish in crossed polarisation, shear modes do not (Zhang et al. 2013,
    from memory): an absent breathing mode there is no evidence; a found one is refused; an
    absent shear mode still counts."""
    feats = [Feature("breathing", found=False), Feature("shear", found=False)]
    ev = raman_evidence(feats, "MoS2", polarization="crossed")
    (br,) = [e for e in ev if "breathing" in e.method]
    (sh,) = [e for e in ev if "shear" in e.method]
    np.testing.assert_allclose(br.likelihood, 1.0)
    assert "no evidence" in br.reason
    assert sh.likelihood[0] == 1.0 and sh.likelihood[1] < 0.2
    with pytest.raises(InputError, match="crossed"):
        raman_evidence([Feature("breathing", 40.0, 0.3)], "MoS2", polarization="crossed")


def test_shear_and_breathing_modes_identify_layers():
    """Shear and breathing modes at the chain's values for 2L..5L MoS2 (32 and 56.5 cm^-1 bulk;
    Zhang et al. 2013, from memory) give back N; a found shear mode rules out 1L."""
    for n in (2, 3, 4, 5):
        s = 32.0 * np.cos(np.pi / (2 * n))
        b = 56.5 * np.sin(np.pi / (2 * n))
        ev = raman_evidence([Feature("shear", s, 0.2), Feature("breathing", b, 0.2)], "MoS2")
        post = combine(ev)
        assert post.layers == n
        assert post.posterior[0] == 0.0


def test_stokes_pair_is_free_of_the_offset():
    """Stokes at +w + d and anti-Stokes at -w + d: (S - AS)/2 = w whatever the offset d
    (common practice, no source)."""
    for d in (-1.5, 0.0, 2.0):
        f = stokes_pair(Feature("shear", 22.6 + d, 0.2), Feature("shear", -22.6 + d, 0.2))
        assert f.center_cm1 == pytest.approx(22.6) and f.offset_free
        assert f.center_err_cm1 == pytest.approx(0.2 / np.sqrt(2))
    only = stokes_pair(Feature("shear", 22.0, 0.2), Feature("shear", found=False))
    assert only.center_cm1 == 22.0 and not only.offset_free
    with pytest.raises(InputError, match="negative"):
        stokes_pair(Feature("shear", 22.0, 0.2), Feature("shear", 22.0, 0.2))
    (ev,) = raman_evidence([f], "MoS2")
    assert ev.grid is None


def test_pl_is_weak_and_material_specific():
    """MoS2's PL drops by orders of magnitude from 1L to 2L (Mak et al., PRL 105, 136805
    (2010)); MoSe2's far less (Tonndorf et al. 2013; from memory): a PL at 0.8 of the
    monolayer's favours 1L for MoS2, and leaves 2L possible for MoSe2."""
    pl = PLFeature(True, None, None, 0.8, 0.2)
    (mos2,) = pl_evidence(pl, "MoS2")
    (mose2,) = pl_evidence(pl, "MoSe2")
    assert mos2.likelihood[1] < 0.2 and int(np.argmax(mos2.likelihood)) == 0
    assert mose2.likelihood[1] > 0.3
    energy, _ = pl_evidence(PLFeature(True, 1.88, 0.005, 1.0, 0.2), "MoS2")
    assert energy.likelihood.min() > 0.1  # the energy alone is weak evidence
    (none,) = pl_evidence(PLFeature(found=False), "MoS2")
    assert int(np.argmax(none.likelihood)) > 0


def test_si_line_attenuation_on_the_oxide_grid():
    """The Si line under 3L MoS2 from the optics model at a 289 nm oxide is read as 3L on a
    285 +- 5 nm oxide grid (thin-film model; Hsu et al. 2019 n,k)."""
    from flakebook.optics.absorptance import si_raman_attenuation
    from flakebook.optics.materials import get_material
    from flakebook.optics.substrate import Substrate

    mat = get_material("MoS2")
    truth = si_raman_attenuation(mat, [3], Substrate.from_oxide(289.0))[0]
    grid = parameter_grid("oxide_nm", 285.0, 5.0)
    ev = si_attenuation_evidence(truth, 0.01, "MoS2", Substrate.from_oxide(285.0), grid)
    assert ev.grid is not None and ev.grid.grid.parameter == "oxide_nm"
    assert combine([ev]).layers == 3
    with pytest.raises(InputError, match="oxide_nm"):
        si_attenuation_evidence(
            truth, 0.01, "MoS2", Substrate.from_oxide(285.0), raman_offset_grid()
        )


def test_afm_step_height():
    """Step = N x 0.615 nm + offset (MoS2 layer spacing, value from memory): a 2.35 +- 0.2 nm
    step with a 0.5 +- 0.4 nm offset is 3L; without the offset it would look like 4L."""
    ev = afm_evidence(2.35, 0.2, material="MoS2")
    assert combine([ev]).layers == 3
    raw = afm_evidence(2.35, 0.2, material="MoS2", offset_nm=0.0, offset_err_nm=0.0)
    assert combine([raw]).layers == 4
    with pytest.raises(InputError, match="AFM"):
        afm_evidence(2.0, 0.0, material="MoS2")


def test_calibration_from_known_flakes_returns_a_new_table():
    """A lab whose separations sit 1.0 cm^-1 above Lee et al.'s values (from memory) refits the
    table from flakes of known N: the observed N move to the lab's value and narrow, the others
    shift by the mean offset; the chain's bulk frequency is refitted; JSON round trip; the
    original table is unchanged (common practice, no source)."""
    table = load_rule_table("MoS2")
    before = table.to_json()
    rng = np.random.default_rng(1)
    flakes = [
        KnownFlake(int(n), "E2g-A1g separation", 1.0 + c + rng.normal(0, 0.2), 0.2)
        for n, c in [(1, 18.8), (2, 21.8)] * 4
    ]
    flakes += [KnownFlake(n, "shear mode", 30.0 * np.cos(np.pi / (2 * n)), 0.2) for n in (2, 3, 4)]
    new = calibrate_table(table, flakes)
    assert table.to_json() == before
    r0, r1 = table.rule("E2g-A1g separation"), new.rule("E2g-A1g separation")
    assert r1.center([1])[0] == pytest.approx(19.8, abs=0.3)
    assert r1.spread([1])[0] < 0.5 * r0.spread([1])[0]
    assert r1.center([4])[0] == pytest.approx(r0.center([4])[0] + 1.0, abs=0.3)
    assert new.rule("shear mode").chain_bulk_cm1 == pytest.approx(30.0, abs=0.1)
    assert "calibrated on 8" in r1.method
    again = RuleTable.from_json(new.to_json())
    assert again.to_dict() == json.loads(new.to_json())
    assert combine([_mos2_sep(19.8)]).layers == 1


def test_bad_input_is_refused_with_a_clear_message():
    """Unknown materials and laser lines, unusable features are refused (common practice)."""
    with pytest.raises(InputError, match="accepted"):
        load_rule_table("graphite")
    with pytest.raises(InputError, match="accepted lines"):
        load_rule_table("MoSe2", 785.0)
    assert load_rule_table("MoS2", 633.0).laser_nm == 633.0
    with pytest.raises(InputError, match="error > 0"):
        Feature("A1g", 404.0, 0.0)
    with pytest.raises(InputError, match="twice"):
        raman_evidence([Feature("A1g", 404.0, 0.2), Feature("A1g", 404.0, 0.2)], "MoS2")
    with pytest.raises(InputError, match="KnownFlake"):
        calibrate_table(load_rule_table("MoS2"), [(1, 19.0)])
