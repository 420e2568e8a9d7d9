"""Quantities with SI prefixes and units, read into floats in SI base units.

``"100uH"``, ``"4.7 kΩ"``, ``"2.2nF"``, ``"48V"``, ``"20ms"``, ``"1e-6"`` and plain numbers
are accepted. The unit, when given, must belong to the field's dimension; a bare number
(or a number with only a prefix, as in ``"100u"``) is taken in SI base units. Prefixes are
the SI ones from femto to tera (BIPM, The International System of Units, 9th ed., 2019,
table 7); ``u``, ``µ`` (micro sign) and ``μ`` (Greek mu) all mean 1e-6.

Resistances and capacitances are also read in the letter-and-digit code of IEC 60062
(marking codes for resistors and capacitors, clause on the letter and digit code; rule
recalled from memory): the letter stands where the decimal point would be and gives the
multiplier, ``R`` = 1, ``k``/``K`` = 1e3, ``M`` = 1e6, ``G`` = 1e9, ``T`` = 1e12 for
resistance and ``p``, ``n``, ``u``/``µ``, ``m`` and ``F`` = 1 for capacitance, so ``4k7``
is 4.7 kΩ, ``2R2`` 2.2 Ω, ``0R1`` and ``R1`` 0.1 Ω, ``4u7`` 4.7 µF and ``4n7`` 4.7 nF.
"""

from __future__ import annotations

import math
import re
import sys
from typing import Any

from wirestate.errors import QuantityError

PREFIXES: dict[str, float] = {
    "f": 1e-15,
    "p": 1e-12,
    "n": 1e-9,
    "u": 1e-6,
    "µ": 1e-6,
    "μ": 1e-6,
    "m": 1e-3,
    "": 1.0,
    "k": 1e3,
    "M": 1e6,
    "G": 1e9,
    "T": 1e12,
}

#: Accepted spellings per dimension. The key is the canonical unit used in messages.
UNITS: dict[str, tuple[str, ...]] = {
    "ohm": ("ohm", "ohms", "Ohm", "Ω", "Ω"),
    "H": ("H",),
    "F": ("F",),
    "V": ("V",),
    "A": ("A",),
    "S": ("S", "A/V"),
    "W": ("W",),
    "J": ("J",),
    "s": ("s",),
    "Hz": ("Hz",),
    "rad/s": ("rad/s",),
    "1": (),
    # electromechanical constants: rotary V*s/rad == N*m/A, linear V*s/m == N/A
    "V*s/rad": ("V*s/rad", "V·s/rad", "Vs/rad", "N*m/A", "N·m/A", "Nm/A"),
    "V*s/m": ("V*s/m", "V·s/m", "Vs/m", "N/A"),
    # mechanical
    "kg*m^2": ("kg*m^2", "kg·m^2", "kgm^2", "kg*m2", "kg·m²", "kg*m²"),
    "kg": ("kg",),
    "N*m*s/rad": ("N*m*s/rad", "N·m·s/rad", "Nms/rad", "N*m*s"),
    "N*m/rad": ("N*m/rad", "N·m/rad", "Nm/rad"),
    "N*m": ("N*m", "N·m", "Nm"),
    "N*s/m": ("N*s/m", "N·s/m", "Ns/m"),
    "N/m": ("N/m",),
    "N": ("N",),
    "V/A": ("V/A",),
    "ohm_gain": ("ohm", "ohms", "Ohm", "Ω", "Ω", "V/A"),
}

_NUMBER = re.compile(r"^\s*([+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?)\s*(.*?)\s*$")

#: IEC 60062 letter-and-digit code: decimal exponent of each multiplier letter per dimension
LETTER_CODES: dict[str, dict[str, int]] = {
    "ohm": {"R": 0, "k": 3, "K": 3, "M": 6, "G": 9, "T": 12},
    "F": {"p": -12, "n": -9, "u": -6, "µ": -6, "μ": -6, "m": -3, "F": 0},
}
# digits, one letter in place of the decimal point, at least one digit after it (a letter
# at the end is an SI prefix, read by the usual rule), then optionally the unit
_LETTER_CODE = re.compile(r"^\s*(\d*)([A-Za-zµμ])(\d+)\s*(\S*)\s*$")


def letter_code(text: str, unit: str) -> float | None:
    """Value of an IEC 60062 letter-and-digit code such as ``"4k7"`` (None if it is none).

    Parameters
    ----------
    text
        The code, optionally followed by the unit (``"4u7F"``).
    unit
        ``"ohm"`` or ``"F"`` (other dimensions have no letter code).

    Returns
    -------
    float or None
        The value in SI base units, or None when ``text`` is not such a code.
    """
    letters = LETTER_CODES.get("ohm" if unit == "ohm_gain" else unit)
    match = _LETTER_CODE.match(text) if letters else None
    if match is None or match.group(2) not in letters:
        return None
    whole, letter, fraction, tail = match.groups()
    if tail and tail not in _spellings(unit):
        return None
    # one decimal literal, so the value is the correctly rounded double of the code
    return float(f"{whole or '0'}.{fraction}e{letters[letter]}")


