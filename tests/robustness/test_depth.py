"""Size and depth (issue 10, item 11): deep TOML and long block chains, no RecursionError."""

from __future__ import annotations

import control
import numpy as np
import pytest

from wirestate.errors import WirestateError


def test_toml_nested_deeper_than_the_reader_is_our_error(tmp_path):
    from wirestate.spec import load_circuit

    path = tmp_path / "deep.toml"
    path.write_text("x = " + "[" * 5000 + "]" * 5000 + "\n")
    with pytest.raises(WirestateError) as err:
        load_circuit(path)
    assert err.value.code == "nesting_too_deep" and err.value.file == str(path)


def test_data_nested_deeply_is_refused_without_recursion():
    from wirestate.spec import parse_circuit

    data: dict = {"leaf": 1.0}
    for _ in range(20_000):
        data = {"next": data}
    with pytest.raises(WirestateError) as err:
        parse_circuit({"circuit": {"name": "x"}, "parts": data})
    assert err.value.code == "nesting_too_deep"


def test_non_finite_numbers_are_refused_where_they_are():
    from wirestate.spec.tuning import parse_tuning

    data = {
        "tuning": {"name": "t", "circuit": "c.toml"},
        "variables": {"Rd": {"min": "1ohm", "max": "2ohm"}},
        "controller": {"measurement": "i", "command": "V", "kp": float("nan")},
        "scenario": {"until": "1ms", "step": "10us"},
        "limits": [{"kind": "maximum", "output": "v", "max": 1.0}],
        "objective": {"capacitance": 1.0, "parts": ["Cd"]},
    }
    with pytest.raises(WirestateError) as err:
        parse_tuning(data)
    assert err.value.code == "non_finite_value"
    assert err.value.location == ("controller", "kp")


def _gain_chain(n: int, loop: bool = False):
    from wirestate.compose import compose

    blocks = {
        f"g{k}": control.ss([], [], [], [[1.0 if k else 0.5]], inputs=["input"],
                            outputs=["output"], name=f"g{k}")
        for k in range(n)
    }  # fmt: skip
    wiring = {f"g{k}.input": f"g{k - 1}.output" for k in range(1, n)}
    if loop:
        wiring["g0.input"] = f"g{n - 1}.output"
    inputs = {} if loop else {"u": ["g0.input"]}
    return compose(blocks, wiring, inputs, {"y": f"g{n - 1}.output"}, name="chain")


def test_a_chain_of_600_blocks_composes_and_simulates():
    from wirestate.simulate import simulate

    system = _gain_chain(500)
    result = simulate(system, 1e-3, 1e-4, {"u": 2.0})
    # 0.5 * 1 * 1 ... : the chain halves its input (closed form)
    np.testing.assert_allclose(result.output("y"), 1.0, rtol=1e-12)


def test_a_loop_of_500_blocks_is_named():
    with pytest.raises(WirestateError) as err:
        _gain_chain(500, loop=True)
    assert err.value.code == "algebraic_loop"
    assert "g0" in err.value.message and "g499" in err.value.message
