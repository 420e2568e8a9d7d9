"""The CasADi matrix exponential against scipy, the PI loop against a hand-written recursion,
and the damping-ratio limit against the series-RLC closed form."""

from __future__ import annotations

import math

import casadi
import numpy as np
import pytest
from scipy.linalg import expm as scipy_expm

from tests.tune.conftest import RLC
from wirestate.tune import expm as cexpm
from wirestate.tune import load_tuning, solve
from wirestate.tune.loop import close_pi


@pytest.mark.parametrize("norm", [0.1, 3.0, 40.0])
def test_taylor_scaling_and_squaring_matches_scipy(norm):
    # reference: scipy.linalg.expm (Pade scaling and squaring, Al-Mohy and Higham 2009);
    # tolerance: the documented truncation bound 2**s * eps_T plus 1e-12 for rounding
    rng = np.random.default_rng(7)
    M = rng.standard_normal((6, 6))
    M *= norm / np.abs(M).sum(axis=0).max()
    s = cexpm.squarings_for_norm(norm)
    got = np.array(casadi.evalf(cexpm.expm(casadi.DM(M), s)))
    ref = scipy_expm(M)
    error = np.abs(got - ref).max() / np.abs(ref).max()
    assert error <= cexpm.truncation_bound(s) + 1e-12


def test_zoh_matches_the_numeric_engine():
    from wirestate.simulate.discretize import zoh

    A = np.array([[-1.0, 2e3], [-5e2, -30.0]])
    B = np.array([[1.0, 0.0], [0.0, 2.0]])
    dt = 1e-3
    s = cexpm.squarings_for_norm(np.abs(np.block([[A, B]]) * dt).sum(axis=0).max())
    Ad, Bd = (np.array(casadi.evalf(x)) for x in cexpm.zoh(casadi.DM(A), casadi.DM(B), dt, s))
    ref = zoh(A, B, dt)
    # matrix exponentials: 1e-9 relative (both near 1e-13 in fact)
    assert Ad == pytest.approx(ref.Ad, rel=1e-9, abs=1e-12)
    assert Bd == pytest.approx(ref.Bd, rel=1e-9, abs=1e-15)


def test_sampled_pi_loop_equals_a_hand_written_recursion():
    # plant x+ = Ad x + Bd u, y = C x; PI: e = r - y, u = kp e + ki z, z+ = z + Ts e
    # (forward-Euler PI, Franklin, Powell and Workman, Digital Control, 3rd ed., ch. 5)
    Ad = np.array([[0.9, 0.1], [-0.2, 0.95]])
    Bd = np.array([[0.0, 0.05], [0.1, 0.0]])  # inputs: [u (driven), w (disturbance)]
    C = np.array([[1.0, 0.0]])
    D = np.zeros((1, 2))
    kp, ki, ts = 0.8, 30.0, 1e-3
    loop = close_pi(
        Ad,
        Bd,
        C,
        D,
        states=["a", "b"],
        inputs=["u", "w"],
        outputs=["y"],
        measure="y",
        drive="u",
        kp=kp,
        ki=ki,
        sample_time=ts,
    )
    assert loop.inputs == ["w", "reference"]
    x, z, xc = np.zeros(2), 0.0, np.zeros(3)
    for k in range(50):
        w, r = (1.0 if k > 10 else 0.0), 2.0
        e = r - C @ x
        u = kp * e[0] + ki * z
        x = Ad @ x + Bd @ np.array([u, w])
        z = z + ts * e[0]
        xc = loop.A @ xc + loop.B @ np.array([w, r])
        # the same arithmetic in another order: 1e-12 relative; the controller block keeps
        # ki * z as its state (wirestate.blocks.controllers.PIDController)
        assert xc == pytest.approx(np.concatenate([x, [ki * z]]), rel=1e-12, abs=1e-12)


