"""The CasADi path gives the numeric compiler's matrices, and exact derivatives.

The symbolic compile replays the numeric compile's pivots on CasADi values (the same
function, the same operations in the same order), so the two agree to round-off of the last
bit: measured, every entry of every bundled model and of every mode of aux_buck is equal
to the bit, at the file's values and at values two decades away. The tests ask for 1e-13 of
each entry (componentwise; an exact zero must stay exactly zero), which a different
elimination of the stiff switched circuits cannot meet (CasADi's QR against the sparse LU
differed by 8e-9 of the largest entry on aux_buck's all-off mode).
"""

from __future__ import annotations

import itertools

import casadi
import numpy as np
import pytest

from tests.conftest import MODELS
from tests.test_models import CIRCUIT_FILES
from wirestate.equations import part_parameter
from wirestate.reduce import compile_circuit, symbolic_state_space, valued_parts
from wirestate.spec import load_circuit
from wirestate.spec.generate import ladder
from wirestate.switching import SwitchedCircuit

#: componentwise agreement of the replayed elimination with the numeric one: a few units
#: of round-off of the entry itself (measured 0: the same operations)
AGREEMENT = 1e-13


def _values(spec, names):
    return {n: float(getattr(spec.parts[n], part_parameter(spec.parts[n].kind))) for n in names}


def _assert_entrywise(got, want, what=""):
    got, want = np.asarray(got, float), np.asarray(want, float)
    assert got.shape == want.shape
    error = np.abs(got - want)
    assert np.all(error <= AGREEMENT * np.abs(want)), (what, error.max())


def _moved(spec, rng, decades):
    """Every resistor, inductor and capacitor scaled by 10^u, u uniform in +-decades; other
    valued parts (gains, couplings, ratios) by up to +-30 % (couplings kept below 1)."""
    moved = {}
    for name, value in _values(spec, valued_parts(spec)).items():
        if spec.parts[name].kind in ("resistor", "inductor", "capacitor"):
            moved[name] = value * 10 ** rng.uniform(-decades, decades)
        else:
            moved[name] = value * (1 + 0.3 * rng.uniform(-1, 1))
            if spec.parts[name].kind == "coupling":
                moved[name] = min(moved[name], 0.99)
    return moved


@pytest.mark.parametrize("path", CIRCUIT_FILES, ids=lambda p: p.name)
@pytest.mark.parametrize("kind", [casadi.SX, casadi.MX])
def test_symbolic_equals_numeric_at_the_values_and_away_from_them(path, kind):
    # switched circuits included: compile_circuit takes their every-device-off mode
    spec = load_circuit(path)
    names = valued_parts(spec)
    symbols = {n: kind.sym(n) for n in names}
    sym = symbolic_state_space(spec, symbols)
    f = casadi.Function("abcd", list(symbols.values()), [sym.A, sym.B, sym.C, sym.D])
    rng = np.random.default_rng(7)
    points = [_values(spec, names), _moved(spec, rng, 0.15), _moved(spec, rng, 2.0)]
    for values in points:
        want = compile_circuit(spec.with_values(values))
        got = f(*values.values())
        for g, w, name in zip(got, (want.A, want.B, want.C, want.D), "ABCD", strict=True):
            _assert_entrywise(g, w, name)


@pytest.mark.parametrize("kind", [casadi.SX, casadi.MX])
def test_every_mode_of_aux_buck_equals_the_numeric_mode(kind):
    spec = load_circuit(MODELS / "aux_buck.toml")
    circuit = SwitchedCircuit(spec)
    names = valued_parts(spec)
    symbols = {n: kind.sym(n) for n in names}
    moved = _moved(spec, np.random.default_rng(3), 1.0)
    assert len(circuit.devices) == 2
    for on in itertools.product((False, True), repeat=2):
        sym = circuit.symbolic_mode(on, symbols)
        f = casadi.Function("mode", list(symbols.values()), [sym.A, sym.B, sym.C, sym.D])
        for values, reference in ((_values(spec, names), circuit), (moved, None)):
            mode = (reference or SwitchedCircuit(spec.with_values(values))).mode(on)
            want = (
                mode.A,
                mode.B_affine,
                np.vstack([mode.C, mode.P]),
                np.block([[mode.D, mode.g[:, None]], [mode.Q, mode.p[:, None]]]),
            )
            for g, w, name in zip(f(*values.values()), want, "ABCD", strict=True):
                _assert_entrywise(g, w, (on, name))


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


