"""Plausibility warnings: each condition raises its warning, and only then."""

from __future__ import annotations

from flakebook.thermal.warnings import OPTICAL_PHONON_NOTE, plausibility_warnings


def _has(warns, text):
    return any(text in w for w in warns)


def test_each_warning_fires_on_its_condition():
    """Common practice, no source: R/W < 3, a rise above ~100 K, a hole comparable to the
    phonon mean free paths, a series not in vacuum, light through the membrane, a beam off
    centre by more than W/2; and always the optical-phonon note."""
    quiet = plausibility_warnings(
        10.0, 0.5, max_temperature_rise_k=50.0, in_vacuum=True, transmittance=0.01
    )
    assert quiet == (OPTICAL_PHONON_NOTE,)
    assert _has(plausibility_warnings(1.2, 0.5), "only 2.4 times the beam radius")
    assert _has(plausibility_warnings(10.0, 0.5, max_temperature_rise_k=150.0), "150 K")
    assert _has(plausibility_warnings(2.0, 0.5), "mean free")
    assert _has(plausibility_warnings(10.0, 0.5, mean_free_path_um=5.0), "mean free")
    assert _has(plausibility_warnings(10.0, 0.5, in_vacuum=False), "kappa reads high")
    assert _has(plausibility_warnings(10.0, 0.5, transmittance=0.3), "hole's bottom")
    assert _has(plausibility_warnings(10.0, 0.5, beam_offset_um=0.4), "off the hole centre")
    assert not _has(plausibility_warnings(10.0, 0.5, beam_offset_um=0.2), "off the hole")
