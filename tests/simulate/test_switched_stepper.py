"""Stepper on switched circuits: events inside step(), a modulator inside, save/restore."""

from __future__ import annotations

import numpy as np
import pytest

from tests.reference.test_switched_reference import buck
from wirestate.blocks import Modulator
from wirestate.errors import WirestateError
from wirestate.simulate import Stepper
from wirestate.simulate.pwm import parse_pwm
from wirestate.simulate.switched import simulate_switched
from wirestate.simulate.switched_stepper import SwitchedStepper

T = 1e-5


def dcm_buck():
    return buck(4e-6, 22e-6, 8.0, vf=0.6)


def test_a_switched_block_gives_a_switched_stepper():
    s = Stepper(dcm_buck(), 1e-6)
    assert isinstance(s, SwitchedStepper) and isinstance(s, Stepper)
    assert s.input_names == ["Vin", "Q1"] and s.mode == {"Q1": False, "D1": False}


def test_gate_input_held_per_step_matches_the_whole_run():
    # a master driving the gate step by step (edges on step boundaries) gives the run of
    # the same pwm waveform: both exact, so to round-off (1e-10 of each state's range)
    sc = dcm_buck()
    gate = parse_pwm("100kHz,duty=0.4")
    dt = 1e-6
    run = simulate_switched(sc, 40 * dt, dt, {"Q1": gate})
    s = Stepper(sc, dt)
    states = [s.physical_state]
    for k in range(40):
        s.step({"Vin": 12.0, "Q1": gate.value_at((k + 0.5) * dt)})
        states.append(s.physical_state)
    ours = np.array(states).T
    _, ref = run.physical_states()
    span = np.ptp(ref, axis=1, keepdims=True)
    assert np.all(np.abs(ours - ref) <= 1e-10 * span)
    assert [(e.part, e.change) for e in s.events] == [(e.part, e.change) for e in run.events]
    # event times: gate edges on the same step boundaries, diode events located alike
    assert [e.time for e in s.events] == pytest.approx([e.time for e in run.events], abs=1e-15)


def test_modulator_inside_puts_the_edges_inside_the_steps():
    # steps of 3 us against a 10 us carrier: edges fall inside steps, at the exact times
    sc = dcm_buck()
    s = Stepper(sc, 3e-6, modulator=Modulator("pwm", 1e5), gates={"Q1": "gate"})
    assert s.input_names == ["Vin", "duty"]
    run = simulate_switched(sc, 60e-6, 3e-6, {"Q1": parse_pwm("100kHz,duty=0.35")})
    seen = []
    for _ in range(20):
        s.step({"Vin": 12.0, "duty": 0.35})
        seen.extend(s.last_events)
        assert all(s.time - 3e-6 - 1e-15 <= e.time <= s.time + 1e-15 for e in s.last_events)
    assert [(e.part, e.change) for e in seen] == [(e.part, e.change) for e in run.events]
    # gate edges at k T and k T + 0.35 T; diode turn-off located; 1e-15 s (round-off)
    assert [e.time for e in seen] == pytest.approx([e.time for e in run.events], abs=1e-15)
    assert s.state_names == ["i_L1", "v_C1"]
    _, ref = run.physical_states()
    assert s.physical_state == pytest.approx(ref[:, -1], rel=1e-10, abs=1e-12)


def test_a_new_duty_waits_for_the_next_carrier_start():
    s = Stepper(dcm_buck(), 2e-6, modulator=Modulator("pwm", 1e5), gates={"Q1": "gate"})
    for _ in range(5):  # one period at duty 0.2
        s.step([12.0, 0.2])
    s.step([12.0, 0.6])  # asked at 10 us, a carrier start: latched there
    for _ in range(4):
        s.step([12.0, 0.9])  # asked mid-period: not latched until 20 us
    offs = [e.time for e in s.events if e.part == "Q1" and e.change == "on -> off"]
    assert offs == pytest.approx([0.2 * T, 1.6 * T], abs=1e-15)


def test_save_and_restore_include_the_mode_and_the_pending_edges():
    s = Stepper(dcm_buck(), 3e-6, modulator=Modulator("pwm", 1e5), gates={"Q1": "gate"})
    for _ in range(7):
        s.step([12.0, 0.4])
    saved = s.save()
    mode, state = dict(s.mode), s.state
    first = [s.step([12.0, 0.4]).copy() for _ in range(6)]
    events = list(s.events)
    s.step([12.0, 0.8])
    s.restore(saved)
    assert s.mode == mode and np.array_equal(s.state, state) and s.time == pytest.approx(21e-6)
    again = [s.step([12.0, 0.4]).copy() for _ in range(6)]
    assert np.array_equal(np.array(first), np.array(again))
    assert s.events == events


def test_variable_steps_and_bad_arguments():
    s = Stepper(dcm_buck(), 1e-6)
    s.step([12.0, 1.0], dt=2.5e-6)
    assert s.time == pytest.approx(2.5e-6) and s.dt == 2.5e-6
    with pytest.raises(WirestateError) as info:
        s.step([12.0, 0.0], dt=-1.0)
    assert info.value.code == "invalid_step"
    with pytest.raises(WirestateError) as info:
        Stepper(dcm_buck(), 1e-6, modulator=Modulator("pwm", 1e5), gates={"Qx": "gate"})
    assert info.value.code == "invalid_gate"
    with pytest.raises(WirestateError) as info:
        s.restore((1, 2))
    assert info.value.code == "state_size_mismatch"
