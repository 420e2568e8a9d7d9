"""Large sparse blocks stepped by the action of the matrix exponential, against the dense
exact hold (scipy's ``expm`` of Van Loan's augmented matrix, the reference library).

Tolerance: 1e-10 of the largest state over a few hundred steps. Both sides are exact holds
computed to a backward error near the unit roundoff per step (Al-Mohy and Higham 2011 for
the action, Al-Mohy and Higham 2009 for ``expm``); the class of matrix exponentials is
~1e-9, and the steps add round-off, not truncation error.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from wirestate.lti import CircuitBlock
from wirestate.reduce import compile_circuit
from wirestate.simulate import simulate
from wirestate.simulate.discretize import foh, zoh
from wirestate.simulate.exponential_action import (
    THETA,
    ExponentialAction,
    is_cheaper_than_dense,
    propagate_sparse,
    taylor_parameters,
)
from wirestate.simulate.linear import propagate
from wirestate.spec.generate import ladder

TOLERANCE = 1e-10


@pytest.fixture(scope="module")
def cable():
    # 300 sections, 600 states: above the size where the compiler keeps A sparse
    spec = ladder(300, resistance=0.05, inductance=1e-6, capacitance=1e-9, load_resistance=10.0)
    block = compile_circuit(spec)
    assert block.sparse_A is not None
    return block


def _drive(steps: int, dt: float) -> np.ndarray:
    t = np.arange(steps) * dt
    return np.vstack([48.0 * (t > 5 * dt) + 5.0 * np.sin(2 * np.pi * 3e6 * t)])


@pytest.mark.parametrize("dt", [2e-8, 1e-6])  # |A dt| about 1.3 and 63: one and many scalings
def test_zero_order_hold_matches_the_dense_exponential(cable, dt):
    U = _drive(200, dt)
    x0 = np.linspace(0.0, 1.0, cable.n_states)
    X = propagate_sparse(cable.sparse_A, cable.B, x0, U, dt)
    Ad, Bd = zoh(cable.A, cable.B, dt)
    want = propagate(Ad, Bd, x0, U[:, :-1])
    assert np.abs(X - want).max() <= TOLERANCE * np.abs(want).max()


def test_first_order_hold_matches_the_dense_exponential(cable):
    dt = 5e-8
    U = _drive(200, dt)
    X = propagate_sparse(cable.sparse_A, cable.B, np.zeros(cable.n_states), U, dt, hold="foh")
    Ad, B0, B1 = foh(cable.A, cable.B, dt)
    # x[k+1] = Ad x[k] + B0 u[k] + B1 u[k+1], stepped directly
    want = np.zeros_like(X)
    for k in range(U.shape[1] - 1):
        want[:, k + 1] = Ad @ want[:, k] + B0 @ U[:, k] + B1 @ U[:, k + 1]
    assert np.abs(X - want).max() <= TOLERANCE * np.abs(want).max()


def test_simulate_of_the_sparse_block_gives_the_dense_blocks_outputs(cable):
    dense = CircuitBlock(
        cable.name, cable.A, cable.B, cable.C, cable.D, cable.states, cable.inputs,
        cable.outputs,
    )  # fmt: skip
    assert dense.sparse_A is None
    inputs = {"Vs": "sinusoid:10V,2MHz,mean=48V"}
    ours = simulate(cable, 4e-6, 2e-8, inputs)
    want = simulate(dense, 4e-6, 2e-8, inputs)
    assert np.abs(ours.outputs - want.outputs).max() <= TOLERANCE * np.abs(want.outputs).max()


def test_parameters_meet_the_truncation_bound(cable):
    # the chosen (m, s) satisfy alpha_p(M) / s <= theta_m for some p (Al-Mohy and Higham
    # 2011, eq. 3.11), the condition behind their backward-error bound of 2^-53
    action = ExponentialAction(cable.sparse_A, 1e-6)
    M, m, s = action.M, action.degree, action.scaling
    dense = M.toarray()
    norms = [np.linalg.norm(np.linalg.matrix_power(dense, p), 1) ** (1 / p) for p in range(1, 10)]
    alphas = [norms[0]] + [max(norms[p - 1], norms[p]) for p in range(2, 9) if m >= p * (p - 1) - 1]
    assert min(alphas) / s <= THETA[m] * (1 + 1e-12)
    # and the cost is no more than the plain one-norm choice would give
    plain = min(k * math.ceil(norms[0] / theta) for k, theta in THETA.items())
    assert m * s <= plain


def test_the_action_is_chosen_where_it_is_cheaper():
    big = compile_circuit(ladder(2000, resistance=0.05, inductance=1e-6, capacitance=1e-9))
    # 4000 states: one dense exponential alone costs more than thousands of actions
    assert is_cheaper_than_dense(big.sparse_A, 2e-8, 10_000)
    # 600 states over 10^5 steps: the dense product per step is cheaper
    small = compile_circuit(ladder(300, resistance=0.05, inductance=1e-6, capacitance=1e-9))
    assert not is_cheaper_than_dense(small.sparse_A, 2e-8, 100_000)


def test_zero_matrix_and_empty_runs():
    import scipy.sparse as sparse

    action = ExponentialAction(sparse.csr_matrix((3, 3)), 1.0)
    assert np.array_equal(action(np.ones(3)), np.ones(3))
    assert taylor_parameters(sparse.csr_matrix((3, 3))) == (0, 1)
