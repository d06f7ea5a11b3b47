"""Parsing ``--substrate SPEC`` as INTERFACE.md writes it."""

from __future__ import annotations

import pytest

from flakebook.errors import InputError
from flakebook.substrate import SubstrateLayer, format_substrate, oxide_stack, parse_substrate


def test_interface_examples():
    assert parse_substrate("SiO2:285,Si") == (SubstrateLayer("SiO2", 285.0), SubstrateLayer("Si"))
    assert parse_substrate(" Au:100, Ti:5 ,SiO2:285,Si") == (
        SubstrateLayer("Au", 100.0),
        SubstrateLayer("Ti", 5.0),
        SubstrateLayer("SiO2", 285.0),
        SubstrateLayer("Si"),
    )
    assert oxide_stack(90) == parse_substrate("SiO2:90,Si")
    assert format_substrate(parse_substrate("Au:100,Ti:5,SiO2:285,Si")) == "Au:100,Ti:5,SiO2:285,Si"
    assert parse_substrate("Si") == (SubstrateLayer("Si"),)


@pytest.mark.parametrize(
    "spec, words",
    [
        ("", "empty"),
        ("SiO2:285,Si:500", "semi-infinite"),
        ("SiO2,Si", "needs a thickness"),
        ("SiO2:abc,Si", "not a thickness"),
        ("SiO2:-5,Si", "positive thickness"),
        ("SiO2:nan,Si", "positive thickness"),
        (":285,Si", "no material"),
        ("SiO2:285,", "no material"),
    ],
)
def test_bad_specs(spec, words):
    with pytest.raises(InputError, match=words) as info:
        parse_substrate(spec)
    assert "accepted" in str(info.value)