def test_sx_hessian_matches_the_hand_derived_one():
    # the optimiser differentiates twice. The bus filter's damping leg (Rd in series with Cd
    # across the bus capacitor Cbus) gives A[v_Cbus, v_Cbus] = -1/(Rd Cbus) and A[v_Cd,
    # v_Cd] = -1/(Rd Cd) (nodal analysis by hand), so the trace's mixed second derivative
    # is d2/dRd dCd (-1/(Rd Cd)) = -1/(Rd^2 Cd^2), and d2/dRd2 = -2/Rd^3 (1/Cbus + 1/Cd)
    spec = load_circuit(MODELS / "drive_bus_filter.toml")
    r, c = casadi.SX.sym("Rd"), casadi.SX.sym("Cd")
    sym = symbolic_state_space(spec, {"Rd": r, "Cd": c})
    trace = casadi.trace(sym.A)
    hessian = casadi.Function("h", [r, c], [casadi.hessian(trace, casadi.vertcat(r, c))[0]])
    r0, c0, cbus = 0.47, 680e-6, spec.parts["Cbus"].value
    H = np.array(hessian(r0, c0))
    # closed forms: 1e-12 relative
    assert H[0, 1] == pytest.approx(-1 / (r0**2 * c0**2), rel=1e-12)
    assert H[0, 0] == pytest.approx(-2 / r0**3 * (1 / cbus + 1 / c0), rel=1e-12)


def test_unknown_variable_is_refused():
    from wirestate.errors import WirestateError

    spec = load_circuit(MODELS / "drive_bus_filter.toml")
    with pytest.raises(WirestateError) as info:
        symbolic_state_space(spec, {"Vbat": casadi.SX.sym("v")})
    assert info.value.code == "unknown_part"


# -- pivots away from the values they were chosen at ------------------------------------------


def _esr_output_stage():
    """An output capacitor with its ESR, a load and a choke: the unknown potential between
    capacitor and ESR has two rows, the ESR's KCL (coefficient 1/Resr) and the capacitor's
    branch row (coefficient 1), so the pivot chosen at one Resr is contested at another."""
    from wirestate.spec import parse_circuit

    return parse_circuit(
        {
            "circuit": {"name": "esr_stage"},
            "parts": {
                "Vin": {"kind": "voltage_source", "nodes": ["in", "gnd"]},
                "L1": {"kind": "inductor", "nodes": ["in", "out"], "value": 33e-6},
                "Cout": {"kind": "capacitor", "nodes": ["out", "esr"], "value": 100e-6},
                "Resr": {"kind": "resistor", "nodes": ["esr", "gnd"], "value": 0.12},
                "Rload": {"kind": "resistor", "nodes": ["out", "gnd"], "value": 8.0},
            },
            "outputs": {"v_out": {"voltage": "out"}},
        }
    )


def test_pivots_are_kept_over_bounds_they_hold_in():
    # Resr from 0.05 to 1 ohm: the ESR row stays at least 1/20 of the capacitor row, above
    # MIN_PIVOT_RATIO, so the file's pivots are replayed and agree with the numeric
    # compile at the corners to the bit
    spec = _esr_output_stage()
    r = casadi.SX.sym("Resr")
    sym = symbolic_state_space(spec, {"Resr": r}, bounds={"Resr": (0.05, 1.0)})
    f = casadi.Function("a", [r], [sym.A, sym.B, sym.C, sym.D])
    for value in (0.05, 0.12, 1.0):
        want = compile_circuit(spec.with_values({"Resr": value}))
        for g, w in zip(f(value), (want.A, want.B, want.C, want.D), strict=True):
            _assert_entrywise(g, w)


