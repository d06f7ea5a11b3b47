"""Numbers and words for the user (flakebook.wording).

Rounding rule: the uncertainty to two significant figures and the value to the same decimal place
(JCGM 100:2008, "Guide to the expression of uncertainty in measurement", 7.2.6: the numerical
values of the estimate and its standard uncertainty should not be given with an excessive number
of digits; it is usually sufficient to quote the uncertainty to at most two significant digits).
"""

import pytest

from flakebook.wording import (
    CONTRAST_DEFINITION,
    count_text,
    layers_text,
    number_text,
    probability_phrase,
    probability_text,
    record_count_text,
    value_with_error,
)


@pytest.mark.parametrize(
    "value, error, unit, expected",
    [
        (0.469123, 0.000152, "", "0.46912 ± 0.00015"),
        (285.312, 2.07, "nm", "285.3 ± 2.1 nm"),
        (34.567, 5.12, "W/mK", "34.6 ± 5.1 W/mK"),
        (0.25, 0.0996, "", "0.25 ± 0.10"),  # 0.0996 rounds to 0.10: still two figures
        (1234.0, 123.0, "", "1230 ± 120"),
        (12345.0, 1500.0, "", "12300 ± 1500"),
        (1.23e-7, 4.5e-9, "", "(1.230 ± 0.045)e-07"),
        (0.5, 0.0, "", "0.5"),
        (0.5, None, "", "0.5"),
        (0.123456789, float("nan"), "", "0.1235"),
    ],
)
def test_value_with_error(value, error, unit, expected):
    assert value_with_error(value, error, unit) == expected


def test_signed_contrast():
    assert value_with_error(0.46912, 9.2e-05, signed=True) == "+0.469120 ± 0.000092"
    assert value_with_error(-0.061, 0.0015, signed=True) == "-0.0610 ± 0.0015"


@pytest.mark.parametrize(
    "p, expected",
    [
        (0.760209665135969, "0.76"),
        (7.56e-225, "< 0.01"),
        (0.999999999999998, "> 0.99"),
        (0.05, "0.05"),
        (None, "-"),
        (float("nan"), "-"),
    ],
)
def test_probability_text(p, expected):
    assert probability_text(p) == expected


def test_counts_in_plain_words():
    assert count_text(1, "sample") == "1 sample"
    assert count_text(2, "sample") == "2 samples"
    assert count_text(0, "spectrum", "spectra") == "0 spectra"
    assert record_count_text("appearance", 24) == "24 appearances of flakes"
    assert record_count_text("flake_hole", 14) == "14 flake-hole pairs"
    assert record_count_text("flake_hole", 1) == "1 flake-hole pair"
    assert record_count_text("image", 14) == "14 images"
    assert "_" not in record_count_text("new_kind", 3)


def test_layers_and_numbers():
    assert layers_text(3, 15) == "3L" and layers_text(16, 15) == ">15L"
    assert number_text(258.70312) == "258.7" and number_text(12) == "12"
    assert number_text(None) == "-"


def test_contrast_definition_is_the_designs():
    """DESIGN.md: C = (R_reference - R_flake)/R_reference, positive when the flake is darker."""
    assert "C = (R_reference - R_flake)/R_reference" in CONTRAST_DEFINITION
    assert "positive when the flake is darker" in CONTRAST_DEFINITION


def test_probability_phrase():
    assert probability_phrase(0.760209665135969) == "p = 0.76"
    assert probability_phrase(0.999999999999998) == "p > 0.99"
    assert probability_phrase(1e-9) == "p < 0.01"
    assert probability_phrase(None) == "p unknown"
