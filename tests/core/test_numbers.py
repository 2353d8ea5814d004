"""Numbers a person reads: significant digits, a floor, no exponents (common practice, no source)."""

import math

import pytest

from rigside.core.numbers import format_number


@pytest.mark.parametrize("value,text", [
    (9e-262, "< 0.0001"),          # an L-ratio seen in a trial
    (5.98e-32, "< 0.0001"),        # a missed fraction seen in a trial
    (-3e-7, "> -0.0001"),
    (0.0, "0"),
    (0.00012345, "0.000123"),
    (0.0123456, "0.0123"),
    (1.5, "1.5"),
    (183.4, "183"),
    (999.7, "1000"),
    (12345.6, "12,346"),
    (math.nan, "undefined"),
    (None, "undefined"),
    (math.inf, "infinite"),
])
def test_format_number(value, text):
    assert format_number(value) == text


def test_signed_changes_keep_their_sign():
    assert format_number(12.34, signed=True) == "+12.3"
    assert format_number(-12.34, signed=True) == "-12.3"
    assert format_number(0.0, signed=True) == "0"


def test_no_exponent_is_ever_shown():
    for e in range(-300, 300, 7):
        for m in (1.0, 2.345, 9.99):
            assert "e" not in format_number(m * 10.0 ** e).replace("undefined", "").replace("infinite", "")
