"""Sensitivities by AD agree with central differences of a numeric recompile."""

from __future__ import annotations

import math

import casadi
import numpy as np
import pytest
from scipy.optimize import linear_sum_assignment

from tests.conftest import MODELS
from tests.test_models import CIRCUIT_FILES
from wirestate.errors import WirestateError
from wirestate.lti import dc_gain_limit
from wirestate.reduce import compile_circuit
from wirestate.sensitivity import (
    circuit_sensitivities,
    elasticities,
    group_inverse,
    modes_of,
)
from wirestate.spec import load_circuit, parse_circuit
from wirestate.switching import SwitchedCircuit

#: central differences in ln p at steps h and h/2, extrapolated (Richardson): (4 D(h/2) -
#: D(h)) / 3 has truncation ~ h^4/480 |d^5 ln y / d(ln p)^5| ~ 2e-11 for fifth
#: log-derivatives of order 1, and round-off ~ 3 e / h where e is the error of the computed
#: ln y. A single central difference at a small step cannot reach 1e-6 on stiff blocks:
#: on aux_buck (15 nH against 10 Mohm, ||A|| ~ 7e14 beside a ring of damping ratio 0.0064)
#: e is about 3e-10 (from the eigenvalues' absolute error eps ||A|| and the entries of A
#: themselves), and measured differences at steps 1e-3, 1e-4, 1e-5 scatter by 3e-6 to 9e-5
#: around the AD value; at h = 1e-2 the extrapolation's round-off is ~1e-7 (measured: at
#: most 4.2e-7 from AD on aux_buck). Which side was wrong is settled by a 60-digit
#: reference (test_aux_buck_modes_agree_with_a_60_digit_reference): the damping ratio of
#: mode i_L1/v_Csnub/v_Coss has elasticity -0.00284289774 to Rbat there, AD gives
#: -0.00284289798, a single central difference at h = 1e-4 gave -0.0028399.
STEP = 1e-2
#: agreement asked for by the issue: 1e-6 on elasticities of order 1 (absolute, or relative
#: to the row's largest elasticity when that is larger)
AGREEMENT = 1e-6


def _numeric_quantities(A, B, C, D, reference_poles):
    """Poles matched to the reference by assignment, then w_n, zeta and DC gains."""
    poles = np.linalg.eigvals(A) if A.shape[0] else np.zeros(0, complex)
    cost = np.abs(reference_poles[:, None] - poles[None, :])
    rows, cols = linear_sum_assignment(cost)
    matched = poles[cols[np.argsort(rows)]]
    return matched, dc_gain_limit(A, B, C, D)


def _central_differences(sens, signals, matrices_at):
    """Elasticities by extrapolated central differences in ln p of the numeric compile at
    p e^(+-h) and p e^(+-h/2).

    ``matrices_at(values)`` recompiles the circuit with some part values replaced and
    returns ``A, B, C, D``; ``signals`` holds the state, output and input names. Modes are
    recognised by the eigenvalue they were computed from, DC gains by output and input.
    """
    base = matrices_at({})
    reference = np.linalg.eigvals(base[0]) if base[0].shape[0] else np.zeros(0, complex)
    modes = {m.name: m.eigenvalue for m in modes_of(base[0], signals["states"])}
    result: dict[str, dict[str, float]] = {}
    for part in sens.parts:
        logs = []
        for step in (STEP, -STEP, STEP / 2, -STEP / 2):
            A, B, C, D = matrices_at({part: sens.values[part] * math.exp(step)})
            poles, gains = _numeric_quantities(A, B, C, D, reference)
            logs.append(_log_quantities(sens, signals, modes, reference, poles, gains))
        for name in logs[0]:
            wide = (logs[0][name] - logs[1][name]) / (2 * STEP)
            narrow = (logs[2][name] - logs[3][name]) / STEP
            result.setdefault(name, {})[part] = (4 * narrow - wide) / 3
    return result


