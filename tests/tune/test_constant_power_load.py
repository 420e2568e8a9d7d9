"""An LC filter feeding a regulated converter that draws constant power.

1. Stability limit of the undamped filter: a converter regulating its output draws
   i = P / v, incremental conductance -P/V^2 (Middlebrook, "Input filter considerations
   in design and application of switching regulators", IEEE IAS 1976; Erickson and
   Maksimovic, Fundamentals of Power Electronics, 2nd ed., ch. 10). With the filter's series
   resistance Rs, KVL/KCL give  L di/dt = Vs - Rs i - v,  C dv/dt = i + (P/V^2) v, whose
   characteristic polynomial s^2 + (Rs/L - g/C) s + (1 - Rs g)/(L C), g = P/V^2, is Hurwitz
   iff g < Rs C / L (and g < 1/Rs): P_max = V^2 Rs C / L when Rs < sqrt(L/C). The same
   condition is stated (from memory) in Emadi, Khaligh, Rivetta and Williamson, "Constant
   power loads and negative impedance instability in automotive systems", IEEE Trans.
   Vehicular Technology 55(4), 2006. It is derived with sympy below and compared with the
   compiled circuit's poles.
2. Closed loop: the bundled battery-fed drive (models/tuning/drive_bus.toml) with its motor
   current PI; without the damping leg the loop is unstable, the tuned leg restores
   stability with margin and meets a bus deviation limit on a torque (load) step. The
   closed loop is rebuilt independently with python-control's ``interconnect`` and
   integrated by scipy's adaptive ``solve_ivp``.
"""

from __future__ import annotations

from pathlib import Path

import control
import numpy as np
import pytest
import sympy as sp
from scipy.integrate import solve_ivp
from scipy.optimize import brentq

from wirestate.reduce import compile_circuit, load_block
from wirestate.spec import load_circuit
from wirestate.tune import load_tuning, solve

MODELS = Path(__file__).resolve().parents[2] / "models" / "tuning"

CPL_CIRCUIT = """
    [circuit]
    name = "lc_cpl"
    [parts.Vs]
    kind = "voltage_source"
    nodes = ["in", "gnd"]
    value = "48V"
    [parts.Rs]
    kind = "resistor"
    nodes = ["in", "x"]
    value = "50mohm"
    [parts.Lf]
    kind = "inductor"
    nodes = ["x", "bus"]
    value = "22uH"
    [parts.Cf]
    kind = "capacitor"
    nodes = ["bus", "gnd"]
    value = "100uF"
    [parts.Gcpl]
    kind = "vccs"
    nodes = ["bus", "gnd"]
    control = ["bus", "gnd"]
    gain = -0.1
    [outputs.v_bus]
    voltage = "bus"
"""


def test_undamped_stability_limit_matches_the_closed_form(write):
    # closed form derived from the hand-written ODE (not from wirestate's equations)
    s, L, C, Rs, g = sp.symbols("s L C R_s g", positive=True)
    A = sp.Matrix([[-Rs / L, -1 / L], [1 / C, g / C]])
    poly = sp.Poly((s * sp.eye(2) - A).det(), s)
    _, a1, a0 = poly.all_coeffs()
    # second-order Routh-Hurwitz: a1 > 0 and a0 > 0; a1 = 0 gives the limit g = Rs C / L
    (g_limit,) = sp.solve(sp.Eq(a1, 0), g)
    assert sp.simplify(g_limit - Rs * C / L) == 0
    values = {L: 22e-6, C: 100e-6, Rs: 50e-3}
    g_closed = float(g_limit.subs(values))
    assert float(a0.subs(values).subs(g, g_closed)) > 0  # Rs < sqrt(L/C): a1 binds first

    spec = load_circuit(write("cpl.toml", CPL_CIRCUIT))

    def largest_real_part(conductance: float) -> float:
        block = compile_circuit(spec.with_values({"Gcpl": -conductance}))
        return float(np.max(block.poles().real))

    g_found = brentq(largest_real_part, 0.5 * g_closed, 2.0 * g_closed, xtol=1e-14, rtol=1e-13)
    # closed form vs compiled poles: 1e-9 relative (eigenvalues of a 2x2 near the crossing
    # and the root finder's tolerance 1e-13)
    assert g_found == pytest.approx(g_closed, rel=1e-9)
    power_limit = 48.0**2 * g_closed
    assert power_limit == pytest.approx(48.0**2 * 50e-3 * 100e-6 / 22e-6, rel=1e-12)


TUNING = """
    [tuning]
    name = "cpl_closed_loop"
    circuit = "{circuit}"
    [variables.Rd]
    min = "50mohm"
    max = "5ohm"
    [variables.Cd]
    min = "47uF"
    max = "4.7mF"
    start = "1mF"
    [controller]
    measurement = "i_motor"
    command = "Vm"
    kp = 0.63
    ki = 157.0
    [scenario]
    until = "6ms"
    step = "10us"
    [[scenario.steps]]
    input = "reference"
    at = "1ms"
    to = "40A"
    [[limits]]
    name = "bus_deviation"
    kind = "overshoot"
    output = "v_bus"
    after = "1ms"
    percent_of = "final"
    max = "2%"
    [[limits]]
    name = "stability_margin"
    kind = "pole_real_part"
    max = "-150"
    [objective]
    capacitance = 1.0
    parts = ["Cd"]
"""


