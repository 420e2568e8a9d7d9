"""The energy limit integrates the exact piecewise solution between samples (issue 9.5).

Reference: Vs = 1 V applied at t = 0 to R1 charging C1 from zero dissipates
E(T) = (C V^2 / 2) (1 - exp(-2 T / (R C))) in R1 by time T (the integral of
(V/R)^2 exp(-2t/(RC)) R from the first-order step response; Nilsson and Riedel, Electric
Circuits, sec. 7.4). With 10 samples per time constant a trapezoid over the samples is off
by about (h/tau)^2 / 3 = 0.3 %; the exact integral (Van Loan's block exponential) matches to
the accuracy of a matrix exponential, 1e-9 relative.
"""

from __future__ import annotations

import math

import pytest

from wirestate.tune import load_tuning
from wirestate.tune.limits import resistor_energy
from wirestate.tune.problem import Problem

TUNING = """
    [tuning]
    name = "rc_energy"
    circuit = "rc.toml"
    [variables.C1]
    min = "0.1uF"
    max = "10uF"
    [scenario]
    until = "2ms"
    step = "100us"
    initial = "zero"
    [[limits]]
    name = "charge_loss"
    kind = "energy"
    part = "R1"
    max = "1uJ"
    [objective]
    capacitance = 1.0
    parts = ["C1"]
"""


def _closed_form(r: float, c: float, horizon: float) -> float:
    return 0.5 * c * (1.0 - math.exp(-2.0 * horizon / (r * c)))


@pytest.mark.parametrize("capacitance", [1e-6, 0.4e-6, 3e-6])
def test_energy_equals_the_closed_form_integral(write, capacitance):
    from tests.tune.conftest import RC_CIRCUIT

    write("rc.toml", RC_CIRCUIT)
    problem = Problem(load_tuning(write("tune.toml", TUNING)))
    expected = _closed_form(1e3, capacitance, 2e-3)
    independent = resistor_energy(problem, problem.numeric({"C1": capacitance}), "R1")
    parametric = resistor_energy(problem, problem.evaluate([{"C1": capacitance}]), "R1")[0]
    # closed form above, 1e-9 relative (matrix exponential accuracy)
    assert independent == pytest.approx(expected, rel=1e-9)
    assert parametric == pytest.approx(expected, rel=1e-9)
    # the trapezoid over the samples this replaces misses by more than 1e-4 here
    y = problem.numeric({"C1": capacitance}).Y[problem.outputs.index("i__R1")]
    h = problem.output_step
    trapezoid = 1e3 * h * (float((y**2).sum()) - 0.5 * float(y[0] ** 2 + y[-1] ** 2))
    assert abs(trapezoid / expected - 1.0) > 1e-4
