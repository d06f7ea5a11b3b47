"""The sample's substrate stack and its holes, and the ``--substrate`` / ``--oxide-nm`` syntax.

A substrate lists its films from the top down, each a material with a thickness in nm, above a
semi-infinite base (usually Si): ``SiO2:285,Si`` or ``Au:100,Ti:5,SiO2:285,Si``. A hole under a
suspended flake is described by its bottom (``si``: etched into the top films, by default down to
the base; ``au``: an air gap above a gold layer; ``open``: a through-hole, air on both sides) and
its depth in nm.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

from flakebook.errors import InputError
from flakebook.optics.materials import AIR, Material, get_material

HOLE_BOTTOMS = ("si", "au", "open")


@dataclass(frozen=True)
class Film:
    """One film of a stack: a material and its thickness in nm."""

    material: Material
    thickness_nm: float


@dataclass(frozen=True)
class Substrate:
    """Films (top down) above a semi-infinite ``base``; light arrives from ``ambient`` (air)."""

    films: tuple[Film, ...]
    base: Material
    ambient: Material = AIR

    @classmethod
    def from_oxide(cls, oxide_nm: float) -> Substrate:
        """SiO2 of ``oxide_nm`` on Si (the ``--oxide-nm`` shorthand)."""
        oxide_nm = _thickness("--oxide-nm", oxide_nm)
        return cls((Film(get_material("SiO2"), oxide_nm),), get_material("Si"))

    @property
    def spec(self) -> str:
        """The stack in ``--substrate`` syntax."""
        parts = [f"{f.material.name}:{f.thickness_nm:g}" for f in self.films]
        return ",".join([*parts, self.base.name])

    @property
    def oxide_index(self) -> int | None:
        """Index of the topmost SiO2 film (the one whose thickness is calibrated), or None."""
        for i, f in enumerate(self.films):
            if f.material.name == "SiO2":
                return i
        return None

    @property
    def oxide_nm(self) -> float | None:
        """Thickness of the topmost SiO2 film, or None without one."""
        i = self.oxide_index
        return None if i is None else self.films[i].thickness_nm

    def with_oxide(self, oxide_nm: float) -> Substrate:
        """The same stack with the topmost SiO2 film ``oxide_nm`` thick."""
        i = self.oxide_index
        if i is None:
            raise InputError(
                f"substrate {self.spec} has no SiO2 film whose thickness could be varied; "
                "accepted: a stack with a SiO2 layer (e.g. SiO2:285,Si)"
            )
        films = list(self.films)
        films[i] = Film(films[i].material, max(float(oxide_nm), 0.0))
        return replace(self, films=tuple(films))

    @property
    def total_film_nm(self) -> float:
        """Total thickness of the films above the base."""
        return float(sum(f.thickness_nm for f in self.films))

    def layer_list(self) -> list[tuple[Material, float]]:
        """Films as (material, thickness_nm), top down (the base not included)."""
        return [(f.material, f.thickness_nm) for f in self.films]


@dataclass(frozen=True)
class Hole:
    """A hole in the substrate under a suspended flake.

    ``bottom``: ``si`` (etched into the films, the default, leaving what lies below ``depth_nm``),
    ``au`` (an air gap of ``depth_nm`` above gold, thick enough to be taken as opaque) or ``open``
    (a through-hole: air below the membrane). ``depth_nm`` None means the total thickness of the
    films above the base (for ``si`` and ``au``).
    """

    bottom: str = "si"
    depth_nm: float | None = None

    def __post_init__(self) -> None:
        if self.bottom not in HOLE_BOTTOMS:
            raise InputError(
                f"hole bottom {self.bottom!r} is unknown; accepted: {', '.join(HOLE_BOTTOMS)}"
            )
        if self.depth_nm is not None:
            _thickness("--hole-depth-nm", self.depth_nm)

    def depth_for(self, substrate: Substrate) -> float:
        """The air-gap depth in nm under the membrane for ``substrate``."""
        if self.bottom == "open":
            return float("inf")
        if self.depth_nm is None:
            return substrate.total_film_nm
        return float(self.depth_nm)

    def below_membrane(self, substrate: Substrate) -> tuple[list[tuple[Material, float]], Material]:
        """What lies under the membrane: films (material, nm) top down, and the semi-infinite base."""
        if self.bottom == "open":
            return [], AIR
        depth = self.depth_for(substrate)
        if self.bottom == "au":
            return ([(AIR, depth)] if depth > 0 else []), get_material("Au")
        # si: the hole removes the top `depth` nm of the films.
        films: list[tuple[Material, float]] = [(AIR, depth)] if depth > 0 else []
        remaining = depth
        for f in substrate.films:
            if remaining >= f.thickness_nm:
                remaining -= f.thickness_nm
                continue
            films.append((f.material, f.thickness_nm - remaining))
            remaining = 0.0
        if remaining > 1e-9:
            raise InputError(
                f"hole depth {depth:g} nm is deeper than the films of {substrate.spec} "
                f"({substrate.total_film_nm:g} nm); accepted: up to the film thickness for a "
                "hole etched down to the base"
            )
        return films, substrate.base


def _thickness(name: str, value) -> float:
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise InputError(f"{name} {value!r} is not a number; accepted: a thickness in nm") from None
    if not (v >= 0 and v < 1e7):
        raise InputError(f"{name} {value!r} is not allowed; accepted: a thickness from 0 nm")
    return v


def parse_substrate(spec: str) -> Substrate:
    """Parse ``--substrate``: films top down as ``MATERIAL:THICKNESS_NM``, then the base.

    ``"SiO2:285,Si"``, ``"Au:100,Ti:5,SiO2:285,Si"``. Material names are checked against the
    material library; raises :class:`InputError` saying what is wrong.
    """
    if not isinstance(spec, str) or not spec.strip():
        raise InputError(
            "--substrate is empty; accepted: films top down then the base, e.g. SiO2:285,Si"
        )
    parts = [p.strip() for p in spec.split(",")]
    if any(not p for p in parts):
        raise InputError(f"--substrate {spec!r} has an empty entry; accepted e.g. SiO2:285,Si")
    films = []
    for p in parts[:-1]:
        if ":" not in p:
            raise InputError(
                f"--substrate {spec!r}: film {p!r} lacks a thickness; accepted: MATERIAL:THICKNESS_NM "
                "for every layer but the last (e.g. SiO2:285,Si)"
            )
        name, thick = p.rsplit(":", 1)
        films.append(
            Film(get_material(name), _thickness(f"--substrate thickness of {name}", thick))
        )
    last = parts[-1]
    if ":" in last:
        raise InputError(
            f"--substrate {spec!r}: the last layer {last!r} is the semi-infinite base and takes no "
            "thickness; accepted e.g. SiO2:285,Si"
        )
    return Substrate(tuple(films), get_material(last))


def substrate_from_options(spec: str | None, oxide_nm: float | None) -> Substrate:
    """The substrate from ``--substrate`` or ``--oxide-nm`` (exactly one of them)."""
    if spec is not None and oxide_nm is not None:
        raise InputError("give either --oxide-nm or --substrate, not both")
    if spec is not None:
        return parse_substrate(spec)
    if oxide_nm is not None:
        return Substrate.from_oxide(oxide_nm)
    raise InputError("the substrate is missing; accepted: --oxide-nm D or --substrate SPEC")
