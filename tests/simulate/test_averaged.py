"""State-space averaging against the period averages of the switched run."""

from __future__ import annotations

import numpy as np
import pytest

from wirestate.simulate import simulate
from wirestate.simulate.averaged import AveragedModel
from wirestate.spec import parse_circuit
from wirestate.switching import SwitchedCircuit

T = 1e-5  # 100 kHz


def converter(kind: str, R: float) -> SwitchedCircuit:
    """A buck or boost stage with an output load-current input; values of our own."""
    if kind == "buck":
        parts = {
            "Vin": {"kind": "voltage_source", "nodes": ["in", "gnd"], "value": 24.0},
            "Q1": {"kind": "switch", "nodes": ["in", "sw"], "on_resistance": 0.05},
            "D1": {"kind": "diode", "nodes": ["gnd", "sw"], "forward_voltage": 0.5,
                   "on_resistance": 0.03},
            "L1": {"kind": "inductor", "nodes": ["sw", "out"], "value": 47e-6},
        }  # fmt: skip
    else:
        parts = {
            "Vin": {"kind": "voltage_source", "nodes": ["in", "gnd"], "value": 12.0},
            "L1": {"kind": "inductor", "nodes": ["in", "sw"], "value": 47e-6},
            "Q1": {"kind": "switch", "nodes": ["sw", "gnd"], "on_resistance": 0.02},
            "D1": {"kind": "diode", "nodes": ["sw", "out"], "forward_voltage": 0.5},
        }
    parts |= {
        "C1": {"kind": "capacitor", "nodes": ["out", "gnd"], "value": 47e-6},
        "RL": {"kind": "resistor", "nodes": ["out", "gnd"], "value": R},
        "Iload": {"kind": "current_source", "nodes": ["out", "gnd"], "value": 0.0},
    }
    data = {"circuit": {"name": kind}, "parts": parts, "outputs": {"v_out": {"voltage": "out"}}}
    return SwitchedCircuit(parse_circuit(data))


def averaged_steady_state(sc: SwitchedCircuit, duty: float) -> np.ndarray:
    model = AveragedModel(sc)
    u = np.array([sc.input_defaults.get(n) or 0.0 for n in sc.inputs])
    x = np.ones(len(sc.states))
    for _ in range(4):  # the conduction pattern settles at the operating point
        A, Bf, *_ = model.at(x, u, [(duty, {"Q1": 1.0}), (1 - duty, {"Q1": 0.0})])
        x = np.linalg.solve(A, -Bf @ np.append(u, 1.0))
    return x


@pytest.mark.parametrize(("kind", "duty", "R"), [("buck", 0.4, 2.0), ("boost", 0.5, 8.0)])
def test_averaged_run_follows_the_period_averages_through_a_load_step(kind, duty, R):
    # Middlebrook and Cuk 1976: the averaged model follows the switched run's average over
    # a period centred on the same time, up to terms of second order in the switching
    # period against the natural period (here T w0 ~ 0.2). The switched run first settles
    # for 200 periods; the averaged run starts from its average over the last of them;
    # then a 2 A load step. Tolerance 1 % of the transient's swing (measured 0.1-0.3 %),
    # while the ripple itself is up to 45 % of that swing.
    sc = converter(kind, R)
    gate = f"pwm:100kHz,duty={duty}"
    settle, periods, n = 200, 300, 50
    x0 = averaged_steady_state(sc, duty)
    step_load = {"Q1": gate, "Iload": f"step:2A,at={(settle + 50) * 10}us"}
    switched = simulate(sc, (settle + periods) * T, T / n, step_load, x0=x0)
    _, X = switched.physical_states()
    t = switched.time
    means = np.array([
        np.trapezoid(X[:, k * n : (k + 1) * n + 1], t[k * n : (k + 1) * n + 1], axis=1) / T
        for k in range(settle + periods)
    ]).T  # fmt: skip
    averaged = simulate(sc, periods * T, T / 2,
                        {"Q1": gate, "Iload": "step:2A,at=500us"}, x0=means[:, settle - 1],
                        averaged=True)  # fmt: skip
    assert "Middlebrook" in averaged.method and "changed" not in averaged.method
    _, XA = averaged.physical_states()
    centred = XA[:, 1::2][:, :periods]  # the averaged state in the middle of each period
    reference = means[:, settle:]
    swing = np.ptp(reference, axis=1)
    assert np.all(np.abs(centred - reference).max(axis=1) <= 1e-2 * swing)
    assert np.all(swing > 0.05 * np.abs(reference).max(axis=1))  # the step moved things


def test_conduction_fractions_and_a_warning_outside_continuous_conduction():
    sc = converter("buck", 2.0)
    r = simulate(sc, 2e-4, T, {"Q1": "pwm:100kHz,duty=0.4"}, averaged=True)
    assert r.output("on_Q1") == pytest.approx(0.4)  # on for 40 % of each period
    # from rest the diode sits at its threshold: the result says the average fails there
    assert "discontinuous conduction or a start from rest" in r.method
