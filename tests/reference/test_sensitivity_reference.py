"""Elasticities against closed forms: series RLC modes, DC gains derived by sympy."""

from __future__ import annotations

import math

import numpy as np
import pytest
import sympy

from wirestate.sensitivity import circuit_sensitivities
from wirestate.spec import parse_circuit


def spec_of(parts: dict, outputs: dict, name: str = "dut"):
    return parse_circuit({"circuit": {"name": name}, "parts": parts, "outputs": outputs})


R, L, C = 4.0, 2e-3, 10e-6  # underdamped series RLC: zeta = (R/2) sqrt(C/L) = 0.141


def test_series_rlc_elasticities_are_the_closed_forms():
    # w0 = 1/sqrt(L C) and zeta = (R/2) sqrt(C/L) (Nilsson and Riedel, Electric Circuits,
    # 10th ed., sec. 8.4), so d ln w0 / d ln (R, L, C) = (0, -1/2, -1/2) and
    # d ln zeta / d ln (R, L, C) = (1, -1/2, 1/2) exactly. AD and the first-order eigenvalue
    # perturbation are exact derivatives, so only round-off remains: 1e-12.
    spec = spec_of(
        {
            "Vs": {"kind": "voltage_source", "nodes": ["in", "gnd"]},
            "R1": {"kind": "resistor", "nodes": ["in", "a"], "value": R},
            "L1": {"kind": "inductor", "nodes": ["a", "b"], "value": L},
            "C1": {"kind": "capacitor", "nodes": ["b", "gnd"], "value": C},
        },
        {"v_C": {"voltage": "b"}},
    )
    sens = circuit_sensitivities(spec)
    table = sens.to_dict()
    wn = table["natural frequency, mode i_L1/v_C1"]
    zeta = table["damping ratio, mode i_L1/v_C1"]
    assert wn == pytest.approx({"R1": 0.0, "L1": -0.5, "C1": -0.5}, abs=1e-12)
    assert zeta == pytest.approx({"R1": 1.0, "L1": -0.5, "C1": 0.5}, abs=1e-12)
    values = {q.name: q.value for q in sens.quantities}
    # the values themselves are the closed forms (same source), 1e-12 relative
    assert values["natural frequency, mode i_L1/v_C1"] == pytest.approx(
        1 / math.sqrt(L * C), rel=1e-12
    )
    assert values["damping ratio, mode i_L1/v_C1"] == pytest.approx(
        R / 2 * math.sqrt(C / L), rel=1e-12
    )
    # v_C / Vs = 1 at DC whatever the parts (the capacitor charges to the source voltage)
    assert table["DC gain v_C/Vs"] == pytest.approx(
        dict.fromkeys(("R1", "L1", "C1"), 0.0), abs=1e-12
    )


def test_series_rl_real_pole():
    # one real pole at -R/L: natural frequency R/L, elasticities (1, -1) (closed form); its
    # damping ratio is 1 by definition and gets elasticity 0 with a note saying so
    spec = spec_of(
        {
            "Vs": {"kind": "voltage_source", "nodes": ["in", "gnd"]},
            "R1": {"kind": "resistor", "nodes": ["in", "a"], "value": 3.3},
            "L1": {"kind": "inductor", "nodes": ["a", "gnd"], "value": 1e-3},
        },
        {"i": {"current": "L1"}},
    )
    sens = circuit_sensitivities(spec)
    table = sens.to_dict()
    assert table["natural frequency, mode i_L1"] == pytest.approx(
        {"R1": 1.0, "L1": -1.0}, abs=1e-12
    )
    assert table["damping ratio, mode i_L1"] == {"R1": 0.0, "L1": 0.0}
    assert "by definition" in sens.quantity_notes()["damping ratio, mode i_L1"]
    # i / Vs = 1/R at DC (Ohm's law): elasticity -1 to R, 0 to L
    assert table["DC gain i/Vs"] == pytest.approx({"R1": -1.0, "L1": 0.0}, abs=1e-12)


