"""The parametric compile (one CasADi function of part values) against the numeric compile.

Reference: :func:`wirestate.reduce.compile_circuit` of the circuit with the same values
written into it (sparse elimination of the stamped equations). The parametric function
replays that elimination's pivots on CasADi symbols once; wherever the numeric compile
chooses the same pivots (at any values for these circuits, whose every pivot is the only
row left for its unknown) both make the same operations, so every entry agrees to a few
units of round-off of itself (1e-13 relative, entry by entry; measured: to the bit).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from wirestate.errors import CompileError
from wirestate.parametric import ParametricCircuit
from wirestate.reduce import compile_circuit
from wirestate.spec import load_circuit

MODELS = Path(__file__).resolve().parents[1] / "models"
CIRCUITS = [
    MODELS / "drive_bus_filter.toml",
    MODELS / "lcl_grid_filter.toml",
    MODELS / "servo_armature.toml",
    MODELS / "tuning" / "drive_bus.toml",
]


@pytest.mark.parametrize("path", CIRCUITS, ids=lambda p: p.stem)
def test_parametric_matrices_equal_the_numeric_compile_at_random_values(path):
    spec = load_circuit(path)
    parts = [n for n, p in spec.parts.items() if p.kind in ("resistor", "capacitor", "inductor")]
    circuit = ParametricCircuit(spec, parts)
    rng = np.random.default_rng(7)
    rows = circuit.nominal * rng.uniform(0.5, 2.0, size=(5, len(parts)))
    batch = circuit.matrices(rows)
    for i, row in enumerate(rows):
        block = compile_circuit(spec.with_values(dict(zip(parts, row, strict=True))))
        for name in ("A", "B", "C", "D"):
            ref = getattr(block, name)
            np.testing.assert_allclose(batch[name][i], ref, rtol=1e-13, atol=0.0)


def test_bounds_reach_the_replayed_elimination():
    # the output capacitor and its ESR (tests/test_symbolic.py): over Resr from 50 ohm to
    # 5 kohm the pivots chosen at the file's 0.12 ohm fail and are chosen again at the
    # centre, which the numeric compile at the corners also chooses (same numbers, 1e-13);
    # over 1 mohm to 1 kohm no order holds and the compile is refused
    from tests.test_symbolic import _esr_output_stage

    spec = _esr_output_stage()
    circuit = ParametricCircuit(spec, ["Resr"], {"Resr": (50.0, 5e3)})
    batch = circuit.matrices(np.array([[50.0], [5e3]]))
    for i, value in enumerate((50.0, 5e3)):
        block = compile_circuit(spec.with_values({"Resr": value}))
        for name in ("A", "B", "C", "D"):
            np.testing.assert_allclose(batch[name][i], getattr(block, name), rtol=1e-13, atol=0)
    with pytest.raises(CompileError) as info:
        ParametricCircuit(spec, ["Resr"], {"Resr": (1e-3, 1e3)})
    assert (info.value.code, info.value.location) == ("unstable_elimination", ("parts", "Resr"))


def test_symbolic_state_space_differentiates_like_central_differences():
    # d(A)/d(Cf) by CasADi's forward mode against central differences of the numeric
    # compile; 1e-6 relative: the differences' truncation error h^2 f''' / 6 at h = 1e-4
    import casadi

    spec = load_circuit(MODELS / "tuning" / "drive_bus.toml")
    circuit = ParametricCircuit(spec, ["Cf", "Rd"])
    c = casadi.SX.sym("c")
    A = circuit.state_space({"Cf": c})[0]
    dA = casadi.Function("dA", [c], [casadi.jacobian(casadi.vec(A), c)])
    cf = float(spec.parts["Cf"].value)
    h = 1e-4 * cf

    def numeric(value: float) -> np.ndarray:
        return compile_circuit(spec.with_values({"Cf": value})).A.ravel(order="F")

    reference = (numeric(cf + h) - numeric(cf - h)) / (2 * h)
    got = np.array(dA(cf)).ravel()
    np.testing.assert_allclose(got, reference, rtol=1e-6, atol=1e-6 * np.abs(reference).max())


def test_a_part_without_a_value_is_refused():
    spec = load_circuit(MODELS / "tuning" / "drive_bus.toml")
    with pytest.raises(CompileError) as info:
        ParametricCircuit(spec, ["Vbat"])
    assert info.value.code == "unknown_part"
    assert info.value.location == ("parts", "Vbat")
