"""Sensitivities of circuits whose part values lie many decades apart (review of issue 15).

A 1 kOhm / 100 fF RC low-pass is an ordinary stray-capacitance model, yet its symbolic
equations hold stamps near 1e-13 beside conductances near 1e-3; the sensitivity code must
give its elasticities, and values beyond double precision must end in a note or one of our
errors, never in a traceback or a wrong pole.
"""

from __future__ import annotations

import casadi
import numpy as np
import pytest

from wirestate.errors import WirestateError
from wirestate.sensitivity import circuit_sensitivities, elasticities, modes_of
from wirestate.spec import parse_circuit


def rc(capacitance: float, resistance: float = 1e3):
    return parse_circuit(
        {
            "circuit": {"name": "stray"},
            "parts": {
                "V1": {"kind": "voltage_source", "nodes": ["a", "gnd"]},
                "R1": {"kind": "resistor", "nodes": ["a", "b"], "value": resistance},
                "C1": {"kind": "capacitor", "nodes": ["b", "gnd"], "value": capacitance},
            },
            "outputs": {"v": {"voltage": "b"}},
        }
    )


@pytest.mark.parametrize("capacitance", [100e-15, 1e-15, 1e-18])
def test_femtofarad_rc_has_the_closed_form_elasticities(capacitance):
    sens = circuit_sensitivities(rc(capacitance))
    (wn,) = [q for q in sens.quantities if q.kind == "natural_frequency"]
    # first-order low-pass: wn = 1 / (R C), so d ln wn / d ln R = d ln wn / d ln C = -1
    # exactly (closed form); the DC gain is 1 whatever R and C, elasticity 0. Tolerance
    # 1e-12: one division and the LU solve of a 3x3 system in double precision
    assert wn.value == pytest.approx(1.0 / (1e3 * capacitance), rel=1e-12)
    assert wn.elasticity["R1"] == pytest.approx(-1.0, abs=1e-12)
    assert wn.elasticity["C1"] == pytest.approx(-1.0, abs=1e-12)
    (gain,) = [q for q in sens.quantities if q.kind == "dc_gain"]
    assert gain.value == pytest.approx(1.0, rel=1e-12)
    assert gain.elasticity == {"R1": pytest.approx(0.0, abs=1e-12),
                               "C1": pytest.approx(0.0, abs=1e-12)}  # fmt: skip


def test_a_pole_near_the_overflow_range_is_not_taken_for_the_origin():
    # a 1 kOhm / 1e-300 F RC: the pole is -1/(R C) = -1e297 1/s (closed form). LAPACK's
    # eigen-solver with left vectors returned -1.5e138 for it, which then read as s = 0
    (mode,) = modes_of(np.array([[-1e297]]), ["v_C1"])
    assert mode.eigenvalue == pytest.approx(-1e297, rel=1e-12)
    assert not mode.at_origin
    sens = circuit_sensitivities(rc(1e-300))
    (wn,) = [q for q in sens.quantities if q.kind == "natural_frequency"]
    assert wn.value == pytest.approx(1e297, rel=1e-12)
    # d wn / d C = 1e597 is beyond double precision: no number, and a note that says why
    assert wn.elasticity is None and "double precision" in wn.note


def test_a_function_that_cannot_be_evaluated_is_our_error():
    # a singular 2x2 solve: CasADi stops with a RuntimeError, which becomes one message
    p = casadi.MX.sym("R1")
    matrix = casadi.vertcat(casadi.horzcat(p, p), casadi.horzcat(p, p))
    function = casadi.Function("f", [p], [casadi.solve(matrix, casadi.DM([1.0, 1.0]), "qr")],
                               ["R1"], ["y"])  # fmt: skip
    with pytest.raises(WirestateError) as info:
        elasticities(function, {"R1": 2.0})
    assert info.value.code == "non_finite_result" and info.value.location == ("parts",)
