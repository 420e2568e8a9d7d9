"""Batch LTI simulation: textbook DC motor, energy conservation, closed forms."""

from __future__ import annotations

import math

import control
import numpy as np
import pytest
from scipy.integrate import solve_ivp

from tests.conftest import MODELS
from wirestate.blocks import rotary_inertia
from wirestate.compose import compose
from wirestate.errors import SimulationError
from wirestate.lti import CircuitBlock
from wirestate.reduce import load_block
from wirestate.simulate import propagate, simulate, simulate_linear, zoh

# Separately excited DC motor with armature inductance: the armature loop and the rotor
# (Franklin, Powell and Emami-Naeini, Feedback Control of Dynamic Systems, ch. 2, models of
# electromechanical systems; derived again here from Kirchhoff's voltage law and Newton's
# second law for rotation):
#     L di/dt = v - R i - K w        J dw/dt = K i - b w
# with one constant K for back-EMF (V s/rad) and torque (N m/A), equal in SI units by power
# balance. Parameter values are a small laboratory motor, from memory: J = 0.01 kg m^2,
# b = 0.1 N m s, K = 0.01 V s/rad, R = 1 ohm, L = 0.5 H.
J, b, K, R, L = 0.01, 0.1, 0.01, 1.0, 0.5


def dc_motor():
    armature = CircuitBlock(
        "armature", [[-R / L]], [[1 / L, -K / L]], [[K], [1.0]], np.zeros((2, 2)),
        ["i_La"], ["Va", "M1"], ["torque_M1", "i_arm"],
        units={"i_La": "A", "Va": "V", "M1": "rad/s", "torque_M1": "N*m", "i_arm": "A"},
    )  # fmt: skip
    rotor = rotary_inertia("rotor", J, b)
    return compose(
        [armature, rotor],
        {"rotor.torque": "armature.torque_M1", "armature.M1": "rotor.speed"},
        {"Va": "armature.Va", "TL": "rotor.load_torque"},
        {"speed": "rotor.speed", "current": "armature.i_arm"},
        name="dc_motor",
    )


def test_dc_motor_poles_and_steady_speed():
    system = dc_motor()
    # characteristic polynomial s^2 + (b/J + R/L) s + (b R + K^2)/(J L) = s^2 + 12 s + 20.02
    # (from the two equations: w/v = K / ((J s + b)(L s + R) + K^2)); roots by the quadratic
    # formula -6 +- sqrt(15.98): -2.00250, -9.99750. Eigenvalues, 1e-10 relative.
    expected = np.sort([-6 + math.sqrt(15.98), -6 - math.sqrt(15.98)])
    poles = np.sort(system.poles().real)
    np.testing.assert_allclose(poles[:2], expected, rtol=1e-10)
    assert abs(poles[2]) < 1e-12  # the rotor angle integrates the speed
    p1, p2 = expected
    result = simulate(system, 4.0, 1e-3, {"Va": "step:1V"})
    t = result.time
    # closed-form step response of the two-pole, zero-free speed transfer function:
    # w(t) = w_ss (1 - (p2 e^(p1 t) - p1 e^(p2 t)) / (p2 - p1)), w_ss = K / (b R + K^2)
    # = 0.0999 rad/s. Matrix exponential, 1e-9 relative.
    w_ss = K / (b * R + K * K)
    closed = w_ss * (1 - (p2 * np.exp(p1 * t) - p1 * np.exp(p2 * t)) / (p2 - p1))
    np.testing.assert_allclose(result.output("speed"), closed, rtol=1e-9, atol=1e-15)
    assert result.units["speed"] == "rad/s"


def test_lossless_lc_energy_is_conserved_over_a_million_steps():
    # an ideal LC tank conserves 1/2 L i^2 + 1/2 C v^2 exactly (Hayt, Engineering Circuit
    # Analysis, ch. 9); ZOH of a skew-symmetric-similar A has |eig| = 1, so the only drift
    # is round-off: relative drift < 1e-9 over 1e6 steps (the requirement).
    Lv, Cv = 10e-6, 4.7e-6
    block = CircuitBlock(
        "tank", [[0, -1 / Cv], [1 / Lv, 0]], np.zeros((2, 0)), np.eye(2), np.zeros((2, 0)),
        ["v_C1", "i_L1"], [], ["v", "i"], x0=[48.0, 0.0],
    )  # fmt: skip
    period = 2 * math.pi * math.sqrt(Lv * Cv)
    dt = period / 37.3  # not commensurate with the period
    result = simulate_linear(block, 1e6 * dt, dt)
    assert result.states.shape == (2, 1_000_001)
    v, i = result.states
    energy = 0.5 * Cv * v * v + 0.5 * Lv * i * i
    drift = np.max(np.abs(energy / energy[0] - 1))
    assert drift < 1e-9


