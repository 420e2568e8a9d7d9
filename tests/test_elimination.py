"""The plain-Python sparse elimination against LAPACK (numpy.linalg.solve, the reference
library) and against the SuperLU path it falls back to."""

from __future__ import annotations

import numpy as np
import pytest

import wirestate.reduce as reduce_module
from wirestate.elimination import SingularEquations, eliminate
from wirestate.reduce import compile_circuit
from wirestate.spec import load_circuit
from wirestate.spec.generate import ladder


def _rows(matrix: np.ndarray) -> list[dict[int, float]]:
    return [{j: float(v) for j, v in enumerate(row) if v != 0.0} for row in matrix]


@pytest.mark.parametrize("seed", range(8))
def test_random_sparse_systems_match_lapack(seed):
    rng = np.random.default_rng(seed)
    n, width = 40, 7
    M = np.where(rng.random((n, n)) < 0.08, rng.normal(size=(n, n)), 0.0)
    M += np.diag(rng.uniform(0.5, 2.0, n)) * rng.choice([-1, 1], n)
    M = M[rng.permutation(n)]  # pivots must be searched, not taken from the diagonal
    N = np.where(rng.random((n, width)) < 0.2, rng.normal(size=(n, width)), 0.0)
    solution = eliminate(_rows(M), _rows(N), n, budget=10**6)
    W = np.zeros((n, width))
    for j, form in enumerate(solution):
        for c, v in form.items():
            W[j, c] = v
    want = np.linalg.solve(M, -N)
    # backward-stable solves of well-conditioned systems: 1e-10 relative (normwise)
    assert np.abs(W - want).max() <= 1e-10 * np.abs(want).max()


def test_singular_system_names_the_unknown():
    M = np.array([[1.0, 2.0, 0.0], [2.0, 4.0, 0.0], [0.0, 1.0, 1.0]])
    with pytest.raises(SingularEquations):
        eliminate(_rows(M), [{0: 1.0}] * 3, 3, budget=10**6)


def test_budget_exceeded_gives_none():
    M = np.eye(5) + 1.0  # dense solution
    assert eliminate(_rows(M), _rows(np.eye(5)), 5, budget=10) is None


@pytest.mark.parametrize(
    "make",
    [
        lambda: ladder(300, resistance=0.05, inductance=1e-6, capacitance=1e-9),
        lambda: load_circuit("models/lcl_grid_filter.toml"),
        lambda: load_circuit("models/feeder_cable.toml"),
    ],
)
def test_compile_matches_the_superlu_path(make, monkeypatch):
    spec = make()
    ours = compile_circuit(spec)
    monkeypatch.setattr(reduce_module, "_elimination_budget", lambda n_w, width: 0)
    superlu = compile_circuit(spec)
    for name in ("A", "B", "C", "D", "state_offset"):
        got, want = np.asarray(getattr(ours, name)), np.asarray(getattr(superlu, name))
        # two backward-stable sparse LU orders: 1e-12 of the largest entry
        assert np.abs(got - want).max(initial=0.0) <= 1e-12 * np.abs(want).max(initial=1.0)


def test_large_ladder_keeps_a_sparse_a():
    block = compile_circuit(ladder(300, resistance=0.05, inductance=1e-6, capacitance=1e-9))
    assert block.sparse_A is not None and block.sparse_A.nnz < 4 * block.n_states
    # the dense A is made on first use and equals the sparse one
    assert np.array_equal(block.A, block.sparse_A.toarray())
