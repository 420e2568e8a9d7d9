"""Sampled and nonlinear loops against independent reference implementations."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.integrate import solve_ivp
from scipy.signal import cont2discrete

from tests.simulate.test_linear import J, K, L, R, b
from wirestate.blocks import PIDController, rotary_inertia
from wirestate.compose import compose
from wirestate.errors import SimulationError, WirestateError
from wirestate.lti import CircuitBlock
from wirestate.simulate import simulate


def motor_loop(controller):
    armature = CircuitBlock(
        "armature", [[-R / L]], [[1 / L, -K / L]], [[K]], [[0.0, 0.0]],
        ["i_La"], ["Va", "M1"], ["torque_M1"],
    )  # fmt: skip
    return compose(
        [armature, rotary_inertia("rotor", J, b), controller],
        {
            "rotor.torque": "armature.torque_M1",
            "armature.M1": "rotor.speed",
            "armature.Va": "pi.command",
            "pi.measurement": "rotor.speed",
        },
        {"ref": "pi.reference", "TL": "rotor.load_torque"},
        {"speed": "rotor.speed", "command": "pi.command"},
        name="speed_loop",
    )


# plant states [i, w] of the DC motor of test_linear.py (angle left out: it feeds nothing)
A_PLANT = np.array([[-R / L, -K / L], [K / J, -b / J]])
B_PLANT = np.array([[1 / L], [0.0]])


@pytest.mark.parametrize("delay", [False, True])
def test_sampled_pi_loop_against_reference_loop(delay):
    # reference: plant discretised by scipy.signal.cont2discrete (ZOH) at the output step,
    # and a PI written out here from Astrom and Wittenmark, Computer-Controlled Systems,
    # sec. 8.6 (forward-difference integral, back-calculation with Tt = Ti, limits +-8 V).
    # Same arithmetic, different code: agreement to 1e-9 relative (round-off only).
    Ts, dt, kp, ki, lim = 0.01, 0.002, 60.0, 150.0, 8.0
    pi = PIDController("pi", kp=kp, ki=ki, sample_time=Ts, output_limits=(-lim, lim),
                       delay=delay)  # fmt: skip
    result = simulate(motor_loop(pi), 2.0, dt, {"ref": "step:1"})
    Ad, Bd, *_ = cont2discrete((A_PLANT, B_PLANT, np.eye(2), np.zeros((2, 1))), dt, "zoh")
    x = np.zeros(2)
    integral, pending, command = 0.0, 0.0, 0.0
    speeds, commands = [], []
    M = round(Ts / dt)
    for k in range(len(result.time)):
        if k % M == 0:
            e = 1.0 - x[1]
            v = kp * e + integral
            u = min(max(v, -lim), lim)
            integral += ki * Ts * e + Ts / (kp / ki) * (u - v)
            if delay:
                command, pending = pending, u
            else:
                command = u
        speeds.append(x[1])
        commands.append(command)
        x = Ad @ x + Bd[:, 0] * command
    np.testing.assert_allclose(result.output("speed"), speeds, rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(result.output("command"), commands, rtol=1e-9, atol=1e-12)
    assert max(commands) == pytest.approx(lim)  # the limit was active: anti-windup exercised


def test_limited_continuous_pi_against_solve_ivp():
    # CasADi/CVODES (rtol 1e-10) against scipy's Radau at rtol 1e-11 on the same equations
    # written out here (back-calculation, Astrom and Hagglund, Advanced PID Control, sec.
    # 3.5): adaptive solvers, agreement 1e-6 relative.
    kp, ki, lim = 60.0, 150.0, 8.0
    Tt = kp / ki
    pi = PIDController("pi", kp=kp, ki=ki, output_limits=(-lim, lim))
    result = simulate(motor_loop(pi), 2.0, 0.01, {"ref": "step:1"}, rtol=1e-10, atol=1e-12)

    def rhs(t, z):
        i, w, _angle, integral = z
        e = 1.0 - w
        v = kp * e + integral
        u = min(max(v, -lim), lim)
        return [(u - R * i - K * w) / L, (K * i - b * w) / J, w, ki * e + (u - v) / Tt]

    sol = solve_ivp(rhs, (0, 2.0), np.zeros(4), t_eval=result.time, method="Radau",
                    rtol=1e-11, atol=1e-13)  # fmt: skip
    np.testing.assert_allclose(result.output("speed"), sol.y[1], rtol=1e-6, atol=1e-8)
    assert "CVODES" in result.method


def test_sample_time_must_be_whole_number_of_steps():
    pi = PIDController("pi", kp=1.0, ki=1.0, sample_time=0.0015)
    with pytest.raises(SimulationError) as info:
        simulate(motor_loop(pi), 0.1, 0.001, {"ref": 1.0})
    assert info.value.code == "invalid_step" and "pi" in info.value.message


def test_user_nonlinear_block_against_solve_ivp():
    # a rotor with Coulomb-like friction smoothed by tanh (user NonlinearBlock) driven by a
    # constant torque through a linear filter; reference: the same equations in scipy's
    # Radau at rtol 1e-11; adaptive solvers, 1e-6 relative
    import casadi as ca

    from wirestate.blocks import NonlinearBlock, sensor_filter

    J_r, T_c, w_s = 0.02, 0.3, 0.05

    def dynamics(x, u):
        return (u[0] - T_c * ca.tanh(x[0] / w_s)) / J_r, x[0]

    rotor = NonlinearBlock("rotor", ["torque"], ["speed"], ["speed"], dynamics,
                           feedthrough=False)  # fmt: skip
    drive = sensor_filter("drive", 0.05)
    system = compose([drive, rotor], {"rotor.torque": "drive.measured"},
                     {"T": "drive.signal"}, {"speed": "rotor.speed"})  # fmt: skip
    result = simulate(system, 1.0, 1e-3, {"T": "step:0.5"}, rtol=1e-10, atol=1e-12)

    def rhs(t, z):
        f, w = z
        return [(0.5 - f) / 0.05, (f - T_c * np.tanh(w / w_s)) / J_r]

    sol = solve_ivp(rhs, (0, 1.0), [0, 0], t_eval=result.time, method="Radau",
                    rtol=1e-11, atol=1e-13)  # fmt: skip
    np.testing.assert_allclose(result.output("speed"), sol.y[1], rtol=1e-6, atol=1e-9)


def test_discrete_state_space_block_and_two_rates():
    # a discrete integrator given as a control.StateSpace (dt = 5 ms) and a sampled P
    # controller at 2 ms share one plant (first-order lag); reference loop written here
    # with the plant from scipy.signal.cont2discrete (ZOH), 1e-9 relative
    import control

    lag = control.ss([[-20.0]], [[20.0]], [[1.0]], [[0.0]], name="lag",
                     inputs=["u"], outputs=["y"], states=["y"])  # fmt: skip
    integ = control.ss([[1.0]], [[0.005]], [[1.0]], [[0.0]], 0.005, name="integ",
                       inputs=["e"], outputs=["q"], states=["q"])  # fmt: skip
    prop = PIDController("prop", kp=3.0, sample_time=0.002)
    system = compose(
        [lag, integ, prop],
        {"lag.u": "prop.command", "prop.measurement": "lag.y", "integ.e": "lag.y"},
        {"r": "prop.reference"},
        {"y": "lag.y", "q": "integ.q"},
    )
    dt = 0.001
    result = simulate(system, 0.2, dt, {"r": 1.0})
    Ad, Bd, *_ = cont2discrete(tuple(np.array([[v]]) for v in (-20.0, 20.0, 1.0, 0.0)), dt, "zoh")
    y, q, q_out, u = 0.0, 0.0, 0.0, 0.0
    ys, qs = [], []
    for k in range(len(result.time)):
        if k % 2 == 0:
            u = 3.0 * (1.0 - y)
        if k % 5 == 0:
            q_out = q
            q = q + 0.005 * y
        ys.append(y)
        qs.append(q_out)
        y = Ad[0, 0] * y + Bd[0, 0] * u
    np.testing.assert_allclose(result.output("y"), ys, rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(result.output("q"), qs, rtol=1e-9, atol=1e-12)


def test_stepper_refuses_a_system_with_sampled_blocks():
    from wirestate.simulate import Stepper

    with pytest.raises(WirestateError) as info:
        Stepper(motor_loop(PIDController("pi", kp=1.0, ki=1.0, sample_time=0.01)), dt=1e-3)
    assert "pi" in info.value.message