def test_blocked_propagation_equals_one_step_at_a_time():
    # the lifted evaluation is a reordering of the same sums: equal to a plain loop to
    # round-off (1e-12 relative, several thousand steps of accumulation)
    rng = np.random.default_rng(3)
    for n, m in [(3, 1), (6, 2), (20, 3)]:
        A = rng.normal(size=(n, n))
        A -= (np.max(np.linalg.eigvals(A).real) + 0.3) * np.eye(n)
        Ad, Bd = zoh(A, rng.normal(size=(n, m)), 0.02)
        U = rng.normal(size=(m, 3001))
        x = rng.normal(size=n)
        X = propagate(Ad, Bd, x, U)
        ref = [x]
        for k in range(U.shape[1]):
            x = Ad @ x + Bd @ U[:, k]
            ref.append(x)
        np.testing.assert_allclose(X, np.array(ref).T, rtol=1e-12, atol=1e-12)


def test_series_rlc_against_tight_solve_ivp():
    # a series RLC driven by a ramp then hold (piecewise linear: FOH is exact; a step:
    # ZOH is exact), against scipy's DOP853 at rtol 1e-12 (adaptive solver, 1e-7 rel).
    Rv, Lv, Cv = 2.0, 1e-3, 10e-6
    A = np.array([[-Rv / Lv, -1 / Lv], [1 / Cv, 0]])
    B = np.array([[1 / Lv], [0]])
    sys = control.ss(A, B, np.eye(2), np.zeros((2, 1)), inputs=["Vs"], outputs=["i", "v"])
    until, step = 4e-3, 1e-5
    ramp = lambda t: np.interp(t, [0, 1e-3], [0, 10.0])  # noqa: E731
    foh = simulate_linear(sys, until, step, {"Vs": "ramp:10V,end=1ms"}, hold="foh")
    sol = solve_ivp(lambda t, x: A @ x + B[:, 0] * ramp(t), (0, until), [0, 0],
                    t_eval=foh.time, method="DOP853", rtol=1e-12, atol=1e-12,
                    max_step=2e-5)  # fmt: skip
    np.testing.assert_allclose(foh.outputs, sol.y, rtol=1e-7, atol=1e-7 * 10)
    zoh_run = simulate_linear(sys, until, step, {"Vs": "step:10V"})
    sol = solve_ivp(lambda t, x: A @ x + B[:, 0] * 10.0, (0, until), [0, 0],
                    t_eval=zoh_run.time, method="DOP853", rtol=1e-12, atol=1e-12)  # fmt: skip
    np.testing.assert_allclose(zoh_run.outputs, sol.y, rtol=1e-7, atol=1e-7 * 10)


def test_bundled_bus_filter_settles_at_battery_voltage():
    # with no inverter draw the capacitor bank charges to the battery voltage (DC: the
    # inductor is a short, the capacitors open); the source default value 48 V drives it.
    # The slowest mode decays within a few ms; 1e-9 relative after 100 ms.
    block = load_block(MODELS / "drive_bus_filter.toml")
    result = simulate(block, 0.1, 1e-6)
    assert result.output("v_bus")[-1] == pytest.approx(48.0, rel=1e-9)
    assert result.time[0] == 0.0 and len(result.time) == 100_001


def test_grid_and_initial_state_errors():
    block = dc_motor()
    with pytest.raises(SimulationError) as info:
        simulate(block, 1.0, 0.3)
    assert info.value.code == "invalid_step"
    with pytest.raises(SimulationError) as info:
        simulate_linear(block, 1.0, 0.1, x0=[0.0])
    assert info.value.code == "state_size_mismatch"
    with pytest.raises(SimulationError) as info:
        simulate(block, 1.0, 0.1, {"Vx": "1V"})
    assert info.value.code == "unknown_signal"


def test_response_data_keeps_labels():
    result = simulate(dc_motor(), 0.1, 0.01, {"Va": 1.0})
    data = result.to_response_data()
    assert list(data.output_labels) == ["speed", "current"]
    assert list(data.state_labels) == ["armature.i_La", "rotor.speed", "rotor.angle"]
    np.testing.assert_array_equal(data.time, result.time)
    np.testing.assert_array_equal(data.outputs, result.outputs)
