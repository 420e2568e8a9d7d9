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
        ("k47", "ohm", "invalid_quantity"),
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
