"""Composition by signal name: checks naming the signals, interconnect results, files."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from tests.conftest import MODELS
from tests.simulate.test_linear import dc_motor
from wirestate.blocks import PIDController, rotary_inertia, sensor_filter, static_gain
from wirestate.compose import compose, load_system
from wirestate.errors import WirestateError
from wirestate.simulate import simulate
from wirestate.spec.system import parse_system

SYSTEM_FILES = sorted((MODELS / "systems").glob("*.toml"))
SYSTEM_FILES = [p for p in SYSTEM_FILES if "[system]" in p.read_text("utf-8")]


def test_composed_state_names_and_matrices():
    # hand-derived DC motor matrices (armature + rotor, angle last) for the textbook values
    system = dc_motor()
    ss = system.state_space()
    assert ss.state_labels == ["armature.i_La", "rotor.speed", "rotor.angle"]
    np.testing.assert_allclose(ss.A, [[-2, -0.02, 0], [1, -10, 0], [0, 1, 0]], rtol=1e-14)
    assert ss.input_labels == ["Va", "TL"] and ss.output_labels == ["speed", "current"]


def _gains_in_a_loop():
    return [static_gain("a", 2.0), static_gain("b", 0.5)]


@pytest.mark.parametrize(
    ("blocks", "wiring", "inputs", "code", "named"),
    [
        (_gains_in_a_loop, {"a.input": "b.output", "b.input": "a.output"}, {},
         "algebraic_loop", "a.output"),
        (lambda: [static_gain("a", 1.0)], {}, {}, "unconnected_input", "a.input"),
        (lambda: [static_gain("a", 1.0)], {"a.input": "c.output"}, {}, "unknown_signal",
         "c.output"),
        (lambda: [static_gain("a", 1.0)], {"a.input": "a.speed"}, {}, "unknown_signal",
         "a.speed"),
        (lambda: [static_gain("a", 1.0), static_gain("b", 1.0)], {"a.input": "b.output"},
         {"u": ["a.input", "b.input"]}, "duplicate_signal", "a.input"),
    ],
)  # fmt: skip
def test_wiring_errors_name_the_signals(blocks, wiring, inputs, code, named):
    with pytest.raises(WirestateError) as info:
        compose(blocks(), wiring, inputs)
    assert info.value.code == code
    assert named in info.value.message


def test_a_state_or_a_delay_breaks_the_loop():
    # a filter in the loop has no feedthrough: no algebraic loop
    compose([static_gain("a", 2.0), sensor_filter("f", 1e-3)],
            {"a.input": "f.measured", "f.signal": "a.output"})  # fmt: skip
    rotor = rotary_inertia("rotor", 1.0, 1.0)
    with pytest.raises(WirestateError) as info:
        compose([rotor, static_gain("k", 1.0), PIDController("pi", kp=1.0, sample_time=0.1)],
                {"k.input": "pi.command", "pi.measurement": "k.output",
                 "rotor.torque": "pi.command"},
                {"r": "pi.reference", "tl": "rotor.load_torque"})  # fmt: skip
    assert info.value.code == "algebraic_loop"
    compose([rotor, static_gain("k", 1.0),
             PIDController("pi", kp=1.0, sample_time=0.1, delay=True)],
            {"k.input": "pi.command", "pi.measurement": "k.output", "rotor.torque": "pi.command"},
            {"r": "pi.reference", "tl": "rotor.load_torque"})  # fmt: skip


def test_system_file_errors_have_locations(tmp_path):
    with pytest.raises(WirestateError) as info:
        bad = {"r": {"kind": "rotary_inertia", "inertia": "-1 kg*m^2"}}
        parse_system({"system": {"name": "s"}, "blocks": bad})
    assert info.value.code == "out_of_range"
    assert info.value.location == ("blocks", "r", "inertia")
    with pytest.raises(WirestateError) as info:
        parse_system({"system": {"name": "s"}, "blocks": {"r": {"kind": "flywheel"}}})
    assert info.value.code == "unknown_kind"
    path = tmp_path / "s.toml"
    path.write_text('[system]\nname = "s"\n[blocks.a]\nkind = "circuit"\nfile = "none.toml"\n')
    with pytest.raises(WirestateError) as info:
        load_system(path)
    assert info.value.code == "file_not_found"


def test_system_files_are_bundled():
    assert len(SYSTEM_FILES) >= 2


@pytest.mark.parametrize("path", SYSTEM_FILES, ids=lambda p: p.name)
def test_system_file_loads_and_simulates(path):
    system = load_system(path)
    result = simulate(system, 0.05, 20e-6)
    assert result.outputs.shape == (len(system.outputs), 2501)
    assert np.all(np.isfinite(result.outputs))


def test_battery_drive_reaches_speed_and_bus_settles():
    # integral action removes the steady-state speed error (final value theorem for a type-1
    # loop, Franklin, Powell and Emami-Naeini, Feedback Control, sec. 4.2); the bus settles
    # at the battery voltage minus the cable and choke drop I R (Ohm's law), 1e-3 relative
    # after 0.4 s (slowest closed-loop mode well decayed, common practice, no source).
    system = load_system(MODELS / "systems" / "battery_drive.toml")
    result = simulate(system, 0.4, 20e-6, {"speed_ref": "step:200"})
    assert result.output("speed")[-1] == pytest.approx(200.0, rel=1e-3)
    i_bus = 0.5 * result.output("i_arm")[-1]
    assert result.output("v_bus")[-1] == pytest.approx(48.0 - 0.012 * i_bus, rel=1e-3)
    assert result.output("command").max() == pytest.approx(24.0)  # the limit was reached


def test_focus_stage_runs_through_cvodes():
    system = load_system(MODELS / "systems" / "focus_stage.toml")
    assert not system.is_linear
    assert system.units["position_ref"] == "m"  # taken from the measured signal
    result = simulate(system, 0.4, 50e-6, {"position_ref": "step:5mm"})
    assert "CVODES" in result.method
    assert result.output("amplifier").max() == pytest.approx(12.0)  # amplifier limit hit
    # integral action: zero steady-state position error (final value theorem, Franklin,
    # Powell and Emami-Naeini sec. 4.2); 1e-4 relative once the slow mode has decayed
    assert result.output("position")[-1] == pytest.approx(5e-3, rel=1e-4)


_PALETTE = {
    "g": lambda: static_gain("g", 2.0),
    "f": lambda: sensor_filter("f", 1e-3),
    "r": lambda: rotary_inertia("r", 1.0, 0.1),
    "c": lambda: PIDController("c", kp=1.0, ki=1.0, sample_time=1e-3),
}
_INPUTS = ["g.input", "f.signal", "r.torque", "r.load_torque", "c.reference", "c.measurement"]
_OUTPUTS = ["g.output", "f.measured", "r.speed", "r.angle", "c.command", "x.nothing"]


@settings(max_examples=150, deadline=None)
@given(
    st.dictionaries(st.sampled_from(_INPUTS), st.sampled_from(_OUTPUTS), max_size=6),
    st.lists(st.sampled_from(_INPUTS), max_size=4),
)
def test_random_wiring_composes_or_raises_our_error(wiring, exposed):
    # any wiring of the palette either composes (and then simulates) or gives one of the
    # composition errors, never another exception
    blocks = [make() for make in _PALETTE.values()]
    try:
        system = compose(blocks, wiring, {f"in{i}": d for i, d in enumerate(exposed)})
    except WirestateError as exc:
        assert exc.code in {"unknown_signal", "duplicate_signal", "unconnected_input",
                            "algebraic_loop", "wrong_unit"}  # fmt: skip
        return
    result = simulate(system, 0.01, 1e-3)
    assert result.outputs.shape[1] == 11
