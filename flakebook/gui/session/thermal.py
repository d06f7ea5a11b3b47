"""Thermometry in the session: what the thermal and kappa views show, series imports and kappa
results with their undo. The physics runs in :mod:`flakebook.pipeline_thermal`.
"""

from __future__ import annotations

from pathlib import Path

from flakebook.gui.commands import Undo
from flakebook.store import (
    ExternalResult,
    Flake,
    Sample,
    Spectrum,
    ThermometryResult,
    ThermometrySeries,
)


class Thermal:
    """Reads for the thermometry views; series import and kappa with their undo."""

    def thermal_details(self, flake_id: int) -> dict:
        """A flake's series (fitted points and lines), coefficients and latest kappa."""
        from flakebook import pipeline_thermal as pt

        p = self.project
        flake = self._get(Flake, flake_id)
        sample = p.get(Sample, flake.sample_id)
        coeff = pt.latest_coefficients(p, flake)
        kappa = pt.latest_kappa(p, flake)
        out = {
            "id": flake.id,
            "label": flake.label,
            "material": sample.material,
            "series": {},
            "coefficients": None,
            "kappa": None,
            "externals": [
                {
                    "kappa_w_mk": e.kappa_w_mk,
                    "kappa_p16_w_mk": e.kappa_p16_w_mk,
                    "kappa_p84_w_mk": e.kappa_p84_w_mk,
                    "method": e.method,
                }
                for e in p.external_results_of(flake)
            ],  # fmt: skip
        }
        if coeff is not None:
            out["series"] = dict(coeff.details.get("series", {}))
            out["coefficients"] = {
                "chi_t_cm1_per_k": coeff.chi_t_cm1_per_k,
                "chi_t_err_cm1_per_k": coeff.chi_t_err_cm1_per_k,
                "chi_p_cm1_per_mw": coeff.chi_p_cm1_per_mw,
                "chi_p_err_cm1_per_mw": coeff.chi_p_err_cm1_per_mw,
                "warnings": list(coeff.details.get("warnings", [])),
                "supported": coeff.details.get("supported"),
                "stale": coeff.stale,
            }
        if kappa is not None:
            res = kappa.details.get("result", {})
            inputs = kappa.details.get("inputs", {})
            out["kappa"] = {
                "id": kappa.id,
                "kappa_w_mk": kappa.kappa_w_mk,
                "kappa_p16_w_mk": kappa.kappa_p16_w_mk,
                "kappa_p84_w_mk": kappa.kappa_p84_w_mk,
                "absorptance": kappa.absorptance,
                "absorptance_err": kappa.absorptance_err,
                "hole_bottom": inputs.get("hole_bottom"),
                "hole_depth_nm": inputs.get("hole_depth_nm"),
                "laser_nm": inputs.get("laser_nm"),
                "beam_radius_um": inputs.get("beam_radius_um"),
                "hole_radius_um": inputs.get("hole_radius_um"),
                "variance_share": dict(res.get("variance_share", {})),
                "warnings": list(res.get("warnings", [])),
                "options": dict((kappa.parameters or {}).get("options", {})),
                "stale": kappa.stale,
            }
        return out

    def thermal_flakes(self) -> list[int]:
        """Ids of the flakes with a thermometry series."""
        return sorted({s.flake_id for s in self.project.records(ThermometrySeries)})

    def kappa_points(self) -> list[dict]:
        """Every flake's latest kappa (ours and imported) against its layer number."""
        from flakebook import pipeline_thermal as pt

        p = self.project
        out = []
        for fid in sorted({r.flake_id for r in p.records(ThermometryResult)} |
                          {r.flake_id for r in p.records(ExternalResult)}):  # fmt: skip
            flake = p.get(Flake, fid)
            asg = p.latest_assignment(flake)
            k = pt.latest_kappa(p, flake)
            if k is not None:
                out.append({
                    "id": fid, "label": flake.label, "source": "flakebook",
                    "layers": k.layers or (asg.layers if asg else None),
                    "kappa_w_mk": k.kappa_w_mk, "kappa_p16_w_mk": k.kappa_p16_w_mk,
                    "kappa_p84_w_mk": k.kappa_p84_w_mk, "stale": k.stale, "method": k.method,
                })  # fmt: skip
            ext = p.external_results_of(flake)
            if ext and ext[-1].kappa_w_mk is not None and asg is not None:
                e = ext[-1]
                out.append({
                    "id": fid, "label": flake.label, "source": "external", "layers": asg.layers,
                    "kappa_w_mk": e.kappa_w_mk, "kappa_p16_w_mk": e.kappa_p16_w_mk,
                    "kappa_p84_w_mk": e.kappa_p84_w_mk, "stale": False, "method": e.method,
                })  # fmt: skip
        return [r for r in out if r["layers"] is not None]

    def series_powers(self, path: str | Path) -> list[float]:
        """The powers (mW at the sample) of a power series before it is imported."""
        from flakebook.pipeline_thermal import series_files

        return [f.value for f in series_files(path, "power")]

    def import_series(
        self, flake_id: int, kind: str, path: str | Path, *, max_power_mw: float | None = None
    ) -> Undo:
        """Import a series onto a flake and fit it; the undo removes what was added."""
        from flakebook.pipeline_thermal import import_series

        p = self.project
        fid = self._r("flake", flake_id)
        series, result = import_series(p, p.get(Flake, fid), kind, path, max_power_mw=max_power_mw)
        made = [(ThermometryResult, result.id)]
        made += [(Spectrum, s.id) for s in p.spectra_of_series(series)]
        made.append((ThermometrySeries, series.id))
        return self._undo_made(made)

    def kappa_job(self, flake_id: int, options):
        """A worker function computing kappa with ``options`` (inputs read now, on this
        thread); it returns (inputs, result) for :meth:`store_kappa`."""
        from flakebook.pipeline_thermal import kappa_inputs, run_kappa

        inputs = kappa_inputs(self.project, self._get(Flake, flake_id), options)

        def run(progress=None, cancel=None):
            return inputs, run_kappa(inputs, progress=progress, cancel=cancel)

        return run

    def store_kappa(self, inputs: dict, result) -> Undo:
        """Record a kappa computed by :meth:`kappa_job`; the undo removes it."""
        from flakebook.pipeline_thermal import store_kappa

        rec = store_kappa(self.project, inputs, result)
        return self._undo_made([(ThermometryResult, rec.id)])