def _nodal_dc_gains(symbols, admittances, sources, outputs):
    """Laplace-domain nodal analysis by hand, solved by sympy, limit s -> 0."""
    s = sympy.Symbol("s", positive=True)
    nodes = sorted({n for (a, b, _) in admittances for n in (a, b)} - {"gnd"})
    potentials = {n: sympy.Symbol(f"e_{n}") for n in nodes}
    potentials["gnd"] = 0
    gains = {}
    for source_name, injection in sources.items():
        residual = {n: -injection.get(n, 0) for n in nodes}
        for a, b, y in admittances:
            current = y(s) * (potentials[a] - potentials[b])
            if a != "gnd":
                residual[a] += current
            if b != "gnd":
                residual[b] -= current
        solution = sympy.solve(list(residual.values()), [potentials[n] for n in nodes], dict=True)[
            0
        ]
        for output_name, output in outputs.items():
            expression = output(s, {n: solution.get(potentials[n], 0) for n in potentials})
            gains[f"DC gain {output_name}/{source_name}"] = sympy.limit(
                sympy.simplify(expression), s, 0
            )
    return gains


def _elasticity(expression, symbol, point):
    return float((sympy.diff(expression, symbol) * symbol / expression).subs(point))


def test_dc_gain_elasticities_of_an_rlc_network_match_sympy():
    # network: Is injects into node a; R1 from a to ground, C1 from a to ground, L1 from a
    # to b, R2 from b to ground, R3 from b to c, C2 from c to ground. Reference: nodal
    # admittance equations written by hand in the Laplace domain, solved and differentiated
    # by sympy, DC as the limit s -> 0. Closed forms against AD: 1e-12.
    r1, r2, r3, l1, c1, c2 = sympy.symbols("R1 R2 R3 L1 C1 C2", positive=True)
    numbers = {r1: 47.0, r2: 22.0, r3: 150.0, l1: 3.3e-3, c1: 2.2e-6, c2: 4.7e-6}
    admittances = [
        ("a", "gnd", lambda s: 1 / r1),
        ("a", "gnd", lambda s: s * c1),
        ("a", "b", lambda s: 1 / (s * l1)),
        ("b", "gnd", lambda s: 1 / r2),
        ("b", "c", lambda s: 1 / r3),
        ("c", "gnd", lambda s: s * c2),
    ]
    outputs = {
        "v_a": lambda s, e: e["a"],
        "v_c": lambda s, e: e["c"],
        "i_L1": lambda s, e: (e["a"] - e["b"]) / (s * l1),
    }
    reference = _nodal_dc_gains(numbers, admittances, {"Is": {"a": 1}}, outputs)
    spec = spec_of(
        {
            "Is": {"kind": "current_source", "nodes": ["gnd", "a"]},
            "R1": {"kind": "resistor", "nodes": ["a", "gnd"], "value": 47.0},
            "C1": {"kind": "capacitor", "nodes": ["a", "gnd"], "value": 2.2e-6},
            "L1": {"kind": "inductor", "nodes": ["a", "b"], "value": 3.3e-3},
            "R2": {"kind": "resistor", "nodes": ["b", "gnd"], "value": 22.0},
            "R3": {"kind": "resistor", "nodes": ["b", "c"], "value": 150.0},
            "C2": {"kind": "capacitor", "nodes": ["c", "gnd"], "value": 4.7e-6},
        },
        {"v_a": {"voltage": "a"}, "v_c": {"voltage": "c"}, "i_L1": {"current": "L1"}},
    )
    table = circuit_sensitivities(spec).to_dict()
    symbols = {"R1": r1, "R2": r2, "R3": r3, "L1": l1, "C1": c1, "C2": c2}
    for quantity, expression in reference.items():
        want = {name: _elasticity(expression, sym, numbers) for name, sym in symbols.items()}
        assert table[quantity] == pytest.approx(want, abs=1e-12), quantity
    # and a value check: v_a/Is = R1 || R2 (the inductor shorts, C2 blocks); hand formula
    assert float(reference["DC gain v_a/Is"].subs(numbers)) == pytest.approx(
        47 * 22 / 69, rel=1e-12
    )


