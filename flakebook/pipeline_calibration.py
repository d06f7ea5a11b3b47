"""A sample's layer calibration from its own flakes of known layer number, recorded in a project.

The command line (``flakebook calibrate PROJECT --sample NAME``) and the window's calibration
dialog both go through here: :func:`known_flakes` lists the sample's flakes whose layer number is
known (set by hand, or confirmed: status or tag ``confirmed``) with the contrast their survey
measured, :func:`calibration_job` prepares the fit (``flakebook.optics.calibration``) as work
for a worker, and :func:`store_layer_calibration` records the result on the sample (the whole fit
in ``Calibration.model``) and marks the sample's contrast evidence stale, so that the next
recompute re-reads it with the calibration. What a re-read changed is said in words by
:func:`describe_change` and listed by :func:`layer_changes`. No Qt here.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

from flakebook.errors import InputError, check_cancel
from flakebook.store import Calibration, Image, Project, Sample

#: The fewest flakes of known layer number a calibration is fitted from: the oxide, the contrast
#: scale and the n,k coefficients need more than one or two (common practice, no source).
MIN_KNOWN_FLAKES = 3
CONFIRMED = "confirmed"


@dataclass(frozen=True)
class KnownOnSample:
    """A flake of the sample whose layer number is known, and its measured contrast (None when
    no survey measured it on the bare substrate)."""

    flake_id: int
    label: str
    layers: int
    how: str
    contrast: dict | None
    contrast_err: dict | None
    image_id: int | None

    @property
    def usable(self) -> bool:
        return bool(self.contrast)

    @property
    def text(self) -> str:
        return f"{self.label} {self.layers}L"


def _contrast_method() -> str:
    from flakebook.pipeline import CONTRAST_METHOD

    return CONTRAST_METHOD


def known_flakes(project: Project, sample: Sample) -> list[KnownOnSample]:
    """The sample's flakes of known layer number: the latest assignment set by hand, or a flake
    marked confirmed (status or tag ``confirmed``) with an assignment. Each with the contrast of
    its primary terrace measured on the bare substrate (the latest such evidence)."""
    method = _contrast_method()
    out = []
    for flake in project.flakes_of(sample):
        latest = project.latest_assignment(flake)
        if latest is None:
            continue
        if latest.manual:
            how = f"set by hand ({latest.reason})" if latest.reason else "set by hand"
        elif flake.status == CONFIRMED or CONFIRMED in flake.tags:
            how = "confirmed"
        else:
            continue
        tid = project.primary_terrace_id(flake)
        found = None
        for e in project.evidence_of(flake):
            prm = e.parameters
            if e.method != method or prm.get("geometry", "supported") != "supported":
                continue
            if tid is not None and e.terrace_id not in (tid, None):
                continue
            if isinstance(prm.get("contrast"), dict) and prm["contrast"]:
                found = e
        out.append(
            KnownOnSample(
                flake_id=flake.id,
                label=flake.label,
                layers=int(latest.layers),
                how=how,
                contrast=None if found is None else dict(found.parameters["contrast"]),
                contrast_err=None
                if found is None
                else dict(found.parameters.get("contrast_err") or {}),
                image_id=None if found is None else found.parameters.get("image_id"),
            )
        )
    return out


def _missing_message(usable: list[KnownOnSample], known: list[KnownOnSample]) -> str:
    found = ", ".join(k.text for k in usable) or "none"
    msg = (
        f"calibration needs flakes of known N on this sample: {len(usable)} found ({found}); "
        f"mark at least {MIN_KNOWN_FLAKES} flakes' layer numbers by hand or confirm them by "
        "spectra"
    )
    unmeasured = [k.text for k in known if not k.usable]
    if unmeasured:
        msg += (
            f"; {', '.join(unmeasured)} have no contrast measured on the bare substrate "
            "(find flakes on an image of them first)"
        )
    return msg


def choose_known(
    project: Project, sample: Sample, labels: Sequence[str] | None = None
) -> list[KnownOnSample]:
    """The known flakes a calibration uses: all usable ones, or those named in ``labels``.
    InputError (in words: what is missing, what would do) when they cannot calibrate."""
    known = known_flakes(project, sample)
    usable = [k for k in known if k.usable]
    if labels:
        by_label = {k.label: k for k in known}
        chosen = []
        for lab in labels:
            k = by_label.get(lab)
            if k is None:
                names = ", ".join(x.text for x in usable) or "none"
                raise InputError(
                    f"flake {lab!r} is not a flake of known N on sample {sample.name} (its layer "
                    f"number is neither set by hand nor confirmed); accepted: {names}"
                )
            if not k.usable:
                raise InputError(
                    f"flake {lab} ({k.layers}L) has no contrast measured on the bare substrate; "
                    "find flakes on an image of it first, or leave it out"
                )
            if k not in chosen:
                chosen.append(k)
        if len(chosen) < MIN_KNOWN_FLAKES:
            raise InputError(_missing_message(chosen, chosen))
        return chosen
    if len(usable) < MIN_KNOWN_FLAKES:
        raise InputError(_missing_message(usable, known))
    return usable


def calibration_job(project: Project, sample: Sample, labels: Sequence[str] | None = None):
    """Read what a calibration of ``sample`` needs from the project (on the caller's thread) and
    return ``(run, chosen)``: ``run(progress=None, cancel=None)`` fits it
    (``flakebook.optics.calibration.calibrate_layers``) without touching the project, so a
    worker thread can run it; ``chosen`` the known flakes it uses."""
    from flakebook.optics.calibration import KnownFlake
    from flakebook.pipeline import optics_inputs

    chosen = choose_known(project, sample, labels)
    image_ids = [k.image_id for k in chosen if k.image_id is not None]
    image = project.get(Image, image_ids[0]) if image_ids else None
    if image is None:
        raise InputError(f"sample {sample.name} has no image its known flakes were measured in")
    flakes = [KnownFlake(k.layers, k.contrast, k.contrast_err or {}, k.label) for k in chosen]

    def run(progress=None, cancel=None):
        from flakebook.optics.calibration import calibrate_layers

        check_cancel(cancel)
        if progress is not None:
            progress(0.1, "fitting the oxide, contrast scale and n,k model")
        material, substrate, microscope = optics_inputs(sample, image)
        cal = calibrate_layers(
            flakes, material=material, substrate=substrate, microscope=microscope
        )
        check_cancel(cancel)
        if progress is not None:
            progress(1.0, "done")
        return cal

    return run, chosen


def store_layer_calibration(project: Project, sample: Sample, cal) -> tuple[Calibration, list[int]]:
    """Record a ``LayerCalibration`` on ``sample`` (the whole fit in ``model``) and mark the
    sample's contrast evidence stale (recompute re-reads it with the calibration), in one
    transaction. Returns the record and the ids of the evidence marked stale."""
    method = _contrast_method()
    sample = project.get(Sample, sample.id)
    light = str(cal.optical_model.get("light", ""))
    channels = ("mono",) if light.startswith("wavelength_nm") else ("r", "g", "b")
    marked = []
    with project.transaction():
        rec = project.add_calibration(
            sample,
            oxide_nm=cal.oxide_nm,
            oxide_err_nm=cal.oxide_err_nm,
            contrast_scale={c: cal.contrast_scale for c in channels},
            contrast_scale_err={c: cal.contrast_scale_err for c in channels},
            method="layer calibration: " + str(cal.optical_model.get("method", "")),
            notes=f"from {len(cal.flakes_used)} flakes of known N: {', '.join(cal.flakes_used)}",
            model=cal.to_dict(),
        )
        for flake in project.flakes_of(sample):
            for e in project.evidence_of(flake):
                if e.method == method and not e.stale:
                    project.update(e, stale=True)
                    marked.append(e.id)
    return project.get(Calibration, rec.id), marked


def calibration_date(rec: Calibration | None) -> str:
    """The day a calibration was made (``YYYY-MM-DD``), or its id when the date is unknown."""
    if rec is None:
        return ""
    if rec.created_at:
        return str(rec.created_at)[:10]
    return f"#{rec.id}"


def calibration_summary(rec: Calibration | None) -> str:
    """The calibration in use, in words: oxide with its error, contrast scale, date."""
    if rec is None or rec.oxide_nm is None:
        return "none: the nominal oxide of the sample's stack"
    scale = list(rec.contrast_scale.values())
    scale_err = list(rec.contrast_scale_err.values())
    s = f", contrast scale {scale[0]:.3f} ± {scale_err[0]:.3f}" if scale and scale_err else ""
    used = rec.model.get("flakes_used") if rec.model else None
    n = f", from {len(used)} known flakes" if used else ""
    return (
        f"oxide {rec.oxide_nm:.1f} ± {rec.oxide_err_nm or 0:.1f} nm{s}{n} "
        f"(calibration of {calibration_date(rec)})"
    )


def model_used(project: Project, sample: Sample) -> dict:
    """What a contrast likelihood of ``sample`` is read with now: the substrate, the oxide and
    the calibration (id and date), for the evidence's parameters (``model``)."""
    from flakebook.pipeline import calibration_record
    from flakebook.substrate import format_substrate

    rec = calibration_record(project, sample)
    nominal = next((lay.thickness_nm for lay in sample.substrate if lay.material == "SiO2"), None)
    return {
        "substrate": format_substrate(sample.substrate),
        "oxide_nm": float(rec.oxide_nm) if rec is not None else nominal,
        "calibration_id": None if rec is None else rec.id,
        "calibration_date": None if rec is None else calibration_date(rec),
    }


def describe_change(old: dict | None, new: dict | None) -> str:
    """Why a re-read may give another answer, in words: the calibration, the oxide or the
    substrate it was read with before (``old``) and now (``new``), as from :func:`model_used`."""
    new = new or {}
    old = old or {}
    if new.get("calibration_id") is not None and new.get("calibration_id") != old.get(
        "calibration_id"
    ):
        return f"re-read with the calibration of {new.get('calibration_date')}"
    if new.get("calibration_id") is None and old.get("calibration_id") is not None:
        return "re-read without a calibration (the sample's calibration was removed)"
    if old.get("substrate") and new.get("substrate") != old.get("substrate"):
        return f"re-read on the substrate {new.get('substrate')} (was {old.get('substrate')})"
    if old.get("oxide_nm") is not None and new.get("oxide_nm") != old.get("oxide_nm"):
        return f"re-read with oxide {new.get('oxide_nm'):g} nm (was {old.get('oxide_nm'):g} nm)"
    return "re-read after its evidence changed"


def layer_numbers(project: Project, sample: Sample) -> dict[int, int | None]:
    """Each flake of the sample and its current layer number (None without one)."""
    out = {}
    for f in project.flakes_of(sample):
        a = project.latest_assignment(f)
        out[f.id] = None if a is None else a.layers
    return out


def layer_changes(project: Project, sample: Sample, before: dict[int, int | None]) -> list[dict]:
    """The flakes whose layer number changed since ``before`` (from :func:`layer_numbers`), each
    with the reason the new assignment gives (``{"flake_id", "from_layers", "to_layers",
    "reason"}``)."""
    out = []
    for f in project.flakes_of(sample):
        a = project.latest_assignment(f)
        now = None if a is None else a.layers
        if f.id in before and before[f.id] != now:
            out.append(
                {
                    "flake_id": f.label,
                    "from_layers": before[f.id],
                    "to_layers": now,
                    "reason": (a.reason if a is not None else "") or "",
                }
            )
    return out


__all__ = [
    "MIN_KNOWN_FLAKES",
    "KnownOnSample",
    "calibration_job",
    "calibration_summary",
    "choose_known",
    "describe_change",
    "known_flakes",
    "layer_changes",
    "layer_numbers",
    "model_used",
    "store_layer_calibration",
]
