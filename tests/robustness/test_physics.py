"""Physics that must be refused (issue 10, items 1-2) and values that must not reach the
numerics as a raw validation report (item 6)."""

from __future__ import annotations

import numpy as np
import pytest

from tests.robustness.conftest import circuit, part
from wirestate.errors import WirestateError
from wirestate.reduce import compile_circuit
from wirestate.spec import parse_circuit


def _coupled(coefficients: dict[tuple[str, str], float], n: int) -> dict:
    parts = {}
    for k in range(1, n + 1):
        parts[f"R{k}"] = part("resistor", [f"n{k}", "gnd"], value="1ohm")
        parts[f"L{k}"] = part("inductor", [f"n{k}", "gnd"], value="1mH")
    for index, ((a, b), k) in enumerate(coefficients.items()):
        parts[f"K{index + 1}"] = part("coupling", inductors=[a, b], coefficient=k)
    return circuit("coupled", parts)


def test_two_couplings_on_one_pair_are_refused_naming_both():
    data = _coupled({("L1", "L2"): 0.7, ("L2", "L1"): 0.7}, 2)
    with pytest.raises(WirestateError) as err:
        parse_circuit(data, file="two.toml")
    assert err.value.code == "duplicate_coupling"
    assert err.value.location == ("parts", "K2")
    assert "K1" in err.value.message and err.value.file == "two.toml"


def test_three_couplings_with_an_indefinite_matrix_are_refused_naming_them():
    # k12 = k13 = 0.99, k23 = 0.5: det of [[1, .99, .99], [.99, 1, .5], [.99, .5, 1]] < 0,
    # an RL network with a pole at +5807 1/s before this check (issue 10.1)
    data = _coupled({("L1", "L2"): 0.99, ("L1", "L3"): 0.99, ("L2", "L3"): 0.5}, 3)
    assert np.linalg.det([[1, 0.99, 0.99], [0.99, 1, 0.5], [0.99, 0.5, 1]]) < 0
    with pytest.raises(WirestateError) as err:
        parse_circuit(data)
    assert err.value.code == "indefinite_inductance"
    assert all(name in err.value.message for name in ("K1", "K2", "K3"))


def test_positive_definite_couplings_compile_with_stable_poles():
    # the same three inductors at k = 0.5 each: eigenvalues of the coefficient matrix
    # 2 and 0.5 (closed form 1 + 2k, 1 - k), so the passive network is stable
    data = _coupled({("L1", "L2"): 0.5, ("L1", "L3"): 0.5, ("L2", "L3"): 0.5}, 3)
    block = compile_circuit(parse_circuit(data))
    assert np.all(block.poles().real < 0)


@pytest.mark.parametrize(
    ("field", "text"),
    [("rated_voltage", "-63V"), ("rated_power", "0W"), ("rated_current", "0A")],
)
def test_ratings_of_zero_or_below_are_refused(field, text):
    parts = {
        "V1": part("voltage_source", ["a", "gnd"]),
        "R1": part("resistor", ["a", "gnd"], value="1ohm", **{field: text}),
    }
    with pytest.raises(WirestateError) as err:
        parse_circuit(circuit("r", parts))
    assert err.value.code == "out_of_range"
    assert err.value.location == ("parts", "R1", field)


@pytest.mark.parametrize(
    ("values", "location"),
    [
        ({"R1": -5.0}, ("parts", "R1", "value")),
        ({"K1": 1.5}, ("parts", "K1", "coefficient")),
        ({"L1": float("inf")}, ("parts", "L1", "value")),
    ],
)
def test_with_values_gives_our_error(values, location):
    data = _coupled({("L1", "L2"): 0.5}, 2)
    spec = parse_circuit(data)
    with pytest.raises(WirestateError) as err:
        spec.with_values(values)
    assert err.value.location == location


def test_system_values_name_the_replacement(tmp_path):
    from tests.robustness.conftest import toml_text
    from wirestate.compose import load_system

    parts = {
        "V1": part("voltage_source", ["a", "gnd"]),
        "R1": part("resistor", ["a", "b"], value="1ohm"),
        "C1": part("capacitor", ["b", "gnd"], value="1uF"),
    }
    (tmp_path / "c.toml").write_text(toml_text(circuit("c", parts, {"v": {"voltage": "b"}})))
    system = {
        "system": {"name": "s"},
        "blocks": {"c": {"kind": "circuit", "file": "c.toml", "values": {"R1": "-5ohm"}}},
        "inputs": {"V": "c.V1"},
        "outputs": {"v": "c.v"},
    }
    (tmp_path / "s.toml").write_text(toml_text(system))
    with pytest.raises(WirestateError) as err:
        load_system(tmp_path / "s.toml")
    assert err.value.location == ("blocks", "c", "values", "R1")


def test_singular_equations_name_the_part_in_the_loop():
    # a vcvs of gain 1 whose control is its own output node: v_b = 1 * v_b holds for every
    # v_b, so the equations have no unique solution (issue 10.14)
    parts = {
        "V1": part("voltage_source", ["in", "gnd"]),
        "R0": part("resistor", ["in", "a"], value="1k"),
        "R1": part("resistor", ["a", "gnd"], value="1k"),
        "E1": part("vcvs", ["b", "gnd"], control="b", gain=1.0),
        "R2": part("resistor", ["b", "gnd"], value="1k"),
    }
    with pytest.raises(WirestateError) as err:
        compile_circuit(parse_circuit(circuit("self", parts, {"v": {"voltage": "b"}})))
    assert err.value.code == "singular_equations"
    assert err.value.location == ("parts", "E1")
    assert "E1" in err.value.message and "R0" not in err.value.message
