"""Each bad switched-circuit input gives one wirestate error naming the part."""

from __future__ import annotations

import pytest

from tests.conftest import circuit
from wirestate.errors import WirestateError
from wirestate.simulate.switched import SwitchedEngine
from wirestate.switching import SwitchedCircuit

V = {"kind": "voltage_source", "nodes": ["in", "gnd"], "value": 12}
R = {"kind": "resistor", "nodes": ["sw", "gnd"], "value": 10}


@pytest.mark.parametrize(
    ("parts", "outputs", "code", "location"),
    [
        (  # off_resistance not larger than on_resistance
            {"Vs": V, "R1": R, "Q1": {"kind": "switch", "nodes": ["in", "sw"],
                                      "on_resistance": 5, "off_resistance": 1}},
            {}, "switch_resistance", ("parts", "Q1"),
        ),
        (  # the gate names a source input, not an input of its own
            {"Vs": V, "R1": R, "Q1": {"kind": "switch", "nodes": ["in", "sw"], "gate": "Vs"}},
            {}, "invalid_gate", ("parts", "Q1", "gate"),
        ),
        (  # the gate names an output
            {"Vs": V, "R1": R, "Q1": {"kind": "switch", "nodes": ["in", "sw"], "gate": "v"}},
            {"v": {"voltage": "sw"}}, "invalid_gate", ("parts", "Q1", "gate"),
        ),
        (  # a transformer winding node no other part connects to
            {"Vs": V, "R1": R, "T1": {"kind": "transformer", "primary": ["in", "gnd"],
                                      "secondary": ["nowhere", "gnd"], "ratio": 2}},
            {}, "unknown_node", ("parts", "T1", "secondary"),
        ),
    ],
)  # fmt: skip
def test_bad_switched_input_gives_one_error(parts, outputs, code, location):
    with pytest.raises(WirestateError) as info:
        circuit(parts, outputs)
    assert info.value.code == code
    assert info.value.location == location
    assert "\n" not in str(info.value)


def test_chattering_diodes_are_refused_with_the_parts_named():
    # a diode biased exactly at its threshold with a bound of zero changes cannot settle
    from wirestate.spec import parse_circuit

    data = {
        "circuit": {"name": "c"},
        "parts": {
            "Vs": V,
            "D1": {"kind": "diode", "nodes": ["in", "sw"]},
            "C1": {"kind": "capacitor", "nodes": ["sw", "gnd"], "value": 1e-6},
        },
    }
    sc = SwitchedCircuit(parse_circuit(data))
    engine = SwitchedEngine(sc, max_changes=0)
    with pytest.raises(WirestateError) as info:
        engine.apply([12.0])
    assert info.value.code == "switching_chatter"
    assert "D1" in info.value.message
