"""The L-BFGS Hessian handed to IPOPT (wirestate.tune.quasi_newton).

References: the BFGS secant condition ``B s = y`` of the latest pair (Nocedal and Wright,
Numerical Optimization, 2nd ed., 2006, eq. 6.6); the compact representation of the
limited-memory BFGS matrix (Byrd, Nocedal and Schnabel, "Representations of quasi-Newton
matrices and their use in limited memory methods", Math. Programming 63, 1994, Theorem
2.3), an independent formula for the same matrix; the gradient of the Lagrangian
``grad f + J^T lambda`` (its definition).
"""

from __future__ import annotations

import numpy as np
import pytest

from wirestate.tune.quasi_newton import HISTORY, LimitedMemoryHessian


def _pairs(n: int, count: int, seed: int) -> list[tuple[np.ndarray, np.ndarray]]:
    # steps and gradient differences of a convex quadratic (y = H s, s^T y > 0)
    rng = np.random.default_rng(seed)
    M = rng.standard_normal((n, n))
    H = M @ M.T + n * np.eye(n)
    return [(s, H @ s) for s in rng.standard_normal((count, n))]


def _compact(pairs: list[tuple[np.ndarray, np.ndarray]]) -> np.ndarray:
    """Byrd, Nocedal and Schnabel (1994), Theorem 2.3, with B0 = delta I."""
    S = np.column_stack([s for s, _ in pairs])
    Y = np.column_stack([y for _, y in pairs])
    s, y = pairs[-1]
    delta = float(s @ y) / float(s @ s)
    SY = S.T @ Y
    L = np.tril(SY, -1)
    D = np.diag(np.diag(SY))
    middle = np.block([[delta * S.T @ S, L], [L.T, -D]])
    left = np.hstack([delta * S, Y])
    return delta * np.eye(S.shape[0]) - left @ np.linalg.solve(middle, left.T)


@pytest.mark.parametrize("n, count", [(2, 1), (4, 3), (8, 6), (32, 9)])
def test_matrix_is_the_compact_limited_memory_bfgs_matrix(n, count):
    # reference: the compact representation of the same pairs (the last HISTORY kept);
    # tolerance 1e-9 relative: two orderings of a few dozen products and one solve
    model = LimitedMemoryHessian(n)
    pairs = _pairs(n, count, seed=n)
    for s, y in pairs:
        model.add(s, y)
    B = model.dense()
    ref = _compact(pairs[-HISTORY:])
    assert np.abs(B - ref).max() <= 1e-9 * np.abs(ref).max()
    s, y = pairs[-1]
    # secant condition of the latest pair; B symmetric positive definite
    assert B @ s == pytest.approx(y, rel=1e-9)
    assert np.allclose(B, B.T)
    assert np.linalg.eigvalsh(B).min() > 0


def test_a_pair_without_positive_curvature_is_skipped():
    model = LimitedMemoryHessian(3)
    model.add(np.array([1.0, 0.0, 0.0]), np.array([-1.0, 0.5, 0.0]))
    model.add(np.array([0.0, 1.0, 0.0]), np.array([np.nan, 0.0, 0.0]))
    assert not model.pairs
    assert np.array_equal(model.dense(), np.eye(3))


def test_pairs_come_from_the_recorded_gradient_of_the_lagrangian():
    # y = sigma (grad f(x1) - grad f(x0)) + (J(x1) - J(x0))^T lambda, lambda at x1
    rng = np.random.default_rng(2)
    model = LimitedMemoryHessian(3)
    x0, x1 = rng.standard_normal(3), rng.standard_normal(3)
    g0, g1 = rng.standard_normal(3), rng.standard_normal(3)
    J0, J1 = rng.standard_normal((5, 3)), rng.standard_normal((5, 3))
    lam = np.abs(rng.standard_normal(5))
    for x, g, J in ((x0, g0, J0), (x1, g1, J1)):
        model.record(x, "grad_f", g)
        model.record(x, "jac_g", J)
    model.matrix(x0, 2.0, rng.standard_normal(5))
    y = 2.0 * (g1 - g0) + (J1 - J0).T @ lam
    if (x1 - x0) @ y <= 0:
        lam = -lam  # keep the pair's curvature positive, so that it is kept
        y = 2.0 * (g1 - g0) + (J1 - J0).T @ lam
    model.matrix(x1, 2.0, lam)
    s_kept, y_kept = model.pairs[-1]
    assert s_kept == pytest.approx(x1 - x0, rel=1e-15)
    assert y_kept == pytest.approx(y, rel=1e-12)


def test_a_new_round_keeps_the_pairs_and_forgets_the_last_iterate():
    model = LimitedMemoryHessian(4)
    for s, y in _pairs(4, 3, seed=5):
        model.add(s, y)
    before = model.dense()
    model.previous = (np.zeros(4), np.zeros(4), np.zeros((2, 4)))
    model.start_round()
    assert model.previous is None
    assert np.array_equal(model.dense(), before)
    # an iterate whose derivatives were not recorded leaves the matrix as it is
    assert np.array_equal(model.matrix(np.ones(4), 1.0, np.zeros(2)), before)
