"""Generated circuits: uniform ladders for cable and winding models.

A line of length ``l`` with per-metre ``R', L', C'`` is commonly approximated by ``n``
identical sections, each a series resistor and inductor followed by a shunt capacitor
(lumped-element model of a transmission line, e.g. Paul, Analysis of Multiconductor
Transmission Lines, 2nd ed., sec. 4.4.2).
"""

from __future__ import annotations

from typing import Any

from wirestate.spec.circuit import CircuitSpec
from wirestate.spec.load import validate


def ladder_data(
    sections: int,
    *,
    resistance: float,
    inductance: float,
    capacitance: float,
    name: str = "ladder",
    load_resistance: float | None = None,
) -> dict[str, Any]:
    """A uniform R-L-C ladder as the mapping a circuit TOML file would hold.

    Section ``k`` (1-based) has ``R<k>`` from ``n<k-1>`` to ``m<k>``, ``L<k>`` from ``m<k>``
    to ``n<k>`` and ``C<k>`` from ``n<k>`` to ground; ``Vs`` drives ``n0``. Outputs:
    ``v_end`` (last node) and ``i_in`` (first inductor). ``resistance`` may be 0, in
    which case the series resistors are left out (lossless LC ladder).
    """
    if sections < 1:
        raise ValueError("a ladder needs at least one section")
    parts: dict[str, Any] = {"Vs": {"kind": "voltage_source", "nodes": ["n0", "gnd"]}}
    for k in range(1, sections + 1):
        start = f"n{k - 1}"
        if resistance > 0:
            parts[f"R{k}"] = {"kind": "resistor", "nodes": [start, f"m{k}"], "value": resistance}
            start = f"m{k}"
        parts[f"L{k}"] = {"kind": "inductor", "nodes": [start, f"n{k}"], "value": inductance}
        parts[f"C{k}"] = {"kind": "capacitor", "nodes": [f"n{k}", "gnd"], "value": capacitance}
    if load_resistance is not None:
        parts["Rload"] = {
            "kind": "resistor",
            "nodes": [f"n{sections}", "gnd"],
            "value": load_resistance,
        }
    return {
        "circuit": {"name": name},
        "parts": parts,
        "outputs": {"v_end": {"voltage": f"n{sections}"}, "i_in": {"current": "L1"}},
    }


def ladder(sections: int, **kwargs: Any) -> CircuitSpec:
    """:func:`ladder_data`, validated."""
    return validate(CircuitSpec, ladder_data(sections, **kwargs))