def test_dc_gain_elasticities_of_a_divider_with_two_sources_match_sympy():
    # resistive divider driven by Vs through R1, loaded by R2 || (R3 + C), with a current
    # source Is into the middle node; the capacitor blocks DC. Same reference method.
    r1, r2, r3, c1 = sympy.symbols("R1 R2 R3 C1", positive=True)
    numbers = {r1: 1000.0, r2: 3300.0, r3: 10.0, c1: 1e-6}
    # Vs through R1 is a Norton source Vs/R1 into "mid"
    admittances = [
        ("mid", "gnd", lambda s: 1 / r1),
        ("mid", "gnd", lambda s: 1 / r2),
        ("mid", "x", lambda s: 1 / r3),
        ("x", "gnd", lambda s: s * c1),
    ]
    outputs = {"v_mid": lambda s, e: e["mid"]}
    reference = _nodal_dc_gains(
        numbers, admittances, {"Vs": {"mid": 1 / r1}, "Is": {"mid": 1}}, outputs
    )
    spec = spec_of(
        {
            "Vs": {"kind": "voltage_source", "nodes": ["in", "gnd"]},
            "Is": {"kind": "current_source", "nodes": ["gnd", "mid"]},
            "R1": {"kind": "resistor", "nodes": ["in", "mid"], "value": 1000.0},
            "R2": {"kind": "resistor", "nodes": ["mid", "gnd"], "value": 3300.0},
            "R3": {"kind": "resistor", "nodes": ["mid", "x"], "value": 10.0},
            "C1": {"kind": "capacitor", "nodes": ["x", "gnd"], "value": 1e-6},
        },
        {"v_mid": {"voltage": "mid"}},
    )
    table = circuit_sensitivities(spec).to_dict()
    symbols = {"R1": r1, "R2": r2, "R3": r3, "C1": c1}
    for quantity, expression in reference.items():
        want = {name: _elasticity(expression, sym, numbers) for name, sym in symbols.items()}
        assert table[quantity] == pytest.approx(want, abs=1e-12), quantity
    # divider: d ln(R2/(R1+R2)) / d ln R1 = -R1/(R1+R2) (by hand)
    assert table["DC gain v_mid/Vs"]["R1"] == pytest.approx(-1000 / 4300, rel=1e-12)


