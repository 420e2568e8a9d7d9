"""Where a switched run starts, and every public entry point given a switched model.

A circuit with pwm gates has no equilibrium: ``--initial steady_state`` starts it from its
periodic steady state (the state one carrier period brings back to itself). With the gates
held, it starts from the steady state of the one mode they hold. A system with a switched
block or a modulator is refused with the reason and the way out. ``zero`` and single
states (``--initial-value``) are honoured by the switched engine. ``simulate_system``
dispatches to the switched engine; ``simulate_linear`` refuses a switched block.
"""

from __future__ import annotations

import numpy as np
import pytest

from tests.conftest import MODELS
from wirestate.compose import load_system
from wirestate.errors import WirestateError
from wirestate.reduce import compile_circuit
from wirestate.simulate import simulate, start_from
from wirestate.spec import parse_circuit

VIN, L, C, R = 12.0, 100e-6, 100e-6, 2.0
RON = 10e-3  # the switch's and diode's on_resistance (the README's default)

# a diode buck stage into a resistor (a scenario of our own): 12 V, 100 uH, 100 uF, 2 ohm
BUCK = {
    "circuit": {"name": "buck"},
    "parts": {
        "Vin": {"kind": "voltage_source", "nodes": ["in", "gnd"], "value": VIN},
        "Q1": {"kind": "switch", "nodes": ["in", "sw"], "gate": "g"},
        "D1": {"kind": "diode", "nodes": ["gnd", "sw"]},
        "L1": {"kind": "inductor", "nodes": ["sw", "out"], "value": L},
        "C1": {"kind": "capacitor", "nodes": ["out", "gnd"], "value": C, "initial": 3.0},
        "R1": {"kind": "resistor", "nodes": ["out", "gnd"], "value": R},
    },
    "outputs": {"v_out": {"voltage": "out"}, "i_L": {"current": "L1"}},
}
PERIOD = 1e-5
PWM = "pwm:100kHz,duty=0.5"


@pytest.fixture(scope="module")
def buck():
    return compile_circuit(parse_circuit(BUCK))


def test_zero_and_single_states_are_honoured_by_the_switched_engine(buck):
    # before: the switched engine always started from the parts' initial fields
    start = start_from(buck, "zero", {"i_L1": "1A"}, {"g": PWM})
    result = simulate(start.model, 2e-6, 1e-6, {"g": PWM})
    assert result.physical_state("v_C1")[0] == 0.0
    assert result.physical_state("i_L1")[0] == 1.0
    parts = simulate(buck, 2e-6, 1e-6, {"g": PWM})
    assert parts.physical_state("v_C1")[0] == 3.0


def test_steady_state_of_a_pwm_circuit_is_its_periodic_steady_state(buck):
    start = start_from(buck, "steady_state", None, {"g": PWM})
    assert any("periodic steady state" in note for note in start.notes)
    run = simulate(start.model, 10 * PERIOD, PERIOD / 20, {"g": PWM})
    i_L, v_C = run.physical_state("i_L1"), run.physical_state("v_C1")
    # periodic: every carrier period ends where it started (the search stops at 1e-9 of the
    # largest state; the exact in-mode solution adds round-off near 1e-12)
    starts = slice(0, None, 20)
    np.testing.assert_allclose(v_C[starts], v_C[0], rtol=1e-8)
    np.testing.assert_allclose(i_L[starts], i_L[0], rtol=1e-8, atol=1e-8 * abs(i_L).max())
    # continuous conduction: the average output is D Vin less the resistive drops, and the
    # inductor ripple is (Vin - Vout) D Ts / L (Erickson and Maksimovic, Fundamentals of
    # Power Electronics, 2nd ed., ch. 2). The drops (10 mohm in 2 ohm) and the capacitor
    # ripple's share of the inductor's voltage stay below 1 %.
    one = slice(0, 21)
    mean = np.trapezoid(v_C[one], run.time[one]) / PERIOD
    assert mean == pytest.approx(0.5 * VIN, rel=1e-2)
    ripple = i_L[one].max() - i_L[one].min()
    assert ripple == pytest.approx((VIN - mean) * 0.5 * PERIOD / L, rel=2e-2)


def test_the_periodic_start_is_where_a_long_run_from_rest_settles(buck):
    # independent of the search: 8 ms from rest (the output LC decays at 1/(2 R C) =
    # 2500 1/s, so exp(-20) is left) ends at a period start within 1e-6 of the start found
    start = start_from(buck, "steady_state", None, {"g": PWM})
    rest = start_from(buck, "zero", None, {"g": PWM}).model
    long = simulate(rest, 8e-3, PERIOD, {"g": PWM})
    for name in ("v_C1", "i_L1"):
        settled = long.physical_state(name)[-1]
        assert start.x0[buck.states.index(name)] == pytest.approx(settled, rel=1e-6)


