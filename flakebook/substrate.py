"""The substrate stack as the command line writes it: ``SiO2:285,Si`` (pure parsing, no physics).

Layers run from the top down, each ``MATERIAL:THICKNESS_NM``; the last one is semi-infinite and has
no thickness. ``--oxide-nm D`` is short for ``SiO2:D,Si`` (INTERFACE.md). Material names are only
checked to be non-empty here; the optics package checks them against its material library.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from flakebook.errors import InputError

_ACCEPTED = "accepted: layers from the top down, e.g. SiO2:285,Si or Au:100,Ti:5,SiO2:285,Si"


@dataclass(frozen=True)
class SubstrateLayer:
    """One layer of a substrate stack; ``thickness_nm`` is None for the semi-infinite bottom."""

    material: str
    thickness_nm: float | None = None

    def to_dict(self) -> dict:
        """``{"material", "thickness_nm"}`` (the project file's and JSON's form)."""
        return {"material": self.material, "thickness_nm": self.thickness_nm}


def check_stack(layers) -> tuple[SubstrateLayer, ...]:
    """Check a stack (SubstrateLayer objects or ``{"material", "thickness_nm"}`` dicts).

    Every layer but the last needs a finite positive thickness; the last is semi-infinite
    (thickness None). Returns the stack as a tuple of :class:`SubstrateLayer`.
    """
    out = []
    for item in layers:
        if isinstance(item, SubstrateLayer):
            layer = item
        elif isinstance(item, dict):
            layer = SubstrateLayer(str(item.get("material", "")), item.get("thickness_nm"))
        else:
            raise InputError(f"substrate layer {item!r} is not a layer; {_ACCEPTED}")
        out.append(layer)
    if not out:
        raise InputError(f"the substrate stack is empty; {_ACCEPTED}")
    for i, layer in enumerate(out):
        if not layer.material.strip():
            raise InputError(f"substrate layer {i + 1} has no material name; {_ACCEPTED}")
        last = i == len(out) - 1
        if last and layer.thickness_nm is not None:
            raise InputError(
                f"the bottom substrate layer {layer.material} is semi-infinite and takes no "
                f"thickness; {_ACCEPTED}"
            )
        if not last:
            t = layer.thickness_nm
            if t is None or not isinstance(t, int | float) or not math.isfinite(t) or t <= 0:
                raise InputError(
                    f"substrate layer {layer.material} needs a positive thickness in nm, "
                    f"not {t!r}; {_ACCEPTED}"
                )
            out[i] = SubstrateLayer(layer.material.strip(), float(t))
        else:
            out[i] = SubstrateLayer(layer.material.strip(), None)
    return tuple(out)


def parse_substrate(spec: str) -> tuple[SubstrateLayer, ...]:
    """Parse ``--substrate SPEC`` (``SiO2:285,Si``) into layers from the top down."""
    text = str(spec).strip()
    if not text:
        raise InputError(f"--substrate is empty; {_ACCEPTED}")
    layers = []
    parts = [p.strip() for p in text.split(",")]
    for i, part in enumerate(parts):
        last = i == len(parts) - 1
        if ":" in part:
            name, _, value = part.partition(":")
            try:
                thickness = float(value)
            except ValueError:
                raise InputError(
                    f"--substrate {spec!r}: {value!r} is not a thickness in nm; {_ACCEPTED}"
                ) from None
            if last:
                raise InputError(
                    f"--substrate {spec!r}: the last layer ({name}) is semi-infinite and takes "
                    f"no thickness; {_ACCEPTED}"
                )
            layers.append(SubstrateLayer(name.strip(), thickness))
        else:
            if not last:
                raise InputError(
                    f"--substrate {spec!r}: layer {part!r} needs a thickness (MATERIAL:NM); "
                    f"{_ACCEPTED}"
                )
            layers.append(SubstrateLayer(part, None))
    try:
        return check_stack(layers)
    except InputError as exc:
        raise InputError(f"--substrate {spec!r}: {exc}") from None


def oxide_stack(oxide_nm: float) -> tuple[SubstrateLayer, ...]:
    """The stack of ``--oxide-nm D``: SiO2 of D nm on semi-infinite Si."""
    return check_stack([SubstrateLayer("SiO2", oxide_nm), SubstrateLayer("Si", None)])


def format_substrate(layers) -> str:
    """The SPEC text of a stack (the inverse of :func:`parse_substrate`)."""
    parts = []
    for layer in check_stack(layers):
        if layer.thickness_nm is None:
            parts.append(layer.material)
        else:
            parts.append(f"{layer.material}:{layer.thickness_nm:g}")
    return ",".join(parts)