def _log_quantities(sens, signals, modes, reference, poles, gains):
    out = {}
    for q in sens.quantities:
        if q.elasticity is None or q.note:
            continue
        if q.kind == "dc_gain":
            output, source = q.name.removeprefix("DC gain ").split("/")
            i, j = signals["outputs"].index(output), signals["inputs"].index(source)
            out[q.name] = math.log(abs(gains[i, j]))
            continue
        mode = q.name.split(", mode ", 1)[1]
        pole = poles[int(np.argmin(np.abs(reference - modes[mode])))]
        if q.kind == "natural_frequency":
            out[q.name] = math.log(abs(pole))
        else:
            out[q.name] = math.log(-pole.real / abs(pole))
    return out


def _check_against_central_differences(sens, signals, matrices_at):
    want = _central_differences(sens, signals, matrices_at)
    got = sens.to_dict()
    checked = 0
    for name, row in want.items():
        scale = max(1.0, max(abs(v) for v in got[name].values()))
        for part, value in row.items():
            assert got[name][part] == pytest.approx(value, abs=AGREEMENT * scale), (name, part)
            checked += 1
    return checked


def _signals(model):
    return {"states": model.states, "outputs": model.outputs, "inputs": model.inputs}


@pytest.mark.parametrize("path", CIRCUIT_FILES, ids=lambda p: p.name)
def test_every_bundled_model_agrees_with_central_differences(path):
    spec = load_circuit(path)
    sens = circuit_sensitivities(spec)
    block = compile_circuit(spec)

    def matrices_at(values):
        b = compile_circuit(spec.with_values(values)) if values else block
        return b.A, b.B, b.C, b.D

    checked = _check_against_central_differences(sens, _signals(block), matrices_at)
    assert checked >= len(sens.parts)  # at least one quantity per part was compared


def test_aux_buck_modes_agree_with_a_60_digit_reference():
    # The stiffest bundled block (see STEP), against the derivative of the exactly solved
    # equations: stamps in 60-digit arithmetic solved by mpmath's LU, poles by mpmath's
    # eig, central differences in ln p at h = 1e-20 (truncation ~h^2 ~ 1e-40, round-off
    # ~1e-60 / h). AD in double precision on a block with ||A|| ~ 7e14: measured within
    # 2.2e-9 of it; asked 1e-7, ten times the 1e-6.
    import mpmath

    from tests.robustness.test_symbolic_agreement import solved_in_mpmath

    spec = load_circuit(MODELS / "aux_buck.toml")
    sens = circuit_sensitivities(spec)
    block = compile_circuit(spec)
    modes = modes_of(block.A, block.states)

    def poles(replaced):
        W, _, eq, layout = solved_in_mpmath(spec, replaced, digits=60)
        n, d = layout.n_x, eq.d_offset
        return mpmath.eig(mpmath.matrix([[W[d + r, c] for c in range(n)] for r in range(n)]))[0]

    with mpmath.workdps(60):
        checked = _check_against_mpmath(sens, modes, poles, mpmath.mpf("1e-20"))
    assert checked >= 2 * len(sens.parts)


def _check_against_mpmath(sens, modes, poles, h):
    import mpmath

    got = sens.to_dict()
    checked = 0
    for part in sens.parts:
        value = mpmath.mpf(sens.values[part])
        up, down = poles({part: value * mpmath.exp(h)}), poles({part: value * mpmath.exp(-h)})
        for mode in modes:
            pair = [min(found, key=lambda z: abs(z - mode.eigenvalue)) for found in (up, down)]
            wanted = {f"natural frequency, mode {mode.name}": [mpmath.log(abs(z)) for z in pair]}
            if mode.eigenvalue.imag > 0:
                logs = [mpmath.log(-z.real / abs(z)) for z in pair]
                wanted[f"damping ratio, mode {mode.name}"] = logs
            for name, (high, low) in wanted.items():
                if got.get(name, {}).get(part) is None:
                    continue
                scale = max(1.0, max(abs(v) for v in got[name].values()))
                reference = float((high - low) / (2 * h))
                assert got[name][part] == pytest.approx(reference, abs=1e-7 * scale), (name, part)
                checked += 1
    return checked