def test_dc_gain_with_poles_at_the_origin_matches_sympy():
    # no DC path to ground: Is charges C1 at a, R1 from a to b, C2 from b to ground, and R2
    # with C3 in series from b to ground. A is singular (one pole at s = 0): the voltages
    # grow without bound, but the currents settle, i_R1/Is = (C2 + C3)/(C1 + C2 + C3) and
    # i_R2/Is = C3/(C1 + C2 + C3) (charge sharing at equal dv/dt). Reference: nodal
    # analysis and limit by sympy; our numbers come from AD of A and the derivative of the
    # group inverse (Campbell and Meyer 1979). 1e-9: the group inverse is formed by an SVD
    # and an inverse of a matrix whose entries span nine decades.
    r1, r2, c1, c2, c3 = sympy.symbols("R1 R2 C1 C2 C3", positive=True)
    numbers = {r1: 10.0, r2: 33.0, c1: 1e-6, c2: 2.2e-6, c3: 0.47e-6}
    admittances = [
        ("a", "gnd", lambda s: s * c1),
        ("a", "b", lambda s: 1 / r1),
        ("b", "gnd", lambda s: s * c2),
        ("b", "x", lambda s: 1 / r2),
        ("x", "gnd", lambda s: s * c3),
    ]
    outputs = {
        "i_R1": lambda s, e: (e["a"] - e["b"]) / r1,
        "i_R2": lambda s, e: (e["b"] - e["x"]) / r2,
    }
    reference = _nodal_dc_gains(numbers, admittances, {"Is": {"a": 1}}, outputs)
    assert sympy.simplify(reference["DC gain i_R1/Is"] - (c2 + c3) / (c1 + c2 + c3)) == 0
    spec = spec_of(
        {
            "Is": {"kind": "current_source", "nodes": ["gnd", "a"]},
            "C1": {"kind": "capacitor", "nodes": ["a", "gnd"], "value": 1e-6},
            "R1": {"kind": "resistor", "nodes": ["a", "b"], "value": 10.0},
            "C2": {"kind": "capacitor", "nodes": ["b", "gnd"], "value": 2.2e-6},
            "R2": {"kind": "resistor", "nodes": ["b", "x"], "value": 33.0},
            "C3": {"kind": "capacitor", "nodes": ["x", "gnd"], "value": 0.47e-6},
        },
        {"i_R1": {"current": "R1"}, "i_R2": {"current": "R2"}, "v_a": {"voltage": "a"}},
    )
    sens = circuit_sensitivities(spec)
    table = sens.to_dict()
    symbols = {"R1": r1, "R2": r2, "C1": c1, "C2": c2, "C3": c3}
    for quantity, expression in reference.items():
        want = {name: _elasticity(expression, sym, numbers) for name, sym in symbols.items()}
        assert table[quantity] == pytest.approx(want, abs=1e-9), quantity
    notes = sens.quantity_notes()
    assert "DC gain v_a/Is" not in table and "unbounded" in notes["DC gain v_a/Is"]
    origin = [q for q in sens.quantities if q.kind == "natural_frequency" and q.value == 0.0]
    assert len(origin) == 1 and "origin" in origin[0].note


def test_two_identical_sections_give_a_note_not_a_number():
    # two identical series RLC sections on one source: A is block diagonal with equal
    # blocks, so every pole is double. An eigenvalue derivative does not exist there (the
    # pole splits in a direction that depends on which part changes), so no number.
    section = {
        "R{k}": {"kind": "resistor", "nodes": ["in", "a{k}"], "value": 2.0},
        "L{k}": {"kind": "inductor", "nodes": ["a{k}", "b{k}"], "value": 1e-3},
        "C{k}": {"kind": "capacitor", "nodes": ["b{k}", "gnd"], "value": 1e-6},
    }
    parts = {"Vs": {"kind": "voltage_source", "nodes": ["in", "gnd"]}}
    for k in (1, 2):
        for name, part in section.items():
            parts[name.format(k=k)] = {
                **part,
                "nodes": [n.format(k=k) for n in part["nodes"]],
            }
    sens = circuit_sensitivities(spec_of(parts, {"v_b1": {"voltage": "b1"}}))
    modes = [q for q in sens.quantities if q.kind != "dc_gain"]
    assert modes, "the block has modes"
    for q in modes:
        assert q.elasticity is None and "repeated pole" in q.note
    # the DC gain still has its elasticities (all zero: v_b1 = Vs at DC)
    assert sens.to_dict()["DC gain v_b1/Vs"] == pytest.approx(
        dict.fromkeys(sens.parts, 0.0), abs=1e-12
    )
    # with the second section changed by 10 % the poles separate and get numbers
    parts["L2"]["value"] = 1.1e-3
    separated = circuit_sensitivities(spec_of(parts, {"v_b1": {"voltage": "b1"}}))
    assert all(
        q.elasticity is not None for q in separated.quantities if q.kind == "natural_frequency"
    )
    assert np.isfinite(list(separated.to_dict()["damping ratio, mode i_L1/v_C1"].values())).all()
