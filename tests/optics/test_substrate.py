"""The --substrate / --oxide-nm syntax and hole descriptions (INTERFACE.md)."""

import pytest

from flakebook.errors import InputError
from flakebook.optics.substrate import Hole, Substrate, parse_substrate, substrate_from_options


def test_parse_examples_from_the_interface():
    """`SiO2:285,Si` and `Au:100,Ti:5,SiO2:285,Si` (INTERFACE.md): films top down, then the
    semi-infinite base; `--oxide-nm D` is short for `SiO2:D,Si`."""
    s = parse_substrate("SiO2:285,Si")
    assert [(f.material.name, f.thickness_nm) for f in s.films] == [("SiO2", 285.0)]
    assert s.base.name == "Si" and s.spec == "SiO2:285,Si"
    g = parse_substrate(" Au:100, Ti:5 ,SiO2:285,Si")
    assert [f.material.name for f in g.films] == ["Au", "Ti", "SiO2"]
    assert g.total_film_nm == pytest.approx(390.0)
    assert g.oxide_nm == 285.0 and g.with_oxide(290).oxide_nm == 290
    assert Substrate.from_oxide(285) == s
    assert substrate_from_options(None, 285.0) == s


@pytest.mark.parametrize(
    "spec, fragment",
    [
        ("", "empty"),
        ("SiO2,Si", "lacks a thickness"),
        ("SiO2:285,Si:500", "semi-infinite"),
        ("SiO2:abc,Si", "not a number"),
        ("SiO2:-5,Si", "not allowed"),
        ("Glassium:100,Si", "unknown material"),
        ("SiO2:285,,Si", "empty entry"),
    ],
)
def test_bad_specs_are_refused(spec, fragment):
    """Malformed stacks get a message saying what is wrong and what is accepted."""
    with pytest.raises(InputError, match=fragment):
        parse_substrate(spec)


def test_options_exclusive():
    """Exactly one of --oxide-nm and --substrate."""
    with pytest.raises(InputError, match="not both"):
        substrate_from_options("SiO2:285,Si", 285.0)
    with pytest.raises(InputError, match="missing"):
        substrate_from_options(None, None)


def test_holes():
    """Hole bottoms (INTERFACE.md): si etched into the films (default depth: all films above the
    Si), au an air gap above gold, open a through-hole."""
    sub = parse_substrate("Si3N4:50,SiO2:285,Si")
    films, base = Hole("si").below_membrane(sub)
    assert [(m.name, d) for m, d in films] == [("air", 335.0)] and base.name == "Si"
    films, base = Hole("si", 100.0).below_membrane(sub)
    assert [(m.name, d) for m, d in films] == [("air", 100.0), ("SiO2", 235.0)]
    films, base = Hole("au", 800.0).below_membrane(sub)
    assert [(m.name, d) for m, d in films] == [("air", 800.0)] and base.name == "Au"
    films, base = Hole("open").below_membrane(sub)
    assert films == [] and base.name == "air"
    with pytest.raises(InputError, match="accepted"):
        Hole("glass")
    with pytest.raises(InputError, match="deeper"):
        Hole("si", 400.0).below_membrane(sub)