def buck_spec():
    # a buck power stage with its switch and diode (invented values)
    return parse_circuit(
        {
            "circuit": {"name": "buck"},
            "parts": {
                "Vin": {"kind": "voltage_source", "nodes": ["in", "gnd"], "value": 12.0},
                "Q1": {"kind": "switch", "nodes": ["in", "sw"], "on_resistance": 0.02},
                "D1": {"kind": "diode", "nodes": ["gnd", "sw"], "forward_voltage": 0.4},
                "L1": {"kind": "inductor", "nodes": ["sw", "out"], "value": 22e-6},
                "C1": {"kind": "capacitor", "nodes": ["out", "gnd"], "value": 47e-6},
                "RL": {"kind": "resistor", "nodes": ["out", "gnd"], "value": 2.0},
                "Resr": {"kind": "resistor", "nodes": ["out", "x"], "value": 0.05},
                "C2": {"kind": "capacitor", "nodes": ["x", "gnd"], "value": 10e-6},
            },
            "outputs": {"v_out": {"voltage": "out"}, "i_L": {"current": "L1"}},
        }
    )


def test_a_switched_mode_agrees_with_central_differences():
    # the mode with the switch on and the diode off, compiled by SwitchedCircuit.mode
    spec = buck_spec()
    sens = circuit_sensitivities(spec, switched_mode={"Q1": True})
    assert sens.notes == ["switched circuit: the mode with Q1 on, D1 off"]
    circuit = SwitchedCircuit(spec)
    on = (True, False)
    mode = circuit.mode(on)

    def matrices_at(values):
        m = SwitchedCircuit(spec.with_values(values)).mode(on) if values else mode
        return m.A, m.B, m.C, m.D

    assert _check_against_central_differences(sens, _signals(circuit), matrices_at) > 0
    # the on-resistance damps the output filter: the resonant mode's damping ratio rises
    # with it, and the file's RL; it is not a part value, so it is no column
    assert "Q1" not in sens.parts


@pytest.mark.parametrize("kind", [casadi.SX, casadi.MX])
def test_elasticities_of_any_function(kind):
    # y = R^2 C / L: d ln y / d ln (R, C, L) = (2, 1, -1) exactly (power rule); SX functions
    # (the optimiser's) and MX functions alike
    r, c, inductance = (kind.sym(n) for n in ("R", "C", "L"))
    f = casadi.Function(
        "f",
        [r, c, inductance],
        [r**2 * c / inductance, casadi.vertcat(r, 0 * r)],
        ["R", "C", "L"],
        ["y", "pair"],
    )
    got = elasticities(f, {"R": 3.0, "C": 2e-6, "L": 5e-3, "unused": 1.0})
    assert got["y"] == pytest.approx({"R": 2.0, "C": 1.0, "L": -1.0}, abs=1e-12)
    assert got["pair[0]"] == pytest.approx({"R": 1.0, "C": 0.0, "L": 0.0}, abs=1e-12)
    assert got["pair[1]"] == {"R": None, "C": None, "L": None}  # zero: no elasticity


def test_elasticities_name_a_missing_value():
    r = casadi.MX.sym("R")
    f = casadi.Function("f", [r], [2 * r], ["Rd"], ["y"])
    with pytest.raises(WirestateError) as info:
        elasticities(f, {"Rx": 1.0})
    assert info.value.code == "unknown_part" and info.value.location == ("parts", "Rd")


def test_unknown_part_and_too_large_block_are_refused():
    from wirestate.spec.generate import ladder

    spec = ladder(80, resistance=0.01, inductance=1e-6, capacitance=1e-9)
    with pytest.raises(WirestateError) as info:
        circuit_sensitivities(spec)
    assert info.value.code == "block_too_large" and "160" in info.value.message
    small = ladder(2, resistance=0.01, inductance=1e-6, capacitance=1e-9)
    with pytest.raises(WirestateError) as info:
        circuit_sensitivities(small, parts=["R1", "Vs"])
    assert info.value.code == "unknown_part" and info.value.location == ("parts", "Vs")
    with pytest.raises(WirestateError) as info:
        circuit_sensitivities(small, switched_mode={"Q1": True})
    assert info.value.code == "unknown_part"


