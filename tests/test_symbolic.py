"""The CasADi path gives the numeric compiler's matrices, and exact derivatives."""

from __future__ import annotations

import casadi
import numpy as np
import pytest

from tests.conftest import MODELS
from tests.test_models import CIRCUIT_FILES
from wirestate.equations import part_parameter
from wirestate.reduce import compile_circuit, symbolic_state_space
from wirestate.spec import load_circuit


def _valued_parts(spec):
    return [n for n, p in spec.parts.items() if part_parameter(p.kind) is not None]


#: circuits with switches or diodes are compared per mode in tests/simulate/
#: test_switched_engine.py: their 10 Mohm off states make the stamped system too stiff
#: for a 1e-9 comparison of two different eliminations (measured: QR and LU differ by
#: 8e-9 of the largest entry, 5.7e14 /s, on the bundled buck's all-off mode)
LINEAR_FILES = [p for p in CIRCUIT_FILES if "switch" not in p.read_text("utf-8")
                and "diode" not in p.read_text("utf-8")]  # fmt: skip


@pytest.mark.parametrize("path", LINEAR_FILES, ids=lambda p: p.name)
@pytest.mark.parametrize("kind", [casadi.SX, casadi.MX])
def test_symbolic_equals_numeric_at_perturbed_values(path, kind):
    spec = load_circuit(path)
    names = _valued_parts(spec)[:6]
    symbols = {n: kind.sym(n) for n in names}
    sym = symbolic_state_space(spec, symbols)
    f = casadi.Function("abcd", list(symbols.values()), [sym.A, sym.B, sym.C, sym.D])
    rng = np.random.default_rng(7)
    nominal = {n: getattr(spec.parts[n], part_parameter(spec.parts[n].kind)) for n in names}
    perturbed = {n: v * (1 + 0.3 * rng.uniform(-1, 1)) for n, v in nominal.items()}
    if any(spec.parts[n].kind == "coupling" for n in names):
        perturbed = {n: min(v, 0.99) for n, v in perturbed.items()}
    got = [np.array(m) for m in f(*perturbed.values())]
    want = compile_circuit(spec.with_values(perturbed))
    # same arithmetic, different linear solvers (QR vs LU): 1e-9 relative to each matrix
    for g, w in zip(got, (want.A, want.B, want.C, want.D), strict=True):
        assert np.allclose(g, w, rtol=1e-9, atol=1e-9 * max(1.0, np.abs(w).max()))


def test_mx_gradient_matches_central_difference():
    spec = load_circuit(MODELS / "drive_bus_filter.toml")
    r, c = casadi.MX.sym("Rd"), casadi.MX.sym("Cd")
    sym = symbolic_state_space(spec, {"Rd": r, "Cd": c})
    trace = casadi.trace(sym.A)
    grad = casadi.Function("g", [r, c], [casadi.gradient(trace, casadi.vertcat(r, c))])
    f = casadi.Function("f", [r, c], [trace])
    r0, c0 = 0.47, 680e-6
    g = np.array(grad(r0, c0)).ravel()
    # central differences, step 1e-6 relative: truncation ~1e-12, round-off ~1e-10 relative
    hr, hc = 1e-6 * r0, 1e-6 * c0
    fd = [
        (float(f(r0 + hr, c0)) - float(f(r0 - hr, c0))) / (2 * hr),
        (float(f(r0, c0 + hc)) - float(f(r0, c0 - hc))) / (2 * hc),
    ]
    assert np.allclose(g, fd, rtol=1e-6)


def test_unknown_variable_is_refused():
    from wirestate.errors import WirestateError

    spec = load_circuit(MODELS / "drive_bus_filter.toml")
    with pytest.raises(WirestateError) as info:
        symbolic_state_space(spec, {"Vbat": casadi.SX.sym("v")})
    assert info.value.code == "unknown_part"