def _closed_loop(block, kp, ki):
    # independent closed loop: python-control's interconnect of the circuit and a PI
    plant = block.state_space()
    pi = control.ss(0.0, 1.0, ki, kp, inputs="e", outputs="Vm", states="z", name="pi")
    error = control.summing_junction(inputs=["r", "-i_motor"], output="e", name="error")
    return control.interconnect(
        [plant, pi, error], inplist=["Vbat", "Iport", "Eb", "r"], outlist=["v_bus"]
    )


@pytest.mark.filterwarnings("ignore:Unused output")
def test_tuned_leg_restores_stability_and_meets_the_bus_limit(write):
    circuit = MODELS / "drive_bus.toml"
    block = load_block(circuit)
    open_leg = compile_circuit(block.spec.with_values({"Rd": 1e6}))
    undamped = _closed_loop(open_leg, 0.63, 157.0)
    assert np.max(np.linalg.eigvals(undamped.A).real) > 0  # unstable without the leg

    result = solve(load_tuning(write("cpl.toml", TUNING.format(circuit=circuit.as_posix()))))
    assert result.feasible
    margins = {row["name"]: row for row in result.limits}
    assert margins["bus_deviation"]["margin"] >= 0
    assert margins["stability_margin"]["margin"] >= 0
    chosen = {k: v["preferred"] for k, v in result.variables.items()}

    tuned = _closed_loop(compile_circuit(block.spec.with_values(chosen)), 0.63, 157.0)
    assert np.max(np.linalg.eigvals(tuned.A).real) <= -150.0

    # the bus response by an adaptive ODE solver on the independent closed loop
    u0 = np.array([48.0, 0.0, 34.0, 30.0])
    u1 = np.array([48.0, 0.0, 34.0, 40.0])
    x0 = np.linalg.solve(tuned.A, -tuned.B @ u0)
    times = result.responses["times"]
    first = times[times <= 1e-3 + 1e-12]
    second = times[times >= 1e-3 - 1e-12]
    seg1 = solve_ivp(
        lambda t, x: tuned.A @ x + tuned.B @ u0,
        (0, 1e-3),
        x0,
        t_eval=first,
        rtol=1e-10,
        atol=1e-10,
        method="DOP853",
    )
    seg2 = solve_ivp(
        lambda t, x: tuned.A @ x + tuned.B @ u1,
        (1e-3, times[-1]),
        seg1.y[:, -1],
        t_eval=second,
        rtol=1e-10,
        atol=1e-10,
        method="DOP853",
    )
    v_ode = np.concatenate([(tuned.C @ seg1.y)[0], (tuned.C @ seg2.y)[0, 1:]])
    v_tool = result.responses["preferred"][result.responses["index"]["v_bus"]]
    # exact ZOH stepping vs an adaptive solver at rtol 1e-10: agreement to 1e-6 relative
    assert v_tool == pytest.approx(v_ode, rel=1e-6)
    final = np.linalg.solve(tuned.A, -tuned.B @ u1)
    v_final = float((tuned.C @ final)[0])
    deviation = np.max(np.abs(v_ode[times >= 1e-3 - 1e-12] - v_final))
    assert deviation / abs(v_final) <= 0.02 + 1e-6


def test_sampled_current_controller_matches_an_independent_discrete_loop(write):
    # the same case with the PI sampled at 20 us and the scenario step 10 us: the tool's
    # verified bus trajectory, between the samples too, must equal a hand-written loop on
    # scipy's ZOH discretisation (scipy.signal.cont2discrete) over the 10 us output step,
    # the command held for two of them
    from scipy.signal import cont2discrete

    circuit = MODELS / "drive_bus.toml"
    text = TUNING.format(circuit=circuit.as_posix()).replace(
        "ki = 157.0", 'ki = 157.0\n    sample_time = "20us"'
    )
    result = solve(load_tuning(write("sampled.toml", text)))
    assert result.feasible
    chosen = {k: v["preferred"] for k, v in result.variables.items()}
    block = compile_circuit(load_block(circuit).spec.with_values(chosen))
    ts, h = 20e-6, 10e-6
    Ad, Bd, *_ = cont2discrete((block.A, block.B, block.C, block.D), h, method="zoh")
    j, m = block.inputs.index("Vm"), block.outputs.index("i_motor")
    bus = block.outputs.index("v_bus")
    u = np.array([block.input_defaults.get(name) or 0.0 for name in block.inputs])
    x = np.linalg.solve(block.A, -block.B @ u)  # operating point: i_motor = 30 A
    z = u[j]  # the integrator holds the operating command (state = ki * integral of e)
    v_bus = []
    times = result.responses["times"]
    assert times[1] == pytest.approx(h, rel=1e-12)
    for n, t in enumerate(times):
        if n % 2 == 0:  # a controller sample
            r = 40.0 if t >= 1e-3 - 1e-12 else 30.0
            e = r - block.C[m] @ x
            u[j] = 0.63 * e + z
            z = z + 157.0 * ts * e
        v_bus.append(block.C[bus] @ x + block.D[bus] @ u)
        x = Ad @ x + Bd @ u
    v_tool = result.responses["preferred"][result.responses["index"]["v_bus"]]
    # two exact ZOH discretisations (Pade in both): 1e-9 relative
    assert v_tool == pytest.approx(np.array(v_bus), rel=1e-9)