RLC_TUNING = """
    [tuning]
    circuit = "rlc.toml"
    [variables.R1]
    min = "1ohm"
    max = "100ohm"
    start = "30ohm"
    [scenario]
    until = "3ms"
    step = "5us"
    initial = "zero"
    [[limits]]
    name = "damping"
    kind = "damping_ratio"
    min = 0.7
    [objective]
    squared_error = 1.0
    output = "v_out"
"""


def test_damping_ratio_limit_binds_at_the_series_rlc_closed_form(write):
    # series RLC: zeta = (R/2) sqrt(C/L) (e.g. Ogata, Modern Control Engineering, 5th ed.,
    # sec. 5-3); the step ISE falls with less damping down to zeta ~ 0.5, so with
    # zeta >= 0.7 the optimum sits on the limit: R = 2 * 0.7 * sqrt(L/C) = 14 ohm
    write("rlc.toml", RLC)
    result = solve(load_tuning(write("tune.toml", RLC_TUNING)))
    expected = 2 * 0.7 * math.sqrt(1e-3 / 10e-6)
    # 1e-6 relative: IPOPT's constraint tolerance on the Routh-Hurwitz entries
    assert result.variables["R1"]["optimum"] == pytest.approx(expected, rel=1e-6)
    (limit,) = result.limits
    assert limit["margin_at_optimum"] == pytest.approx(0.0, abs=1e-6)
    # E24 neighbours 13 and 15 ohm: only 15 ohm keeps zeta >= 0.7 (zeta = 0.75)
    assert result.variables["R1"]["preferred"] == pytest.approx(15.0, rel=1e-12)
    assert limit["value"] == pytest.approx(0.75, rel=1e-9)


@pytest.mark.parametrize("order", [1, 2, 5, 12, 13])
def test_paterson_stockmeyer_evaluates_the_taylor_polynomial(order):
    # reference: the truncated series sum_k Y**k / k! with numpy matrix powers (definition of
    # the Taylor polynomial); 1e-14 relative: a different order of the same roundings
    rng = np.random.default_rng(3)
    M = rng.standard_normal((5, 5))
    M *= 0.5 / np.abs(M).sum(axis=0).max()
    got = np.array(casadi.evalf(cexpm.expm(casadi.DM(M), 0, order)))
    ref = sum(np.linalg.matrix_power(M, k) / math.factorial(k) for k in range(order + 1))
    assert np.abs(got - ref).max() <= 1e-14 * np.abs(ref).max()


@pytest.mark.parametrize("on", [(False, False), (True, False)])
def test_stiff_mode_exponential_against_50_digit_arithmetic(on):
    # reference: mpmath's matrix exponential at 50 digits. The snubbed buck's modes with a
    # diode or switch off (10 Mohm against 20 nH: a rate near -5e14 /s beside rates near
    # 1e4 /s) need 32 squarings over 2.6 us; squaring W = E - I keeps the slow rates'
    # digits (2e-11 and 4e-11 measured; squaring E itself, as expm does, gave 2.6e-8 and
    # 7e-8).
    # Tolerance 1e-9 relative: the project's figure for matrix exponentials.
    import mpmath

    from tests.reference.test_switched_physics import snubbed_buck

    mode = snubbed_buck().mode(on)
    n = mode.A.shape[0]
    M = np.zeros((n + 1, n + 1))
    M[:n, :n], M[:n, n] = mode.A, mode.B @ np.array([48.0, 1.0]) + mode.f
    M *= 2.6e-6
    s = cexpm.squarings_for_norm(np.abs(M).sum(axis=0).max())
    assert s >= 30
    got = np.eye(n + 1) + np.array(casadi.evalf(cexpm.expm_minus_identity(casadi.DM(M), s)))
    with mpmath.workdps(50):
        E = mpmath.expm(mpmath.matrix(M.tolist()))
        ref = np.array([[float(E[i, j]) for j in range(n + 1)] for i in range(n + 1)])
    assert np.abs(got - ref).max() <= 1e-9 * np.abs(ref).max()