def test_pivots_are_chosen_again_at_the_centre_of_bounds_they_fail_in(monkeypatch):
    # Resr from 50 ohm to 5 kohm (far from the file's 0.12 ohm): the ESR row's pivot,
    # chosen at 0.12 ohm, falls to 2e-4 of its column at 5 kohm; the pivots are chosen
    # again at the centre (500 ohm), where the capacitor row is taken, and hold over the
    # whole box. The numeric compile at 5 kohm chooses the same, so they agree to the bit.
    import wirestate.reduce as reduce_module

    chosen_at = []
    numeric_order = reduce_module._numeric_order

    def spy(topology, values, probes):
        chosen_at.append(values["Resr"])
        return numeric_order(topology, values, probes)

    monkeypatch.setattr(reduce_module, "_numeric_order", spy)
    spec = _esr_output_stage()
    r = casadi.SX.sym("Resr")
    sym = symbolic_state_space(spec, {"Resr": r}, bounds={"Resr": (50.0, 5e3)})
    assert chosen_at == [pytest.approx(500.0)]
    f = casadi.Function("a", [r], [sym.A, sym.B, sym.C, sym.D])
    for value in (50.0, 5e3):
        want = compile_circuit(spec.with_values({"Resr": value}))
        for g, w in zip(f(value), (want.A, want.B, want.C, want.D), strict=True):
            _assert_entrywise(g, w)


def test_bounds_no_pivot_order_holds_in_are_refused():
    # Resr from 1 mohm to 1 kohm: at 1 ohm, the centre, both rows pass the threshold and
    # the shorter one (the ESR row) is taken, which fails at 1 kohm again
    from wirestate.errors import WirestateError

    spec = _esr_output_stage()
    with pytest.raises(WirestateError) as info:
        symbolic_state_space(spec, {"Resr": casadi.SX.sym("r")}, bounds={"Resr": (1e-3, 1e3)})
    assert info.value.code == "unstable_elimination"
    assert info.value.location == ("parts", "Resr")
    assert "Resr = 1000" in info.value.message


def test_forced_pivots_need_no_check(monkeypatch):
    # every unknown of a ladder (as of the bundled linear models) has one row left at its
    # step, so no bounds can make a pivot vanish short of singular equations: the widest
    # box passes without a corner being replayed
    import wirestate.reduce as reduce_module

    def no_corners(names, box):
        raise AssertionError(f"corners replayed for {names}")

    monkeypatch.setattr(reduce_module, "_corners", no_corners)
    spec = ladder(20, resistance=0.05, inductance=1e-6, capacitance=1e-9)
    names = valued_parts(spec)
    bounds = {n: (1e-12, 1e12) for n in names}
    symbols = {n: casadi.SX.sym(n) for n in names}
    sym = symbolic_state_space(spec, symbols, bounds=bounds)
    f = casadi.Function("a", list(symbols.values()), [sym.A])
    rng = np.random.default_rng(1)
    values = {n: float(10.0 ** rng.uniform(-6, 6)) for n in names}
    _assert_entrywise(f(*values.values()), compile_circuit(spec.with_values(values)).A)


def test_bounds_must_name_variables():
    from wirestate.errors import WirestateError

    spec = _esr_output_stage()
    with pytest.raises(WirestateError) as info:
        symbolic_state_space(spec, {"Resr": casadi.SX.sym("r")}, bounds={"Rload": (1, 2)})
    assert info.value.code == "unknown_part" and info.value.location == ("parts", "Rload")
    with pytest.raises(WirestateError) as info:
        symbolic_state_space(spec, {"Resr": casadi.SX.sym("r")}, bounds={"Resr": (2, 1)})
    assert info.value.code == "out_of_range"
