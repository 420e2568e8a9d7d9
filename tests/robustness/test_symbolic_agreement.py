"""Symbolic (CasADi) and numeric compile agreement over wide value spreads (issue 10.13).

The guarantee tested here: each of A, B, C, D from the CasADi path, evaluated at the part
values, agrees with the numeric (SuperLU) compile to 1e-12 relative to the largest entry
of that matrix (normwise, as backward-stable solves promise; Higham, Accuracy and
Stability of Numerical Algorithms, 2nd ed., ch. 9), for part values spread over up to 12
decades. Entries far below the largest are round-off on both sides and are not compared
one by one.
"""

from __future__ import annotations

import casadi
import numpy as np
import pytest

from wirestate.reduce import compile_circuit, symbolic_state_space
from wirestate.spec import load_circuit
from wirestate.spec.generate import ladder

MODELS = ["models/drive_bus_filter.toml", "models/lcl_grid_filter.toml"]


def _specs():
    yield ladder(4, resistance=1.0, inductance=1e-6, capacitance=1e-6)
    for path in MODELS:
        yield load_circuit(path)


@pytest.mark.parametrize("decades", [6, 9, 12])
def test_symbolic_and_numeric_agree_normwise(decades):
    rng = np.random.default_rng(decades)
    for spec in _specs():
        passive = {
            n: p for n, p in spec.parts.items() if p.kind in ("resistor", "inductor", "capacitor")
        }
        for _ in range(3):
            values = {
                n: float(p.value * 10 ** rng.uniform(-decades / 2, decades / 2))
                for n, p in passive.items()
            }
            numeric = compile_circuit(spec.with_values(values))
            symbols = {n: casadi.SX.sym(n) for n in values}
            ss = symbolic_state_space(spec, symbols)
            evaluate = casadi.Function("f", list(symbols.values()), [ss.A, ss.B, ss.C, ss.D])
            for got, want in zip(
                evaluate(*values.values()),
                (numeric.A, numeric.B, numeric.C, numeric.D),
                strict=True,
            ):
                got = np.array(got)
                scale = np.abs(want).max(initial=0.0)
                assert np.abs(got - want).max(initial=0.0) <= 1e-12 * max(scale, 1e-300)
