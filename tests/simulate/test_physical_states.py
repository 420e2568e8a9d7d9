"""Shifted states (a capacitor in a loop with a voltage source) back to physical values."""

from __future__ import annotations

import numpy as np
import pytest

from tests.conftest import circuit
from wirestate.simulate import Stepper, simulate

R2, C1, C2 = 1000.0, 1e-6, 3e-6


def divider():
    # C1 in series with C2 across Vs, R2 across C2 (the block of
    # tests/reference/test_circuits.py): the one state is v_C1 shifted by 0.75 Vs
    return circuit(
        {
            "Vs": {"kind": "voltage_source", "nodes": ["in", "gnd"]},
            "C1": {"kind": "capacitor", "nodes": ["in", "m"], "value": C1},
            "C2": {"kind": "capacitor", "nodes": ["m", "gnd"], "value": C2},
            "R2": {"kind": "resistor", "nodes": ["m", "gnd"], "value": R2},
        },
        {"v_m": {"voltage": "m"}},
    )


def test_physical_capacitor_voltage_obeys_kvl_and_the_closed_form():
    # KVL around Vs, C1, C2: v_C1 = Vs - v_m at every sample; for a 1 V step from rest,
    # v_m = C1 / (C1 + C2) exp(-t / (R2 (C1 + C2))) (capacitive divider, then the charge
    # relaxes through R2), so v_C1 = 1 - v_m. Exact ZOH: 1e-12 absolute.
    block = divider()
    result = simulate(block, 20e-3, 10e-6, {"Vs": "step:1V"})
    assert result.state_names == ["v_C1_shifted"]
    v_c1 = result.physical_state("v_C1")
    v_m = result.output("v_m")
    vs = result.inputs[0]
    np.testing.assert_allclose(v_c1, vs - v_m, rtol=0, atol=1e-12)
    t = result.time
    closed = C1 / (C1 + C2) * np.exp(-t / (R2 * (C1 + C2)))
    np.testing.assert_allclose(v_m, closed, rtol=0, atol=1e-12)
    names, _ = result.physical_states()
    assert names == ["v_C1"]
    # the state's own name reaches the same physical row
    np.testing.assert_array_equal(result.physical_state("v_C1_shifted"), v_c1)


def test_stepper_reads_and_sets_the_physical_state():
    block = divider()
    stepper = Stepper(block, 10e-6)
    for _ in range(50):
        stepper.step({"Vs": 2.0})
    (v_m,) = stepper.outputs
    assert stepper.physical_state[0] == pytest.approx(2.0 - v_m, abs=1e-12)  # KVL
    # set C1 to 1.5 V with Vs = 2 V held: v_m = 0.5 V at once
    stepper.physical_state = [1.5]
    assert stepper.outputs[0] == pytest.approx(0.5, abs=1e-12)
    assert stepper.physical_state[0] == pytest.approx(1.5, abs=1e-12)