def test_chain_of_integrators_gets_a_note():
    # Is charges C1; a transconductance driven by v_C1 charges C2: A is nilpotent (two
    # poles at the origin in a Jordan chain), which has no group inverse. The current of
    # the source itself is a finite DC gain (1), but its derivative is not computed there.
    spec = parse_circuit(
        {
            "circuit": {"name": "chain"},
            "parts": {
                "Is": {"kind": "current_source", "nodes": ["gnd", "a"]},
                "C1": {"kind": "capacitor", "nodes": ["a", "gnd"], "value": 1e-6},
                "G1": {"kind": "vccs", "nodes": ["gnd", "b"], "control": ["a", "gnd"],
                       "gain": 1e-3},
                "C2": {"kind": "capacitor", "nodes": ["b", "gnd"], "value": 1e-6},
            },
            "outputs": {"v_b": {"voltage": "b"}, "i_G1": {"current": "G1"}},
        }
    )  # fmt: skip
    sens = circuit_sensitivities(spec)
    notes = sens.quantity_notes()
    assert "unbounded" in notes["DC gain v_b/Is"]
    assert "unbounded" in notes["DC gain i_G1/Is"]
    assert all("origin" in notes[q.name] for q in sens.quantities if q.kind != "dc_gain")
    assert sens.to_dict() == {}


def test_group_inverse_properties():
    # A X A = A, X A X = X, A X = X A define the group inverse (Campbell and Meyer 1979,
    # ch. 7); checked on a random matrix of rank 3 with a semisimple zero eigenvalue
    rng = np.random.default_rng(3)
    T = rng.normal(size=(5, 5))
    A = T @ np.diag([-1.0, -2.0, -30.0, 0.0, 0.0]) @ np.linalg.inv(T)
    X, P = group_inverse(A, 2)
    assert np.allclose(A @ X @ A, A, atol=1e-10)
    assert np.allclose(X @ A @ X, X, atol=1e-10)
    assert np.allclose(A @ X, X @ A, atol=1e-10)
    assert np.allclose(P, np.eye(5) - A @ X, atol=1e-10)
    # a Jordan block at the origin has none
    assert group_inverse(np.array([[0.0, 1.0], [0.0, 0.0]]), 2) is None


def every_kind_spec():
    # one circuit with a coupling, a transformer and all four controlled sources (invented
    # values; each stage is loaded so that the block is stable and regular)
    return parse_circuit(
        {
            "circuit": {"name": "every_kind"},
            "parts": {
                "Vs": {"kind": "voltage_source", "nodes": ["in", "gnd"]},
                "R1": {"kind": "resistor", "nodes": ["in", "a"], "value": 2.0},
                "L1": {"kind": "inductor", "nodes": ["a", "gnd"], "value": 1e-3},
                "L2": {"kind": "inductor", "nodes": ["b", "gnd"], "value": 4e-3},
                "K1": {"kind": "coupling", "inductors": ["L1", "L2"], "coefficient": 0.7},
                "R2": {"kind": "resistor", "nodes": ["b", "c"], "value": 10.0},
                "C1": {"kind": "capacitor", "nodes": ["c", "gnd"], "value": 2e-6},
                "Ic": {"kind": "current_source", "nodes": ["gnd", "c"]},
                "E1": {"kind": "vcvs", "nodes": ["d", "gnd"], "control": "c", "gain": 3.0},
                "R6": {"kind": "resistor", "nodes": ["d", "p"], "value": 1.5},
                "T1": {"kind": "transformer", "primary": ["p", "gnd"],
                       "secondary": ["e", "gnd"], "ratio": 2.5},
                "R3": {"kind": "resistor", "nodes": ["e", "f"], "value": 4.7},
                "C2": {"kind": "capacitor", "nodes": ["f", "gnd"], "value": 1e-6},
                "R7": {"kind": "resistor", "nodes": ["f", "gnd"], "value": 100.0},
                "H1": {"kind": "ccvs", "nodes": ["g", "gnd"], "control": "R3", "gain": 6.0},
                "R4": {"kind": "resistor", "nodes": ["g", "h"], "value": 3.3},
                "L3": {"kind": "inductor", "nodes": ["h", "gnd"], "value": 2e-3},
                "F1": {"kind": "cccs", "nodes": ["gnd", "k"], "control": "L3", "gain": 0.8},
                "G1": {"kind": "vccs", "nodes": ["gnd", "k"], "control": "f", "gain": 0.01},
                "R5": {"kind": "resistor", "nodes": ["k", "gnd"], "value": 22.0},
                "C3": {"kind": "capacitor", "nodes": ["k", "gnd"], "value": 4.7e-6},
            },
            "outputs": {"v_k": {"voltage": "k"}, "i_L3": {"current": "L3"}},
        }
    )  # fmt: skip


