"""IEC 60063 preferred values (E6, E12, E24, E48, E96): tables, neighbours, snapping.

The tables are carried in the package (``wirestate/data/iec60063.json``) exactly as listed
in IEC 60063:2015, not recomputed: the E24 series departs from ``round(10 * 10**(i/24))``
at 2.7, 3.0, 3.3, 3.6, 3.9, 4.3, 4.7 and 8.2, and only the standard's values are right.
A value of the series in decade ``d`` is ``mantissa * 10**(d - digits + 1)``, where the
mantissa has two (E6-E24) or three (E48, E96) significant digits.
"""

from __future__ import annotations

import bisect
import json
import math
from functools import cache
from importlib import resources

from wirestate.errors import TuningError

SERIES_NAMES: tuple[str, ...] = ("E6", "E12", "E24", "E48", "E96")


@cache
def _tables() -> dict[str, tuple[int, ...]]:
    text = resources.files("wirestate").joinpath("data/iec60063.json").read_text("utf-8")
    data = json.loads(text)
    return {name: tuple(int(v) for v in data[name]) for name in SERIES_NAMES}


def series_mantissas(series: str) -> tuple[int, ...]:
    """The integer mantissas of one decade of ``series`` (e.g. E24 -> 10, 11, ..., 91).

    Raises
    ------
    TuningError
        ``invalid_field`` for a series name outside E6, E12, E24, E48, E96.
    """
    key = str(series).upper()
    if key not in SERIES_NAMES:
        raise TuningError(
            "invalid_field",
            f"unknown preferred-value series {series!r}; expected one of {', '.join(SERIES_NAMES)}",
            location=("series",),
        )
    return _tables()[key]


def series_values(series: str) -> tuple[float, ...]:
    """One decade of ``series`` as floats in [1, 10): E12 -> 1.0, 1.2, ..., 8.2."""
    mantissas = series_mantissas(series)
    scale = 10.0 if mantissas[0] < 100 else 100.0
    return tuple(m / scale for m in mantissas)


def _decade_values(series: str, decade: int) -> list[float]:
    # value = mantissa * 10**exponent, built from integers so that e.g. 4.7e-6 prints cleanly
    mantissas = series_mantissas(series)
    digits = 2 if mantissas[0] < 100 else 3
    exponent = decade - digits + 1
    return [float(f"{m}e{exponent}") for m in mantissas]


def _check_positive(value: float) -> float:
    value = float(value)
    if not (math.isfinite(value) and value > 0):
        raise TuningError(
            "out_of_range", f"a preferred value needs a positive finite number, got {value!r}"
        )
    return value


def neighbours(value: float, series: str = "E24") -> tuple[float, float]:
    """The preferred values just below-or-equal and just above-or-equal ``value``.

    Works across decades (for example 9.5 in E24 gives (9.1, 10.0)). A value that is
    itself preferred (to 1e-9 relative) is returned twice.

    Parameters
    ----------
    value
        A positive number in SI base units.
    series
        ``"E6"``, ``"E12"``, ``"E24"``, ``"E48"`` or ``"E96"``.
    """
    value = _check_positive(value)
    decade = math.floor(math.log10(value))
    candidates = (
        _decade_values(series, decade - 1)
        + _decade_values(series, decade)
        + _decade_values(series, decade + 1)
    )
    for c in candidates:
        if math.isclose(c, value, rel_tol=1e-9):
            return c, c
    index = bisect.bisect_left(candidates, value)
    return candidates[index - 1], candidates[index]


def snap(value: float, series: str = "E24") -> float:
    """The preferred value nearest to ``value`` on a logarithmic scale.

    Preferred series are geometric, so "nearest" is measured as ``|log(v / value)|``
    (a tie goes to the lower value).
    """
    low, high = neighbours(value, series)
    if low == high:
        return low
    return low if math.log(value / low) <= math.log(high / value) else high


def candidates(value: float, series: str = "E24", count: int = 1) -> list[float]:
    """Preferred values around ``value``: ``count`` below and ``count`` above, ascending.

    A value that is itself preferred is included, together with ``count`` neighbours on
    each side.
    """
    low, high = neighbours(value, series)
    below, above = [low], [high]
    if low == high:
        below = [neighbours(low * (1 - 1e-6), series)[0]]
        above = [neighbours(high * (1 + 1e-6), series)[1]]
    while len(below) < count:
        below.append(neighbours(below[-1] * (1 - 1e-6), series)[0])
    while len(above) < count:
        above.append(neighbours(above[-1] * (1 + 1e-6), series)[1])
    middle = [low] if low == high else []
    return sorted(set(below + middle + above))
