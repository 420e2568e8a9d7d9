"""Exact discretisation against closed forms, quadrature and a tight ODE solve."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.integrate import quad_vec, solve_ivp
from scipy.linalg import expm

from wirestate.errors import SimulationError
from wirestate.simulate.discretize import Discretization, foh, zoh


def test_zoh_first_order_closed_form():
    # dx/dt = -a x + b u: Ad = exp(-a dt), Bd = b (1 - exp(-a dt)) / a (Franklin, Powell
    # and Workman, Digital Control of Dynamic Systems, eq. 4.58); closed form, 1e-12 rel
    a, b, dt = 3.7, 2.5, 0.013
    Ad, Bd = zoh([[-a]], [[b]], dt)
    assert Ad[0, 0] == pytest.approx(math.exp(-a * dt), rel=1e-12)
    assert Bd[0, 0] == pytest.approx(b * (1 - math.exp(-a * dt)) / a, rel=1e-12)


def test_zoh_double_integrator_closed_form():
    # x'' = u: Ad = [[1, dt], [0, 1]], Bd = [dt^2/2, dt] (Franklin, Powell and Workman,
    # example 4.11, from memory); closed form, 1e-12 relative
    dt = 0.2
    Ad, Bd = zoh([[0, 1], [0, 0]], [[0], [1]], dt)
    np.testing.assert_allclose(Ad, [[1, dt], [0, 1]], rtol=1e-12, atol=1e-15)
    np.testing.assert_allclose(Bd, [[dt * dt / 2], [dt]], rtol=1e-12)


def test_foh_matches_quadrature():
    # the two hold integrals evaluated by adaptive quadrature (scipy quad_vec) as the
    # outside reference; matrix-exponential accuracy, 1e-10 absolute on O(0.1) entries
    A = np.array([[0.0, 1.0], [-4.0, -0.3]])
    B = np.array([[0.0], [1.0]])
    dt = 0.3
    Ad, B0, B1 = foh(A, B, dt)
    G1 = quad_vec(lambda s: expm(A * s) @ B, 0, dt, epsabs=1e-14)[0]
    G2 = quad_vec(lambda s: expm(A * (dt - s)) @ B * s / dt, 0, dt, epsabs=1e-14)[0]
    np.testing.assert_allclose(B1, G2, atol=1e-10)
    np.testing.assert_allclose(B0, G1 - G2, atol=1e-10)
    np.testing.assert_allclose(Ad, expm(A * dt), rtol=1e-12)


def test_zoh_step_against_tight_solve_ivp():
    # a held input over one long step against scipy's Radau at rtol 1e-12 (adaptive
    # solver, agreement to 1e-8 relative)
    A = np.array([[-0.5, 2.0], [-3.0, -1.0]])
    B = np.array([[1.0], [0.5]])
    dt = 0.7
    Ad, Bd = zoh(A, B, dt)
    x0 = np.array([0.3, -0.2])
    sol = solve_ivp(lambda t, x: A @ x + B[:, 0] * 1.5, (0, dt), x0, method="Radau",
                    rtol=1e-12, atol=1e-14)  # fmt: skip
    np.testing.assert_allclose(Ad @ x0 + Bd[:, 0] * 1.5, sol.y[:, -1], rtol=1e-8)


def test_stiff_block_at_coarse_step_stays_exact():
    # a 1 MHz lightly damped LC mode and a 1 s mechanical mode in one block, stepped at
    # 1 ms (6000 periods of the fast mode per step). Reference: the closed-form step
    # response of each decoupled mode (second-order underdamped response, Ogata, Modern
    # Control Engineering, 5th ed., eq. 5-10; first-order lag e^(-t/tau)). The fast mode
    # has settled, so the exact answer is its DC value; matrix exponential, 1e-9.
    w = 2 * math.pi * 1e6
    zeta = 0.02
    tau = 1.0
    A = np.array([[0, 1, 0], [-w * w, -2 * zeta * w, 0], [0, 0, -1 / tau]])
    B = np.array([[0], [w * w], [1 / tau]])
    dt = 1e-3
    Ad, Bd = zoh(A, B, dt)
    x = np.zeros(3)
    for _ in range(50):
        x = Ad @ x + Bd[:, 0]
    t = 50 * dt
    wd = w * math.sqrt(1 - zeta * zeta)
    fast = 1 - math.exp(-zeta * w * t) * (
        math.cos(wd * t) + zeta / math.sqrt(1 - zeta * zeta) * math.sin(wd * t)
    )
    assert x[0] == pytest.approx(fast, rel=1e-9)
    assert abs(x[1]) < 1e-6 * w  # velocity of the settled fast mode, scaled by w
    assert x[2] == pytest.approx(1 - math.exp(-t / tau), rel=1e-9)


def test_cache_returns_same_matrices_per_step():
    d = Discretization([[-1.0]], [[1.0]])
    first = d.zoh(1e-3)
    assert d.zoh(1e-3) is first
    assert d.zoh(2e-3) is not first
    assert d.foh(1e-3) is d.foh(1e-3)


@pytest.mark.parametrize("dt", [0.0, -1e-3, float("nan"), float("inf")])
def test_bad_step_is_refused(dt):
    with pytest.raises(SimulationError) as info:
        zoh([[-1.0]], [[1.0]], dt)
    assert info.value.code == "invalid_step"
