"""Co-simulation stepper: exact steps, names, variable dt, rollback, feedthrough."""

from __future__ import annotations

import math

import control
import numpy as np
import pytest
from scipy.signal import cont2discrete

from tests.simulate.test_linear import dc_motor
from wirestate.errors import SimulationError
from wirestate.lti import CircuitBlock
from wirestate.simulate import Stepper, simulate


def rc_block():
    # RC low-pass: dv/dt = (Vs - v) / (R C), output v and the resistor current (Vs - v)/R,
    # which has direct feedthrough from Vs
    R, C = 100.0, 1e-6
    return CircuitBlock(
        "rc", [[-1 / (R * C)]], [[1 / (R * C)]], [[1.0], [-1 / R]], [[0.0], [1 / R]],
        ["v_C1"], ["Vs"], ["v_out", "i_R1"], input_defaults={"Vs": 5.0},
    )  # fmt: skip


def test_step_matches_closed_form_and_scipy_discretisation():
    # RC charging v(t) = Vs (1 - exp(-t / RC)) (closed form, 1e-12 relative) and the
    # discretisation from scipy.signal.cont2discrete(method="zoh") as a second reference
    block = rc_block()
    s = Stepper(block, dt=1e-5)
    for k in range(1, 51):
        y = s.step([5.0])
        assert y[0] == pytest.approx(5 * (1 - math.exp(-k * 1e-5 / 1e-4)), rel=1e-12)
    Ad, Bd, *_ = cont2discrete((block.A, block.B, block.C, block.D), 1e-5, method="zoh")
    s2 = Stepper(block, dt=1e-5)
    s2.step([5.0])
    np.testing.assert_allclose(s2.state, Bd[:, 0] * 5.0, rtol=1e-12)


def test_outputs_after_step_include_feedthrough_of_held_input():
    s = Stepper(rc_block(), dt=1e-5)
    y = s.step({"Vs": 2.0})
    # i_R = (Vs - v) / R with v after the step and Vs still held
    assert y[1] == pytest.approx((2.0 - y[0]) / 100.0, rel=1e-12)
    assert s.feedthrough == {"v_out": [], "i_R1": ["Vs"]}


def test_defaults_drive_inputs_never_given():
    s = Stepper(rc_block(), dt=1e-4)
    y = s.step({})
    assert y[0] == pytest.approx(5 * (1 - math.exp(-1.0)), rel=1e-12)


def test_stepper_equals_batch_run_on_composed_system():
    system = dc_motor()
    batch = simulate(system, 0.5, 1e-3, {"Va": 1.0})
    s = Stepper(system, dt=1e-3)
    rows = [s.step({"Va": 1.0, "TL": 0.0}) for _ in range(500)]
    np.testing.assert_allclose(np.array(rows).T, batch.outputs[:, 1:], rtol=1e-12, atol=1e-15)
    assert s.state_names == ["armature.i_La", "rotor.speed", "rotor.angle"]


def test_variable_dt_is_exact_and_cached():
    block = rc_block()
    s = Stepper(block, dt=1e-5)
    s.step([1.0])
    s.step([1.0], dt=3e-5)
    s.step([1.0], dt=1e-5)
    # total 5e-5 s of a held 1 V: closed form, 1e-12 relative
    assert s.state[0] == pytest.approx(1 - math.exp(-0.5), rel=1e-12)
    assert s.time == pytest.approx(5e-5, rel=1e-15)
    assert len(s._stacked) == 2


def test_save_restore_and_state_setter():
    s = Stepper(control.ss([[-1.0]], [[1.0]], [[1.0]], [[0.0]]), dt=0.1)
    saved = s.save()
    first = s.step([1.0]).copy()
    s.step([1.0])
    s.restore(saved)
    np.testing.assert_array_equal(s.step([1.0]), first)
    s.state = [2.0]
    assert s.state[0] == 2.0
    with pytest.raises(SimulationError) as info:
        s.state = [1.0, 2.0]
    assert info.value.code == "state_size_mismatch"


def test_stepper_errors():
    s = Stepper(rc_block(), dt=1e-5)
    with pytest.raises(SimulationError) as info:
        s.step({"Vx": 1.0})
    assert info.value.code == "unknown_signal" and "Vx" in info.value.message
    with pytest.raises(SimulationError) as info:
        s.step([1.0], dt=-1.0)
    assert info.value.code == "invalid_step"
    with pytest.raises(SimulationError) as info:
        Stepper(control.ss([[0.5]], [[1.0]], [[1.0]], [[0.0]], 0.1), dt=0.1)
    assert info.value.code == "invalid_step"