def test_steady_state_with_the_gate_held_is_the_steady_state_of_that_mode(buck):
    start = start_from(buck, "steady_state", None, {"g": "1"})
    assert any("Q1 conducting" in note for note in start.notes)
    # switch on, diode off: a divider of the switch's on-resistance and the load (Ohm's law)
    v_out = VIN * R / (R + RON)
    assert start.x0[buck.states.index("v_C1")] == pytest.approx(v_out, rel=1e-9)
    assert start.x0[buck.states.index("i_L1")] == pytest.approx(v_out / R, rel=1e-9)


def test_pwm_gates_of_different_frequencies_have_no_periodic_start():
    data = {**BUCK, "parts": {**BUCK["parts"]}}
    data["parts"]["Q2"] = {"kind": "switch", "nodes": ["in", "sw"], "gate": "g2"}
    block = compile_circuit(parse_circuit(data))
    with pytest.raises(WirestateError) as info:
        start_from(block, "steady_state", None, {"g": PWM, "g2": "pwm:50kHz,duty=0.2"})
    assert info.value.location == ("initial",)
    assert "different frequencies" in info.value.message


def test_a_system_with_a_switched_block_refuses_the_steady_state_with_the_way_out():
    system = load_system(MODELS / "systems" / "aux_buck_loop.toml")
    with pytest.raises(WirestateError) as info:
        start_from(system, "steady_state")
    assert info.value.code == "invalid_field"
    assert info.value.location == ("initial",)
    message = info.value.message
    assert "stage, pwm" in message and "periodic" in message and "--initial-value" in message


def test_simulate_system_runs_a_switched_system_on_the_switched_engine():
    from wirestate.simulate.hybrid import simulate_system

    # before: a KeyError from the hybrid engine, which has no switching events
    system = load_system(MODELS / "systems" / "aux_buck_loop.toml")
    direct = simulate_system(system, 30e-6, 1e-6)
    dispatched = simulate(system, 30e-6, 1e-6)
    assert direct.method == dispatched.method
    assert len(direct.events) == len(dispatched.events) > 0
    np.testing.assert_array_equal(direct.outputs, dispatched.outputs)


def test_simulate_linear_refuses_a_switched_block_naming_it(buck, tmp_path):
    from wirestate.simulate.linear import simulate_linear
    from wirestate.simulate.streaming import stream_linear_to_csv

    # before: one mode's matrices, a silently wrong linear response
    with pytest.raises(WirestateError) as info:
        simulate_linear(buck, 1e-5, 1e-6, {"g": 1.0})
    assert info.value.code == "switched_model"
    assert info.value.location == ("parts", "Q1")
    assert "Q1, D1" in info.value.message
    with pytest.raises(WirestateError) as info:
        stream_linear_to_csv(buck, 1e-5, 1e-6, tmp_path / "out.csv", {"g": 1.0})
    assert info.value.code == "switched_model"
    assert not (tmp_path / "out.csv").exists()


def test_stepper_and_export_of_switched_models_are_handled():
    from wirestate.simulate import Stepper
    from wirestate.simulate.switched_stepper import SwitchedStepper

    # a switched circuit steps with its events; a system whose modulator is fed by a
    # sampled controller is refused by the stepper with the reason
    block = compile_circuit(parse_circuit(BUCK))
    assert isinstance(Stepper(block, 1e-6), SwitchedStepper)
    system = load_system(MODELS / "systems" / "aux_buck_loop.toml")
    with pytest.raises(WirestateError) as info:
        Stepper(system, 1e-6)
    assert info.value.code == "unsupported_switched_system"


def test_a_system_with_a_diode_block_and_no_modulator_is_refused_with_its_reason(tmp_path):
    from tests.robustness.test_new_features_corpus import RECTIFIER

    (tmp_path / "rect.toml").write_text(RECTIFIER)
    path = tmp_path / "s.toml"
    path.write_text(
        '[system]\nname = "s"\n[blocks.rect]\nkind = "circuit"\nfile = "rect.toml"\n'
        '[blocks.probe]\nkind = "sensor_filter"\ntime_constant = "10us"\nunit = "V"\n'
        '[wiring]\n"probe.signal" = "rect.v"\n[inputs]\nVac = "rect.Vac"\n'
    )
    with pytest.raises(WirestateError) as info:
        start_from(load_system(path), "steady_state")
    assert info.value.location == ("initial",)
    assert "block rect switches" in info.value.message
    assert "depends on the whole system" in info.value.message


def test_the_averaged_run_refuses_a_capacitor_across_a_switch():
    from wirestate.spec import load_circuit

    # the switch's output capacitance swings by the bus voltage every period: the average
    # kept the freewheeling diode off and gave 47 V where the switched run settles at 11.5 V
    block = compile_circuit(load_circuit(MODELS / "aux_buck.toml"))
    with pytest.raises(WirestateError) as info:
        simulate(block, 1e-4, 1e-6, {"gate": "pwm:100kHz,duty=0.25"}, averaged=True)
    assert info.value.location == ("parts", "Coss")
    assert "switch Q1" in info.value.message