def test_every_part_kind_agrees_with_central_differences():
    # couplings, transformer ratios and controlled-source gains are part values too
    spec = every_kind_spec()
    sens = circuit_sensitivities(spec)
    assert {"K1", "T1", "E1", "H1", "F1", "G1"} <= set(sens.parts)
    block = compile_circuit(spec)

    def matrices_at(values):
        b = compile_circuit(spec.with_values(values)) if values else block
        return b.A, b.B, b.C, b.D

    assert _check_against_central_differences(sens, _signals(block), matrices_at) > 0
    # each of them moves something: the gains scale the DC gain of v_k per Ic, the coupling
    # the modes of L1-L2
    table = sens.to_dict()
    for part in ("K1", "T1", "E1", "H1", "F1", "G1"):
        assert max(abs(row[part]) for row in table.values()) > 1e-3, part


def test_dc_gains_with_a_pole_at_the_origin_agree_with_central_differences():
    # two capacitors with no DC path to ground, coupled through R1 and an ideal transformer:
    # one pole at s = 0 whose right null vector (v_a = n v_s) moves with the turns ratio n
    # and whose left one (the conserved charge) with C1, C2 and n, so every term of the
    # group-inverse derivative is exercised. Is drives the conserved charge (the current
    # settles, the voltages grow); Vx in series with R1 does not, so the voltages per Vx
    # settle too. The reference differences the numeric limit of lti.dc_gain_limit (Schur
    # form and Laurent expansion), a different method.
    spec = parse_circuit(
        {
            "circuit": {"name": "floating"},
            "parts": {
                "Is": {"kind": "current_source", "nodes": ["gnd", "a"]},
                "Vx": {"kind": "voltage_source", "nodes": ["a", "q"]},
                "C1": {"kind": "capacitor", "nodes": ["a", "gnd"], "value": 1e-6},
                "R1": {"kind": "resistor", "nodes": ["q", "p"], "value": 10.0},
                "T1": {"kind": "transformer", "primary": ["p", "gnd"],
                       "secondary": ["s", "gnd"], "ratio": 2.0},
                "C2": {"kind": "capacitor", "nodes": ["s", "gnd"], "value": 3.3e-6},
            },
            "outputs": {"i_R1": {"current": "R1"}, "v_s": {"voltage": "s"},
                        "v_a": {"voltage": "a"}, "v_p": {"voltage": "p"}},
        }
    )  # fmt: skip
    sens = circuit_sensitivities(spec)
    block = compile_circuit(spec)
    finite = [q.name for q in sens.quantities if q.kind == "dc_gain" and q.elasticity]
    # i_R1 per Is, and the voltages per Vx, have a limit; the voltages per Is do not
    assert {"DC gain i_R1/Is", "DC gain v_s/Vx", "DC gain v_a/Vx"} <= set(finite)
    assert "unbounded" in sens.quantity_notes()["DC gain v_s/Is"]

    def matrices_at(values):
        b = compile_circuit(spec.with_values(values)) if values else block
        return b.A, b.B, b.C, b.D

    assert _check_against_central_differences(sens, _signals(block), matrices_at) >= 5
