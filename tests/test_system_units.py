"""Units stated in a system file are checked: a unit that is not written in SI symbols, a
wire whose two ends are in different units, and an external input that drives inputs of
different units are refused, naming the block and field (or the wire) that says so."""

from __future__ import annotations

from pathlib import Path

import pytest

from tests.robustness.test_new_features_corpus import RC as _CORPUS_RC
from wirestate.blocks import rotary_inertia, sensor_filter, static_gain
from wirestate.cli import main
from wirestate.compose import compose, system_from_spec
from wirestate.errors import WirestateError
from wirestate.spec.system import parse_system

# the corpus's RC filter (input V1, output v, both V) with a current source Is (A) at its
# capacitor
RC = (
    _CORPUS_RC
    + """
[parts.Is]
kind = "current_source"
nodes = ["gnd", "b"]
"""
)

# a probe measuring the filter's voltage and a sampled PI driving its source: every unit
# stated agrees with the signal it names
GOOD = {
    "system": {"name": "bench"},
    "blocks": {
        "filter": {"kind": "circuit", "file": "rc.toml"},
        "probe": {"kind": "sensor_filter", "time_constant": "10us", "unit": "V"},
        "loop": {"kind": "pi", "kp": 0.1, "ki": 10.0, "unit": "V"},
    },
    "wiring": {
        "probe.signal": "filter.v",
        "loop.measurement": "probe.measured",
        "filter.V1": "loop.command",
    },
    "inputs": {"v_ref": "loop.reference", "i_load": "filter.Is"},
    "outputs": {"v": "probe.measured"},
}


def _system(tmp_path: Path, change) -> object:
    import copy

    (tmp_path / "rc.toml").write_text(RC)
    data = copy.deepcopy(GOOD)
    change(data)
    spec = parse_system(data, file=str(tmp_path / "s.toml"))
    return system_from_spec(spec, file=tmp_path / "s.toml")


def _set(block: str, key: str, value):
    def change(data):
        data["blocks"][block][key] = value

    return change


def test_the_consistent_system_composes(tmp_path):
    system = _system(tmp_path, lambda data: None)
    assert system.units["v"] == "V"


def _one_input_for_two_units(data):
    del data["wiring"]["filter.V1"], data["inputs"]["i_load"]
    data["inputs"]["drive"] = ["filter.V1", "filter.Is"]


@pytest.mark.parametrize(
    ("change", "location", "fragment"),
    [
        # not SI symbols: a word, a prefixed unit, a made-up symbol
        (_set("loop", "unit", "volts"), ("blocks", "loop", "unit"), "'volts'"),
        (_set("probe", "unit", "mV"), ("blocks", "probe", "unit"), "'mV'"),
        (_set("loop", "unit", "Vx"), ("blocks", "loop", "unit"), "'Vx'"),
        # a current command into a voltage source input
        (_set("loop", "unit", "A"), ("blocks", "loop", "unit"), "filter.V1, which is in V"),
        # a probe in amperes on a voltage output
        (_set("probe", "unit", "A"), ("blocks", "probe", "unit"), "filter.v is in V"),
        # one external input driving a voltage input and a current input
        (
            _one_input_for_two_units,
            ("inputs", "drive"), "one input has one unit",
        ),
    ],
)  # fmt: skip
def test_a_unit_that_is_unknown_or_contradicts_its_signal_is_refused(
    tmp_path, change, location, fragment
):
    with pytest.raises(WirestateError) as info:
        _system(tmp_path, change)
    assert info.value.code == "wrong_unit"
    assert info.value.location == location
    assert fragment in info.value.message
    assert "\n" not in str(info.value)


def test_a_gain_output_in_the_wrong_unit_is_placed_at_its_unit_field(tmp_path):
    # a gain in A/V between the probe and the source input: its output states A
    def change(data):
        data["blocks"]["scale"] = {"kind": "gain", "gain": 2.0, "unit": "A"}
        data["wiring"]["scale.input"] = "loop.command"
        data["wiring"]["filter.V1"] = "scale.output"

    with pytest.raises(WirestateError) as info:
        _system(tmp_path, change)
    assert info.value.location == ("blocks", "scale", "unit")
    assert "scale.output is in A" in info.value.message


def test_another_spelling_of_the_same_unit_is_accepted(tmp_path):
    # "Nm" and "N*m" are one unit (units.UNITS): a gain stated in Nm drives a torque input
    rotor = rotary_inertia("rotor", 1e-3)
    gain = static_gain("kt", 0.05, "Nm")
    system = compose(
        [rotor, gain], {"rotor.torque": "kt.output"}, {"i": "kt.input", "tl": "rotor.load_torque"}
    )
    assert "rotor.speed" in system.states


def test_compose_refuses_a_wire_between_different_units_at_the_wire():
    # the Python form of a system: no unit field to point at, so the wire is named
    rotor = rotary_inertia("rotor", 1e-3)
    probe = sensor_filter("probe", 1e-4, unit="V")
    with pytest.raises(WirestateError) as info:
        compose([rotor, probe], {"probe.signal": "rotor.speed"},
                {"t": "rotor.torque", "tl": "rotor.load_torque"})  # fmt: skip
    assert info.value.code == "wrong_unit"
    assert info.value.location == ("wiring", "probe.signal")
    assert "rotor.speed is in rad/s" in info.value.message


def test_the_command_line_prints_one_line_naming_the_block_and_field(tmp_path, capsys):
    (tmp_path / "rc.toml").write_text(RC)
    text = f"""
[system]
name = "bench"
[blocks.filter]
kind = "circuit"
file = "{tmp_path / "rc.toml"}"
[blocks.probe]
kind = "sensor_filter"
time_constant = "10us"
unit = "A"
[wiring]
"probe.signal" = "filter.v"
[inputs]
V1 = "filter.V1"
Is = "filter.Is"
"""
    path = tmp_path / "s.toml"
    path.write_text(text)
    assert main(["inspect", str(path)]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1
    assert err.startswith(f"error: {path}: blocks.probe.unit: unit 'A' of block 'probe'")


def test_output_limits_with_a_unit_on_a_block_without_one_say_what_to_set(tmp_path):
    # before: "'-5V' is not in  (accepted: a plain number, ...)", an empty unit named
    def change(data):
        del data["blocks"]["loop"]["unit"]
        data["blocks"]["loop"]["output_limits"] = ["-5V", "5V"]

    with pytest.raises(WirestateError) as info:
        _system(tmp_path, change)
    assert info.value.code == "wrong_unit"
    assert info.value.location[:2] == ("blocks", "loop")
    assert "set unit" in info.value.message and "not in  " not in info.value.message


def test_a_unit_on_a_plain_number_is_named_as_such():
    from wirestate.units import parse_quantity

    with pytest.raises(WirestateError) as info:
        parse_quantity("5V", "1", field="phase")
    assert info.value.message == "phase: '5V' carries a unit, but this value is a plain number " \
        "(dimensionless, an SI prefix allowed)"  # fmt: skip
