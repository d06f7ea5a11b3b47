"""The text specs shared by the command line and the window (flakebook.specs).

Common practice, no source: the syntax is the project's own (INTERFACE.md); these check that
what is accepted comes out as written and that refused text says what would be accepted.
"""

import math

import pytest

from flakebook.errors import InputError
from flakebook.specs import parse_channel_values, parse_layer_range, positive_float


@pytest.mark.parametrize(
    "text, expected",
    [
        ("1-10", list(range(1, 11))),
        ("1,2,5", [1, 2, 5]),
        ("1-3,7", [1, 2, 3, 7]),
        ("5,2,2", [2, 5]),
    ],
)
def test_layer_ranges(text, expected):
    assert parse_layer_range(text) == expected


@pytest.mark.parametrize("text", ["", "a", "3-1", "0-2", "1-200", "1.5"])
def test_layer_range_refusals_say_what_is_accepted(text):
    with pytest.raises(InputError) as err:
        parse_layer_range(text)
    assert repr(text) in str(err.value)
    assert "accepted" in str(err.value) or "from 1 to 100" in str(err.value)


@pytest.mark.parametrize("text", ["1,,2", "1,", ",3", " , "])
def test_layer_range_refuses_empty_items(text):
    """An empty item is a typing slip: refused with the accepted forms, not read as 1,2."""
    with pytest.raises(InputError, match="empty item.*1-10.*1,2,5"):
        parse_layer_range(text)


def test_layer_range_upper_bound_is_the_callers():
    assert parse_layer_range("1-15", max_layers=15)[-1] == 15
    with pytest.raises(InputError, match="from 1 to 15"):
        parse_layer_range("16", max_layers=15)


def test_channel_values():
    assert parse_channel_values(" r=0.012, g=0.011 ,b=1e-3", "Dark frame", ("r", "g", "b")) == {
        "r": 0.012,
        "g": 0.011,
        "b": 0.001,
    }


@pytest.mark.parametrize(
    "text, fragment",
    [
        ("0.1", "lacks a channel name; accepted: r=VALUE,g=VALUE,b=VALUE"),
        ("r=x", "'x' for channel r is not a number"),
        ("r=nan", "not a finite number"),
        ("", "is empty; accepted e.g. r=0.1,g=0.1,b=0.1"),
    ],
)
def test_channel_value_refusals(text, fragment):
    with pytest.raises(InputError, match="--contrast") as err:
        parse_channel_values(text, "--contrast", ("r", "g", "b"))
    assert fragment in str(err.value)


def test_positive_float():
    assert positive_float("--oxide-nm", 285.0) == 285.0
    assert positive_float("--oxide-nm", 0.0, allow_zero=True) == 0.0
    for bad in (0.0, -1.0, math.inf, math.nan):
        with pytest.raises(InputError, match="--oxide-nm .* accepted: a positive number"):
            positive_float("--oxide-nm", bad)
