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


def _closed_form(r: float, c: float, horizon: float) -> float:
    return 0.5 * c * (1.0 - math.exp(-2.0 * horizon / (r * c)))


@pytest.mark.parametrize("capacitance", [1e-6, 0.4e-6, 3e-6])
def test_energy_equals_the_closed_form_integral(rc_case, capacitance):
    # the RC case with 100 us steps (10 per time constant at 1 uF) and an energy limit
    path = rc_case()
    text = path.read_text(encoding="utf-8").replace('step = "10us"', 'step = "100us"')
    text = text.replace(
        "[objective]",
        '[[limits]]\nname = "charge_loss"\nkind = "energy"\npart = "R1"\nmax = "1uJ"\n\n'
        "[objective]",
    )
    path.write_text(text, encoding="utf-8")
    problem = Problem(load_tuning(path))
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
