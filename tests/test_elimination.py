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
    solution = eliminate(_rows(M), _rows(N), n, budget=10**6).solution
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


def test_replayed_pivots_give_the_same_numbers():
    # the pivots recorded on one elimination, replayed on the same rows, repeat every
    # operation: the solution is identical to the bit
    rng = np.random.default_rng(11)
    n = 30
    M = np.where(rng.random((n, n)) < 0.1, rng.normal(size=(n, n)), 0.0)
    M += np.diag(rng.uniform(0.5, 2.0, n))
    M = M[rng.permutation(n)]
    N = rng.normal(size=(n, 3))
    first = eliminate(_rows(M), _rows(N), n)
    again = eliminate(_rows(M), _rows(N), n, order=first.pivots)
    assert again.solution == first.solution and again.pivots == first.pivots


def test_replay_on_casadi_rows_matches_lapack_at_other_values():
    # a 3x3 system with a parameter a; pivots chosen at a = 5 and replayed on SX rows give
    # the solution of numpy.linalg.solve (the reference library) at other a
    import casadi

    from wirestate.elimination import UnstablePivot

    a = casadi.SX.sym("a")

    def system(x):
        return [{0: x, 1: 1.0}, {0: 1.0, 1: 2.0, 2: 1.0}, {1: 1.0, 2: 3.0}]

    known = [{0: 1.0}, {1: 1.0}, {0: 2.0, 1: -1.0}]
    order = eliminate(system(5.0), known, 3).pivots
    replayed = eliminate(system(a), known, 3, order=order)
    entries = [casadi.SX(v) for form in replayed.solution for v in form.values()]
    f = casadi.Function("f", [a], [casadi.vertcat(*entries)])
    for value in (5.0, 2.0, 40.0):
        M = np.array([[value, 1.0, 0.0], [1.0, 2.0, 1.0], [0.0, 1.0, 3.0]])
        want = np.linalg.solve(M, -np.array([[1.0, 0.0], [0.0, 1.0], [2.0, -1.0]]))
        got = np.array(f(value)).ravel()
        flat = [want[j, c] for j, form in enumerate(replayed.solution) for c in form]
        # a well-conditioned 3x3 solve: 1e-14 relative (a few units of round-off)
        assert np.allclose(got, flat, rtol=1e-14, atol=0.0)
    # at a = 0.5 the system is regular (det = 5a - 3) but the second pivot, 2 - 1/a,
    # vanishes: what the check on numbers is for
    assert np.isnan(np.array(f(0.5))).all()
    with pytest.raises(UnstablePivot) as info:
        eliminate(system(0.5), known, 3, order=order, min_ratio=0.01)
    assert info.value.ratio == 0.0


def test_replay_refuses_a_pivot_that_became_small():
    # unknown 0 is in two rows of equal length; at a = 5 the larger coefficient (row 0)
    # is taken. At a = 1e-4 that pivot is 1e-4 of its column: below min_ratio
    from wirestate.elimination import UnstablePivot

    def system(x):
        return [{0: x, 1: 1.0}, {0: 1.0, 1: 2.0}]

    known = [{0: 1.0}, {1: 1.0}]
    order = eliminate(system(5.0), known, 2).pivots
    assert order[0] == (0, 0)
    assert eliminate(system(0.25), known, 2, order=order, min_ratio=0.01) is not None
    with pytest.raises(UnstablePivot) as info:
        eliminate(system(1e-4), known, 2, order=order, min_ratio=0.01)
    assert (info.value.row, info.value.column) == (0, 0)
    assert info.value.ratio == pytest.approx(1e-4)


def test_contested_steps_are_recorded():
    # a ladder has no unknown with two rows left at its step (so its pivots hold at any
    # part values where its equations are regular); the 2x2 above has one
    from wirestate.equations import assemble, nominal_values
    from wirestate.reduce import _layout, _rows
    from wirestate.topology import analyse

    topology = analyse(ladder(10, resistance=0.05, inductance=1e-6, capacitance=1e-9))
    eq = assemble(topology, nominal_values(topology))
    rows, known = _rows(eq.rows, _layout(eq))
    result = eliminate(rows, known, eq.n_w)
    assert result.contested == {} and len(result.pivots) == eq.n_w
    result = eliminate([{0: 5.0, 1: 1.0}, {0: 1.0, 1: 2.0}], [{0: 1.0}, {1: 1.0}], 2)
    assert list(result.contested) == [0] and result.contested[0] == [5.0, 1.0]
