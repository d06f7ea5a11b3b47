"""Plausibility warnings of a Raman-thermometry result (plain text, one sentence each)."""

from __future__ import annotations

OPTICAL_PHONON_NOTE = (
    "the Raman temperature is that of the optical phonons, which can differ from that of the "
    "acoustic phonons that carry the heat; kappa assumes they are the same"
)


def plausibility_warnings(
    hole_radius_um: float,
    beam_radius_um: float,
    *,
    max_temperature_rise_k: float | None = None,
    mean_free_path_um: float = 1.0,
    mean_free_path_factor: float = 3.0,
    in_vacuum: bool | None = None,
    transmittance: float | None = None,
    transmittance_threshold: float = 0.05,
    beam_offset_um: float = 0.0,
    max_rise_k: float = 100.0,
) -> tuple[str, ...]:
    """Warnings about the geometry and conditions of a measurement, and the optical-phonon note.

    ``mean_free_path_um``: the phonon mean free path below which most of the heat is carried
    (default 1 um); a hole radius below ``mean_free_path_factor`` times it is warned of.
    ``in_vacuum``: False warns of gas conduction and convection; None says nothing.
    ``transmittance``: the membrane's, at the laser; above the threshold warns of the light
    heating the hole's bottom.
    """
    out: list[str] = []
    ratio = hole_radius_um / beam_radius_um
    if ratio < 3:
        out.append(
            f"the hole radius is only {ratio:.1f} times the beam radius (3 or more advised): the "
            "result depends strongly on W and on the edge condition"
        )
    if beam_offset_um and abs(beam_offset_um) > beam_radius_um / 2:
        out.append(
            f"the beam is {abs(beam_offset_um):.2g} um off the hole centre, more than half its "
            "radius; the off-centre model is used and the centring uncertainty matters"
        )
    if max_temperature_rise_k is not None and max_temperature_rise_k > max_rise_k:
        out.append(
            f"the temperature rise at the highest power is about {max_temperature_rise_k:.0f} K "
            f"(above {max_rise_k:.0f} K): kappa varies over the heated region and the flake may "
            "change; lower powers are advised"
        )
    if hole_radius_um < mean_free_path_factor * mean_free_path_um:
        out.append(
            f"the hole radius ({hole_radius_um:.3g} um) is comparable to the phonon mean free "
            f"paths that carry most of the heat (about {mean_free_path_um:.3g} um): boundary "
            "scattering may lower the measured value below the diffusive one"
        )
    if in_vacuum is False:
        out.append(
            "the series was not taken in vacuum: gas conduction and convection add heat loss, "
            "so the membrane reads cooler and kappa reads high"
        )
    if transmittance is not None and transmittance > transmittance_threshold:
        out.append(
            f"{transmittance:.0%} of the light passes the membrane and may heat the hole's "
            "bottom, which then warms the membrane from below"
        )
    out.append(OPTICAL_PHONON_NOTE)
    return tuple(out)
