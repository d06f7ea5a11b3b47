"""Warnings of the layer likelihood that protect against a confidently wrong answer."""

from __future__ import annotations

from flakebook.optics.layers import layer_likelihood
from flakebook.optics.materials import get_material
from flakebook.optics.microscope import Microscope, channel_contrast
from flakebook.optics.substrate import Substrate


def test_exact_oxide_where_contrast_swings_with_it_is_flagged():
    """MoSe2 on 285 nm SiO2: the green contrast of few-layer flakes swings strongly with the
    oxide thickness (a thin-film interference fringe near 550 nm; the issue names this case).
    A contrast rendered on 288 nm and read as exactly 285 nm must carry a warning that names
    the oxide; given a 3 nm oxide uncertainty, the true 3L must come out most likely. The
    rendering uses flakebook's own model (a self-consistency check, no outside source)."""
    mat = get_material("MoSe2")
    mic = Microscope(na_illumination=0.3)
    truth = channel_contrast(mat, [3], Substrate.from_oxide(288.0), mic)
    meas = dict(zip(truth.channels, truth.contrast[0]))
    err = dict.fromkeys(truth.channels, 0.002)
    exact = layer_likelihood(
        meas, err, material=mat, substrate=Substrate.from_oxide(285.0), microscope=mic
    )
    assert any("oxide" in w and "--oxide-err-nm" in w for w in exact.warnings)
    loose = layer_likelihood(
        meas,
        err,
        material=mat,
        substrate=Substrate.from_oxide(285.0),
        microscope=mic,
        oxide_err_nm=3.0,
    )
    assert loose.posterior().layers == 3
    assert not any("--oxide-err-nm" in w for w in loose.warnings)