def parse_quantity(text: str | float | int, unit: str, *, field: str = "value") -> float:
    """Read a quantity in the dimension ``unit`` and return it in SI base units.

    Parameters
    ----------
    text
        A number, or a string: number, optional SI prefix, optional unit.
    unit
        Canonical unit key of :data:`UNITS` (``"1"`` for dimensionless).
    field
        Field name used in error messages.

    Returns
    -------
    float
        The value in SI base units.

    Raises
    ------
    QuantityError
        ``invalid_quantity`` when the text is not a number with prefix and unit,
        ``wrong_unit`` when the unit belongs to another dimension.
    """
    if isinstance(text, bool):
        raise QuantityError("invalid_quantity", f"{_lead(field)}expected a number, got {text!r}")
    if isinstance(text, int | float):
        value = float(text)
        if not math.isfinite(value):
            raise QuantityError("invalid_quantity", f"{_lead(field)}expected a finite number")
        return _normal(value, text, field)
    if not isinstance(text, str):
        raise QuantityError(
            "invalid_quantity",
            f"{_lead(field)}expected a number or a string like '4.7k{_display(unit)}', "
            f"got {type(text).__name__}",
        )
    coded = letter_code(text, unit)
    if coded is not None:
        return coded
    match = _NUMBER.match(text)
    if match is None:
        raise QuantityError(
            "invalid_quantity",
            f"{_lead(field)}cannot read {text!r} as a number with an optional SI prefix"
            + (f" and unit {_display(unit)}" if _display(unit) else ""),
        )
    number = float(match.group(1))
    rest = match.group(2).replace(" ", "")
    scale = _unit_scale(rest, unit)
    if scale is None and unit == "1":
        # "is not in  (accepted: a plain number...)" named no unit at all
        raise QuantityError(
            "wrong_unit",
            f"{_lead(field)}{text!r} carries a unit, but this value is a plain number "
            "(dimensionless, an SI prefix allowed)",
        )
    if scale is None:
        raise QuantityError(
            "wrong_unit",
            f"{_lead(field)}{text!r} is not in {_display(unit)} "
            f"(accepted: {', '.join(_spellings(unit))}, with an SI prefix)",
        )
    value = number * scale
    if not math.isfinite(value):
        raise QuantityError("invalid_quantity", f"{_lead(field)}{text!r} is not finite")
    if value == 0.0 and any(c in "123456789" for c in match.group(1).split("e")[0].lower()):
        value = math.ulp(0.0)  # rounded to zero: refused below like any subnormal value
    return _normal(value, text, field)


def _normal(value: float, text: Any, field: str) -> float:
    """``value``, unless it is a subnormal double (0 < |value| < 2.2e-308, or a non-zero
    number that rounded to 0): no part is that small, and its reciprocal (a conductance,
    a time constant) would overflow to infinity in the equations."""
    if value != 0.0 and abs(value) < sys.float_info.min:
        raise QuantityError(
            "invalid_quantity",
            f"{_lead(field)}{text!r} is below the smallest normal double "
            f"({sys.float_info.min:.3g}); no physical value is that small",
        )
    return value


def parse_tolerance(text: str | float | int, *, field: str = "tolerance") -> float:
    """Read a tolerance (``"10%"``, ``"50ppm"`` or a fraction such as ``0.05``).

    Returns the relative tolerance as a fraction in [0, 1).
    """
    if isinstance(text, bool):
        raise QuantityError(
            "invalid_quantity", f"{_lead(field)}expected a percentage, got {text!r}"
        )
    if isinstance(text, int | float):
        value = float(text)
    elif isinstance(text, str):
        s = text.strip().replace(" ", "")
        try:
            if s.endswith("%"):
                value = float(s[:-1]) / 100.0
            elif s.endswith("ppm"):
                value = float(s[:-3]) * 1e-6
            else:
                value = float(s)
        except ValueError:
            raise QuantityError(
                "invalid_quantity",
                f"{_lead(field)}cannot read {text!r} as a tolerance such as '5%' or '100ppm'",
            ) from None
    else:
        raise QuantityError("invalid_quantity", f"{_lead(field)}expected a percentage such as '5%'")
    if not (0.0 <= value < 1.0) or not math.isfinite(value):
        raise QuantityError(
            "out_of_range", f"{_lead(field)}a tolerance must lie in [0 %, 100 %), got {text!r}"
        )
    return value


