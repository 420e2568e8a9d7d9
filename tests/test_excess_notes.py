"""A capacitor with no state of its own (directly across a source, or closing a loop of
capacitors and sources), or an inductor in series with a current source, is explained in
``inspect``; an output that would need its current or voltage names it."""

from __future__ import annotations

import json

import pytest

from tests.conftest import circuit
from wirestate.cli import main
from wirestate.errors import TopologyError

ACROSS = {
    "Vs": {"kind": "voltage_source", "nodes": ["a", "gnd"], "value": "12V"},
    "C1": {"kind": "capacitor", "nodes": ["a", "gnd"], "value": "10uF"},
    "R1": {"kind": "resistor", "nodes": ["a", "b"], "value": "1kohm"},
    "C2": {"kind": "capacitor", "nodes": ["b", "gnd"], "value": "1uF"},
}
SERIES = {
    "Is": {"kind": "current_source", "nodes": ["gnd", "a"]},
    "L1": {"kind": "inductor", "nodes": ["a", "b"], "value": "1mH"},
    "R1": {"kind": "resistor", "nodes": ["b", "gnd"], "value": "1ohm"},
    "C1": {"kind": "capacitor", "nodes": ["b", "gnd"], "value": "1uF"},
}


def test_a_capacitor_across_a_source_has_a_note_saying_why_it_has_no_state():
    block = circuit(ACROSS, {"v_b": {"voltage": "b"}})
    # the order is circuit-minimal: 2 capacitors - 1 capacitor/source loop = 1 state
    # (normal-tree rule, Chua and Lin 1975, ch. 8)
    assert block.states == ["v_C2"]
    note = next(n for n in block.notes if n.startswith("C1 "))
    assert "no state of its own" in note and "directly across voltage source Vs" in note
    assert "v_C1 = v_Vs" in note


def test_an_inductor_in_series_with_a_current_source_has_a_note():
    block = circuit(SERIES, {"v_b": {"voltage": "b"}})
    assert block.states == ["v_C1"]
    note = next(n for n in block.notes if n.startswith("L1 "))
    assert "in series with current source Is" in note and "i_L1 = i_Is" in note


def test_a_capacitor_closing_a_loop_of_capacitors_names_them():
    parts = dict(ACROSS)
    del parts["C1"]
    parts["C3"] = {"kind": "capacitor", "nodes": ["a", "c"], "value": "1uF"}
    parts["C4"] = {"kind": "capacitor", "nodes": ["c", "gnd"], "value": "2uF"}
    parts["R4"] = {"kind": "resistor", "nodes": ["c", "gnd"], "value": "1kohm"}
    block = circuit(parts, {"v_c": {"voltage": "c"}})
    excess = [n for n in block.notes if "closes a loop with" in n]
    assert len(excess) == 1 and "voltage source Vs" in excess[0]


@pytest.mark.parametrize(
    ("parts", "output", "named", "source"),
    [
        (ACROSS, {"i_C1": {"current": "C1"}}, "C1", "Vs"),
        (SERIES, {"v_a": {"voltage": "a"}}, "L1", "Is"),
    ],
)
def test_an_output_that_needs_the_derivative_names_the_part(parts, output, named, source):
    with pytest.raises(TopologyError) as err:
        circuit(parts, output)
    message = err.value.message
    assert err.value.code == "output_needs_derivative"
    assert f"{named} has no state of its own" in message and f"input {source}" in message


def test_inspect_prints_the_note(tmp_path, capsys):
    text = """
[circuit]
name = "across"
[parts.Vs]
kind = "voltage_source"
nodes = ["a", "gnd"]
[parts.C1]
kind = "capacitor"
nodes = ["a", "gnd"]
value = "10uF"
[parts.R1]
kind = "resistor"
nodes = ["a", "gnd"]
value = "1kohm"
[outputs.v_a]
voltage = "a"
"""
    path = tmp_path / "across.toml"
    path.write_text(text)
    assert main(["inspect", str(path)]) == 0
    out = capsys.readouterr().out
    assert "block across: 0 states" in out
    assert "C1 has no state of its own: it is directly across voltage source Vs" in out
    assert main(["inspect", str(path), "--json"]) == 0
    assert any("C1 has no state" in n for n in json.loads(capsys.readouterr().out)["notes"])
