"""The exponential as one CasADi function with numpy derivatives (wirestate.tune.exponential).

References: scipy.linalg.expm and scipy.linalg.expm_frechet (Pade scaling and squaring and
its Frechet derivative, Al-Mohy and Higham, SIAM J. Matrix Anal. Appl. 30(4), 2009), a
general-purpose library; CasADi's own algorithmic differentiation of the same Taylor
polynomial written as an expression graph (wirestate.tune.expm); the adjoint identity of
the Frechet derivative of a real polynomial, <Ebar, L(X, dX)> = <L(X^T, Ebar), dX>
(Higham, Functions of Matrices, SIAM 2008, sec. 3.2); central differences of the
independent numeric path (numeric compile and scipy's exponential).
"""

from __future__ import annotations

import casadi
import numpy as np
import pytest
from scipy.linalg import expm as scipy_expm
from scipy.linalg import expm_frechet

from wirestate.tune import expm as cexpm
from wirestate.tune import load_tuning
from wirestate.tune.evaluation import independent_evaluation
from wirestate.tune.exponential import held_exponential, taylor_exponential
from wirestate.tune.parametric import SX_SIZE
from wirestate.tune.problem import Problem


def _matrix(n: int, norm: float, seed: int) -> np.ndarray:
    M = np.random.default_rng(seed).standard_normal((n, n))
    return M * norm / np.abs(M).sum(axis=0).max()


@pytest.mark.parametrize("norm", [0.1, 3.0, 40.0])
def test_value_and_directions_match_scipy(norm):
    # reference: scipy's expm and expm_frechet; tolerance: the documented truncation bound
    # 2**s * eps_T plus 1e-12 for rounding (the derivative of the polynomial carries the
    # same relative truncation error to first order)
    X = _matrix(9, norm, seed=2)
    s = cexpm.squarings_for_norm(norm)
    directions = np.random.default_rng(5).standard_normal((4, 9, 9))
    E, dE = taylor_exponential(X, directions, s)
    bound = cexpm.truncation_bound(s) + 1e-12
    ref = scipy_expm(X)
    assert np.abs(E - ref).max() / np.abs(ref).max() <= bound
    for d in range(4):
        ref_d = expm_frechet(X, directions[d], compute_expm=False)
        assert np.abs(dE[d] - ref_d).max() / np.abs(ref_d).max() <= bound


def _graph_and_callback(n: int, s: int):
    X = casadi.MX.sym("X", n, n)
    held = held_exponential(n, s)
    return X, held, cexpm.expm(X, s), held(X)


@pytest.mark.parametrize("n, norm", [(5, 0.3), (26, 4.0)])
def test_forward_and_reverse_match_casadi_ad_of_the_same_polynomial(n, norm):
    # reference: CasADi's forward (jacobian) and reverse (gradient) AD of the expression
    # graph of the same polynomial; tolerance 1e-12 relative, both exact to round-off
    s = cexpm.squarings_for_norm(norm)
    X0 = _matrix(n, norm, seed=n)
    X, held, graph, mine = _graph_and_callback(n, s)
    weight = casadi.DM(np.random.default_rng(3).standard_normal((n, n)))

    def derivatives(E):
        return [E, casadi.jacobian(E, X), casadi.gradient(casadi.sum1(casadi.sum2(weight * E)), X)]

    got = casadi.Function("got", [X], derivatives(mine))(X0)
    ref = casadi.Function("ref", [X], derivatives(graph))(X0)
    for a, b in zip(got, ref, strict=True):
        a, b = np.array(a), np.array(b)
        assert np.abs(a - b).max() <= 1e-12 * np.abs(b).max()


def test_reverse_is_the_adjoint_of_forward():
    # reference: <Ebar, L(X, dX)> = <L(X^T, Ebar), dX>, computed through CasADi's forward
    # and reverse calls of the callback; tolerance 1e-12 relative (round-off)
    n, s = 7, 3
    X0 = _matrix(n, 2.0, seed=11)
    rng = np.random.default_rng(4)
    dX, Ebar = rng.standard_normal((n, n)), rng.standard_normal((n, n))
    held = held_exponential(n, s)
    E = held(X0)
    tangent = np.array(held.forward(1)(X0, E, dX))
    adjoint = np.array(held.reverse(1)(X0, E, Ebar))
    left, right = float(np.sum(Ebar * tangent)), float(np.sum(adjoint * dX))
    assert left == pytest.approx(right, rel=1e-12)