def format_quantity(value: float, unit: str, digits: int = 4) -> str:
    """Render ``value`` (SI base units) with an engineering prefix, e.g. ``4.7 kΩ``."""
    shown = _display(unit)
    if value == 0 or not math.isfinite(value):
        return f"{value:g} {shown}".rstrip()
    exponent = int(math.floor(math.log10(abs(value)) / 3) * 3)
    exponent = max(-15, min(12, exponent))
    symbol = {
        -15: "f",
        -12: "p",
        -9: "n",
        -6: "µ",
        -3: "m",
        0: "",
        3: "k",
        6: "M",
        9: "G",
        12: "T",
    }[exponent]
    mantissa = value / 10.0**exponent
    return f"{mantissa:.{digits}g} {symbol}{shown}".rstrip()


#: a value below this fraction of the size of the terms it was computed from is taken as a
#: numerical zero when shown (double precision resolves about 1e-16 of each term; sums,
#: solves and long runs lose a few digits; common practice, no source)
ROUND_OFF = 1e-12


def zero_round_off(values, sizes):
    """``values`` with every entry below :data:`ROUND_OFF` times its ``sizes`` entry set to
    zero (arrays or scalars; ``sizes`` broadcast against ``values``). Non-finite values are
    kept. For display only: a ``-206 fA`` that is round-off of a 20 A signal reads 0."""
    import numpy as np

    out = np.array(values, dtype=float)
    size = np.broadcast_to(np.abs(np.asarray(sizes, dtype=float)), out.shape)
    small = np.isfinite(out) & (np.abs(out) < ROUND_OFF * size)
    out[small] = 0.0
    return out if out.ndim else float(out)


#: unit symbols a signal unit is written with: the SI base units and the derived units
#: with special names (BIPM, The International System of Units, 9th ed., 2019, tables 2
#: and 4), ``ohm`` as well as ``Ω``, and ``1`` for a dimensionless signal
SI_SYMBOLS = frozenset(
    "m kg s A K mol cd rad sr Hz N Pa J W C V F ohm Ω Ω S Wb T H Gy Sv 1".split()
)
_UNIT_FACTOR = re.compile(r"^([A-Za-zΩΩ]+|1)(?:\^([+-]?\d+))?$")


def is_si_unit(text: str) -> bool:
    """True for a signal unit written in SI symbols without prefix: products and quotients
    of :data:`SI_SYMBOLS` with integer powers (``V``, ``rad/s``, ``N*m``, ``kg*m^2``,
    ``1/s``), or one of the spellings :data:`UNITS` accepts (``Nm``, ``V·s/rad``).

    A state-space block's matrices are in SI base units, so a prefixed unit (``mV``) or a
    word (``volts``) would misstate them.
    """
    if any(text in spellings for spellings in UNITS.values()) or text in UNITS:
        return True
    factors = re.split(r"[*·/]", text)
    return all(
        (match := _UNIT_FACTOR.match(f)) is not None and match.group(1) in SI_SYMBOLS
        for f in factors
    )


def same_unit(a: str, b: str) -> bool:
    """True when two signal units name the same unit: equal as written, or two spellings
    :data:`UNITS` accepts for one unit (``N*m`` and ``Nm``, ``ohm`` and ``Ω``)."""
    if a == b:
        return True
    keys_a = {key for key, spellings in UNITS.items() if a == key or a in spellings}
    keys_b = {key for key, spellings in UNITS.items() if b == key or b in spellings}
    return bool(keys_a & keys_b)


def format_count(n: int, noun: str) -> str:
    """``"1 state"``, ``"3 states"``: a count with its (regular English) noun in the right
    number."""
    return f"{n} {noun}" if n == 1 else f"{n} {noun}s"


def _lead(field: str) -> str:
    return f"{field}: " if field else ""


def _display(unit: str) -> str:
    return {"ohm": "Ω", "ohm_gain": "Ω", "1": ""}.get(unit, unit)


def _spellings(unit: str) -> tuple[str, ...]:
    if unit not in UNITS:
        raise ValueError(f"internal: unknown unit key {unit!r}")
    return UNITS[unit]


def _unit_scale(rest: str, unit: str) -> float | None:
    if rest == "":
        return 1.0
    # longest spelling first so that "mH" is milli-henry and "Hz" is not "H" + "z"
    for spelling in sorted(_spellings(unit), key=len, reverse=True):
        if rest.endswith(spelling):
            prefix = rest[: -len(spelling)]
            if prefix in PREFIXES:
                return PREFIXES[prefix]
    if rest in PREFIXES:
        # prefix only, e.g. "100u" for 100 µF on a capacitor
        return PREFIXES[rest]
    return None
