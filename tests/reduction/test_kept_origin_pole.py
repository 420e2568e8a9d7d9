"""A pole at the origin kept by reduction stays at the origin (review of issue 15).

A current source charging an RC ladder integrates: its transfer function has a pole at
s = 0 exactly. Round-off of the Schur form moved the kept pole to -6.5e-12 1/s, so the
reduced block leaked where the circuit integrates, and at 1e-6 rad/s the two responses
were 2e6 V/A apart against a bound of 0.015 V/A.
"""

from __future__ import annotations

import numpy as np
import pytest
import sympy

from tests.robustness.conftest import circuit, part
from wirestate.balanced import reduce_block
from wirestate.reduce import compile_circuit
from wirestate.spec import parse_circuit

CHARGED_LADDER = circuit(
    "charged",
    {"Is": part("current_source", ["gnd", "n0"]),
     "C0": part("capacitor", ["n0", "gnd"], value=1e-6),
     "R1": part("resistor", ["n0", "n1"], value=1.0),
     "C1": part("capacitor", ["n1", "gnd"], value=1e-6),
     "R2": part("resistor", ["n1", "n2"], value=1.0),
     "C2": part("capacitor", ["n2", "gnd"], value=1e-6)},
    {"v": {"voltage": "n2"}},
)  # fmt: skip


def exact_response(A, B, C, D, s):
    """``C (sI - A)^-1 B + D`` in exact rational arithmetic (sympy), the float matrices
    taken as the exact binary numbers they are."""
    rational = [
        sympy.Matrix(np.asarray(M).tolist()).applyfunc(sympy.Rational) for M in (A, B, C, D)
    ]
    A, B, C, D = rational
    return (C * (s * sympy.eye(A.shape[0]) - A).LUsolve(B) + D)[0, 0]


def test_the_kept_integrator_is_exact_and_the_bound_holds_at_low_frequency():
    full = compile_circuit(parse_circuit(CHARGED_LADDER))
    result = reduce_block(full, order=2)
    reduced = result.block
    assert 0.0 in np.linalg.eigvals(reduced.A)  # the integrator, exactly
    # Glover's bound 2 * sum of the discarded Hankel singular values (Enns 1984; Glover
    # 1984) on |G - G_r| from 1 urad/s to 1 Mrad/s, both responses evaluated exactly by
    # sympy (the reference). The kept pole's residue is a float on both sides, so its
    # round-off adds up to a few eps of |G| (64 eps allowed: ~5e-3 V/A at 1e-6 rad/s, where
    # |G| = 3.3e11 V/A); the leaking pole gave 2e6 V/A there
    for w in ("1/1000000", "1/100", "1", "1000", "1000000"):
        s = sympy.I * sympy.Rational(w)
        exact = exact_response(full.A, full.B, full.C, full.D, s)
        difference = exact - exact_response(reduced.A, reduced.B, reduced.C, reduced.D, s)
        round_off = 64 * np.finfo(float).eps * float(abs(exact))
        assert float(abs(difference)) <= result.error_bound + round_off, w


@pytest.mark.parametrize("order", [1, 2])
def test_the_dc_behaviour_of_the_integrator_is_kept(order):
    # i_C into the three capacitors: v rises at Is / (C0 + C1 + C2) volts per second at
    # rest, the residue of the pole at the origin (charge conservation, closed form)
    full = compile_circuit(parse_circuit(CHARGED_LADDER))
    reduced = reduce_block(full, order=order).block
    s = sympy.I * sympy.Rational(1, 10**9)
    residue = complex(exact_response(reduced.A, reduced.B, reduced.C, reduced.D, s) * s)
    assert residue.real == pytest.approx(1 / 3e-6, rel=1e-9)
