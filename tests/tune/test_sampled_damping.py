"""Damping-ratio limits on sampled loops: one definition, s = ln(z) / T, for the optimiser
and the verification (issue 9.1).

Reference for the derivative: central differences of numpy's eigenvalues. Reference for
the definition: a pole z of the loop over one period T stands for s = ln(z) / T, whose
damping ratio is -Re(s) / |s| (e.g. Franklin, Powell and Workman, Digital Control of
Dynamic Systems, 3rd ed., sec. 4.3, the mapping z = exp(sT)).
"""

from __future__ import annotations

import textwrap

import numpy as np
import pytest

from tests.tune.conftest import RLC
from wirestate.spec.tuning import parse_tuning
from wirestate.tune.margins import limit_margins
from wirestate.tune.optimise import solve_nlp
from wirestate.tune.poles import pole_damping, shortfall
from wirestate.tune.problem import Problem


@pytest.mark.parametrize("seed", range(6))
def test_the_shortfall_derivative_matches_central_differences(seed):
    # d(zeta_min - zeta_i)/d Phi against central differences of numpy's eigenvalues on
    # random stable matrices; 1e-6 relative: the differences' truncation error at h = 1e-7
    rng = np.random.default_rng(seed)
    n, T = int(rng.integers(2, 6)), 50e-6
    Phi = rng.normal(size=(n, n))
    Phi *= rng.uniform(0.3, 0.95) / np.max(np.abs(np.linalg.eigvals(Phi)))
    values, rows = shortfall(Phi, T, 0.3)
    np.testing.assert_allclose(values, np.sort(0.3 - pole_damping(np.linalg.eigvals(Phi), T))[::-1])
    h = 1e-7
    for a in range(n):
        for b in range(n):
            up, down = Phi.copy(), Phi.copy()
            up[a, b] += h
            down[a, b] -= h
            slope = (shortfall(up, T, 0.3)[0] - shortfall(down, T, 0.3)[0]) / (2 * h)
            # a conjugate pair shares one damping ratio: compare where rows are distinct
            np.testing.assert_allclose(rows[:, a + n * b], slope, rtol=1e-5, atol=1e-5)


def _problem(tmp_path, seed: int) -> tuple[Problem, float]:
    rng = np.random.default_rng(seed)
    (tmp_path / "rlc.toml").write_text(textwrap.dedent(RLC), encoding="utf-8")
    period = float(rng.choice([20e-6, 40e-6, 60e-6]))
    kp, ki = float(rng.uniform(0.02, 0.3)), float(rng.uniform(20.0, 300.0))
    spec = {
        "tuning": {"name": "sampled_rlc", "circuit": "rlc.toml"},
        "variables": {"C1": {"min": "1uF", "max": "100uF", "start": "50uF"}},
        "controller": {
            "measurement": "v_out", "command": "Vs", "kp": kp, "ki": ki,
            "reference": "1V", "sample_time": period,
        },
        "scenario": {"until": "3ms", "step": period / 2, "initial": "zero"},
        "limits": [{"name": "damping", "kind": "damping_ratio", "min": 0.2}],
        "objective": {"capacitance": 1.0, "parts": ["C1"]},
    }  # fmt: skip
    problem = Problem(parse_tuning(spec, base_dir=str(tmp_path)))
    # a bound between the damping at the smallest and at the largest capacitance, so
    # that the limit binds (less capacitance, less damping)
    ev = problem.evaluate([{"C1": 1e-6}, {"C1": 100e-6}])
    from wirestate.tune.limits import pole_margin

    low, high = pole_margin(problem.spec.limits[0], ev, problem)[0]
    zeta = float(low + rng.uniform(0.3, 0.7) * (high - low))
    limit = problem.spec.limits[0].model_copy(update={"min": zeta})
    spec = problem.spec.model_copy(update={"limits": [limit]})
    return Problem(spec), zeta


@pytest.mark.parametrize("seed", range(5))
def test_the_continuous_optimum_of_a_sampled_loop_meets_its_damping_limit(tmp_path, seed):
    # random sampled PI loops around a series RLC: the least C1 whose every pole has a
    # damping ratio (s = ln(z)/T) of at least zeta_min; the optimiser's rows and the
    # verification now use that one definition, so the optimum verifies (to IPOPT's
    # tolerance, 1e-7 of the bound) and sits on the limit (within 1e-5)
    problem, zeta = _problem(tmp_path, seed)
    solution = solve_nlp(problem)
    assert solution.status == "Solve_Succeeded", solution.status
    start = problem.evaluate([problem.start_values()])
    (row,) = limit_margins(problem, problem.numeric(solution.values), start)
    assert row["margin"] >= -1e-7 * zeta
    assert row["margin"] <= 1e-5 * zeta
