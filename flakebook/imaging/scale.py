"""Image scale: micrometres per pixel.

From an objective preset (``resources/objectives.json``, an editable table whose shipped values
are examples to be replaced by a calibration) or from a line of known length drawn over a scale
bar or across a known hole pitch. Pixel coordinates follow INTERFACE.md (origin at the top-left
pixel's centre, x to the right, y down).
"""

from __future__ import annotations

import json
import math
import os
from dataclasses import dataclass

from flakebook.errors import InputError


@dataclass(frozen=True)
class Objective:
    """One objective preset: name, magnification, numerical aperture and image scale."""

    name: str
    magnification: float
    na: float
    um_per_px: float
    um_per_px_err: float = 0.0
    example: bool = False


@dataclass(frozen=True)
class Scale:
    """The scale of one image.

    Attributes:
        um_per_px: micrometres per pixel (square pixels).
        um_per_px_err: its standard deviation.
        method: ``"objective"``, ``"line"`` or ``"given"``.
        source: what it came from (preset name and table, or the line's end points and length).
    """

    um_per_px: float
    um_per_px_err: float = 0.0
    method: str = "given"
    source: str = ""

    def to_dict(self) -> dict:
        return {
            "um_per_px": self.um_per_px,
            "um_per_px_err": self.um_per_px_err,
            "method": self.method,
            "source": self.source,
        }


def given_scale(um_per_px: float, um_per_px_err: float = 0.0) -> Scale:
    """A scale stated by the user; checks it is a positive finite number."""
    if not (isinstance(um_per_px, int | float) and math.isfinite(um_per_px) and um_per_px > 0):
        raise InputError(
            f"scale {um_per_px!r} um per pixel is not allowed; accepted: a positive number"
        )
    if not (math.isfinite(um_per_px_err) and um_per_px_err >= 0):
        raise InputError(f"scale error {um_per_px_err!r}; accepted: zero or a positive number")
    return Scale(float(um_per_px), float(um_per_px_err), "given", "stated by the user")


def load_objectives(path: str | os.PathLike | None = None) -> dict[str, Objective]:
    """The objective presets, by name, from ``path`` or the shipped example table."""
    if path is None:
        from flakebook._resources import resource_path

        path = resource_path("objectives.json")
    try:
        with open(path, encoding="utf-8") as fh:
            data = json.load(fh)
        out = {}
        for row in data["objectives"]:
            obj = Objective(
                name=str(row["name"]),
                magnification=float(row["magnification"]),
                na=float(row["na"]),
                um_per_px=float(row["um_per_px"]),
                um_per_px_err=float(row.get("um_per_px_err", 0.0)),
                example=bool(row.get("example", False)),
            )
            if not (obj.um_per_px > 0 and 0 < obj.na < 1.6):
                raise ValueError(f"preset {obj.name}: um_per_px and na must be positive")
            out[obj.name] = obj
    except (OSError, ValueError, KeyError, TypeError) as exc:
        raise InputError(
            f"{path}: not a usable objective table ({exc}); accepted: JSON with a list "
            '"objectives" of {"name", "magnification", "na", "um_per_px"}'
        ) from None
    return out


def scale_from_objective(name: str, table: dict[str, Objective] | None = None) -> Scale:
    """The scale of an objective preset by name (e.g. ``"50x"``)."""
    table = load_objectives() if table is None else table
    if name not in table:
        raise InputError(
            f"objective {name!r} is not in the preset table; accepted: {', '.join(table)}"
        )
    obj = table[name]
    note = " (example value, not calibrated)" if obj.example else ""
    return Scale(obj.um_per_px, obj.um_per_px_err, "objective", f"preset {obj.name}{note}")


def scale_from_line(
    start_px: tuple[float, float],
    end_px: tuple[float, float],
    length_um: float,
    *,
    length_err_um: float = 0.0,
    endpoint_err_px: float = 0.5,
) -> Scale:
    """The scale from a line of known length (a scale bar, or N hole pitches).

    Args:
        start_px, end_px: the line's ends (x, y) in pixels.
        length_um: its true length in micrometres.
        length_err_um: the standard deviation of that length.
        endpoint_err_px: how precisely each end was placed (standard deviation along the line).

    Returns:
        A :class:`Scale` whose error combines the end-point placement (two ends) and the length.
    """
    dx = float(end_px[0]) - float(start_px[0])
    dy = float(end_px[1]) - float(start_px[1])
    d = math.hypot(dx, dy)
    if not (math.isfinite(length_um) and length_um > 0):
        raise InputError(f"line length {length_um!r} um; accepted: a positive number")
    if not math.isfinite(d) or d < 2.0:
        raise InputError(
            f"line from {start_px} to {end_px} is {d:.3g} px long; accepted: a line at least 2 px long"
        )
    s = length_um / d
    rel = math.hypot(math.sqrt(2.0) * endpoint_err_px / d, length_err_um / length_um)
    return Scale(
        s,
        s * rel,
        "line",
        f"{length_um:g} um over {d:.2f} px from ({start_px[0]:g}, {start_px[1]:g}) "
        f"to ({end_px[0]:g}, {end_px[1]:g})",
    )
