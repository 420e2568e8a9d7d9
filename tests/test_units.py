"""Reading quantities with SI prefixes (BIPM, The International System of Units, 9th ed.,
2019, table 7 for the prefixes)."""

from __future__ import annotations

import pytest

from wirestate.errors import WirestateError
from wirestate.units import format_quantity, parse_quantity, parse_tolerance


@pytest.mark.parametrize(
    ("text", "unit", "expected"),
    [
        ("100uH", "H", 100e-6),
        ("100 µH", "H", 100e-6),
        ("100μH", "H", 100e-6),
        ("4.7kΩ", "ohm", 4.7e3),
        ("4.7 kohm", "ohm", 4.7e3),
        ("2.2nF", "F", 2.2e-9),
        ("470u", "F", 470e-6),
        ("48V", "V", 48.0),
        ("20ms", "s", 20e-3),
        ("1us", "s", 1e-6),
        ("1e-6", "s", 1e-6),
        ("10 kHz", "Hz", 1e4),
        ("3 MHz", "Hz", 3e6),
        ("2 mS", "S", 2e-3),
        ("0.05 N*m/A", "V*s/rad", 0.05),
        ("12 mΩ", "ohm", 12e-3),
        (330, "ohm", 330.0),
        (1.5, "1", 1.5),
    ],
)
def test_quantities(text, unit, expected):
    assert parse_quantity(text, unit) == pytest.approx(expected, rel=1e-15)


@pytest.mark.parametrize(
    ("text", "unit", "code"),
    [
        ("100uF", "H", "wrong_unit"),
        ("4.7 kV", "ohm", "wrong_unit"),
        ("kx47", "ohm", "invalid_quantity"),
        ("", "V", "invalid_quantity"),
        (True, "V", "invalid_quantity"),
        ("1e999", "V", "invalid_quantity"),
        ("3 xF", "F", "wrong_unit"),
    ],
)
def test_bad_quantities(text, unit, code):
    with pytest.raises(WirestateError) as info:
        parse_quantity(text, unit)
    assert info.value.code == code


def test_tolerances():
    assert parse_tolerance("10%") == pytest.approx(0.10)
    assert parse_tolerance("50ppm") == pytest.approx(50e-6)
    assert parse_tolerance(0.05) == 0.05
    with pytest.raises(WirestateError):
        parse_tolerance("lots")


def test_format_round_trip():
    assert format_quantity(4.7e3, "ohm") == "4.7 kΩ"
    assert format_quantity(100e-6, "H") == "100 µH"
    assert parse_quantity(format_quantity(2.2e-9, "F").replace(" ", ""), "F") == pytest.approx(
        2.2e-9
    )


# IEC 60062, letter-and-digit code for resistance and capacitance (rule from memory): the
# letter takes the place of the decimal point and carries the multiplier. Examples worked
# by that rule; exact decimal parsing, so equality to the double of the decimal literal.
@pytest.mark.parametrize(
    ("text", "unit", "expected"),
    [
        ("4k7", "ohm", 4.7e3),
        ("2R2", "ohm", 2.2),
        ("0R1", "ohm", 0.1),
        ("R47", "ohm", 0.47),
        ("1M5", "ohm", 1.5e6),
        ("4K7", "ohm", 4.7e3),
        ("4u7", "F", 4.7e-6),
        ("4µ7F", "F", 4.7e-6),
        ("4n7", "F", 4.7e-9),
        ("p68", "F", 0.68e-12),
        ("2m2", "F", 2.2e-3),
        ("1F5", "F", 1.5),
        ("k47", "ohm", 470.0),
    ],
)
def test_iec_60062_letter_and_digit_code(text, unit, expected):
    assert parse_quantity(text, unit) == expected


def test_letter_code_follows_the_rule_for_every_letter_and_digit_split():
    from hypothesis import given
    from hypothesis import strategies as st

    from wirestate.units import LETTER_CODES

    digits = st.text(alphabet="0123456789", min_size=0, max_size=3)

    @given(digits, st.text(alphabet="0123456789", min_size=1, max_size=3), st.data())
    def check(whole, fraction, data):
        unit = data.draw(st.sampled_from(["ohm", "F"]))
        letter = data.draw(st.sampled_from(sorted(LETTER_CODES[unit])))
        exponent = LETTER_CODES[unit][letter]
        expected = float(f"{whole or '0'}.{fraction}") * 10.0**exponent
        # the standard's rule: decimal point at the letter, times its multiplier; 1e-15
        # relative covers the one rounding of the product above
        assert parse_quantity(f"{whole}{letter}{fraction}", unit) == pytest.approx(
            expected, rel=1e-15, abs=0
        )

    check()


@pytest.mark.parametrize(
    ("text", "unit"), [("4k7", "H"), ("2R2", "F"), ("4u7", "ohm"), ("4k7V", "ohm")]
)
def test_letter_code_only_where_the_standard_has_it(text, unit):
    with pytest.raises(WirestateError):
        parse_quantity(text, unit)