LADDER_STAGES = 6


def _ladder(write) -> Problem:
    lines = ["[circuit]", 'name = "ladder"', "[parts.Vs]", 'kind = "voltage_source"',
             'nodes = ["in", "gnd"]', 'value = "12V"']  # fmt: skip
    before = "in"
    for k in range(1, LADDER_STAGES + 1):
        lines += [
            f"[parts.L{k}]", 'kind = "inductor"', f'nodes = ["{before}", "n{k}"]',
            'value = "10uH"', f"[parts.C{k}]", 'kind = "capacitor"',
            f'nodes = ["n{k}", "gnd"]', 'value = "47uF"', f"[parts.R{k}]",
            'kind = "resistor"', f'nodes = ["n{k}", "d{k}"]', 'value = "0.5ohm"',
            f"[parts.Cd{k}]", 'kind = "capacitor"', f'nodes = ["d{k}", "gnd"]',
            'value = "220uF"',
        ]  # fmt: skip
        before = f"n{k}"
    lines += ["[parts.Iload]", 'kind = "current_source"', f'nodes = ["{before}", "gnd"]',
              'value = "0A"', "[outputs.v_out]", f'voltage = "{before}"']  # fmt: skip
    write("ladder.toml", "\n".join(lines) + "\n")
    last = LADDER_STAGES
    path = write(
        "tune.toml",
        f"""
        [tuning]
        name = "ladder_damping"
        circuit = "ladder.toml"
        [variables.R{last}]
        min = "0.1ohm"
        max = "2ohm"
        [variables.Cd{last}]
        min = "47uF"
        max = "1mF"
        [scenario]
        until = "0.2ms"
        step = "2us"
        [[scenario.steps]]
        input = "Iload"
        at = "10us"
        to = "2A"
        [[limits]]
        name = "leg_energy"
        kind = "energy"
        part = "R{last}"
        max = "1J"
        [objective]
        capacitance = 1.0
        parts = ["Cd{last}"]
        """,
    )
    return Problem(load_tuning(path))


def test_a_large_loop_differentiates_like_the_independent_path(write):
    # reference: central differences (relative step 1e-5) of the independent numeric path
    # (numeric compile, scipy's exponential); tolerance 1e-6 relative: the differences'
    # truncation and rounding error at that step, far above the paths' 1e-12 agreement
    problem = _ladder(write)
    loop = problem.parametric()
    assert loop.function.size1_out(0) + 1 > SX_SIZE  # the loop is built as MX, with callbacks
    assert loop._compiled()["callbacks"]
    names = loop.parameters
    p0 = loop.nominal_row
    p = casadi.MX.sym("p", len(names))
    out = dict(zip(loop.keys, loop.function(p), strict=True))
    energy = loop._compiled()["energy"](p)
    energy = energy[0] if isinstance(energy, list | tuple) else energy
    watched = casadi.vertcat(casadi.vec(out["Phi"]), casadi.vec(out["Gamma"]), casadi.vec(energy))
    jacobian = np.array(casadi.Function("j", [p], [casadi.jacobian(watched, p)])(p0))

    def independent(row: np.ndarray) -> np.ndarray:
        ev = independent_evaluation(problem, dict(zip(names, row, strict=True)))
        energies = [np.ravel(ev.extra["energy"][k], "F") for k in loop.energy_parts]
        return np.concatenate([ev.Phi.ravel("F"), ev.Gamma.ravel("F"), *energies])

    value = np.array(casadi.Function("v", [p], [watched])(p0)).ravel()
    assert value == pytest.approx(independent(p0), rel=1e-9, abs=1e-12)
    for j in range(len(names)):
        step = 1e-5 * p0[j]
        plus, minus = p0.copy(), p0.copy()
        plus[j] += step
        minus[j] -= step
        central = (independent(plus) - independent(minus)) / (2 * step)
        scale = np.abs(central).max()
        assert np.abs(jacobian[:, j] - central).max() <= 1e-6 * scale
