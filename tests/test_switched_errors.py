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
        (  # the same for a diode
            {"Vs": V, "R1": R, "D1": {"kind": "diode", "nodes": ["in", "sw"],
                                      "on_resistance": "1ohm", "off_resistance": "1ohm"}},
            {}, "switch_resistance", ("parts", "D1"),
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


BAD_FILES = {
    "switch_resistance": """
[circuit]
name = "bad"
[parts.Vs]
kind = "voltage_source"
nodes = ["in", "gnd"]
[parts.Q1]
kind = "switch"
nodes = ["in", "sw"]
on_resistance = "1ohm"
off_resistance = "0.5ohm"
[parts.R1]
kind = "resistor"
nodes = ["sw", "gnd"]
value = "10ohm"
""",
    "invalid_gate": """
[circuit]
name = "bad"
[parts.Vs]
kind = "voltage_source"
nodes = ["in", "gnd"]
[parts.Q1]
kind = "switch"
nodes = ["in", "sw"]
gate = "Vs"
[parts.R1]
kind = "resistor"
nodes = ["sw", "gnd"]
value = "10ohm"
""",
    "unknown_node": """
[circuit]
name = "bad"
[parts.Vs]
kind = "voltage_source"
nodes = ["in", "gnd"]
[parts.R1]
kind = "resistor"
nodes = ["in", "gnd"]
value = "10ohm"
[parts.T1]
kind = "transformer"
primary = ["in", "gnd"]
secondary = ["nowhere", "gnd"]
ratio = 4
""",
}


@pytest.mark.parametrize("code", sorted(BAD_FILES))
def test_the_command_line_prints_one_line_naming_the_part(code, tmp_path, capsys):
    from wirestate.cli import main

    path = tmp_path / "bad.toml"
    path.write_text(BAD_FILES[code])
    assert main(["inspect", str(path)]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and err.startswith(f"error: {path}: parts.")
    assert ("Q1" if code != "unknown_node" else "T1") in err
    assert "Traceback" not in err


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
