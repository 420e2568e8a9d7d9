"""Property tests: random model files give a compiled block or a wirestate error, never
another exception; compiled blocks respect the circuit-minimal order bound."""

from __future__ import annotations

import numpy as np
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from wirestate.errors import WirestateError
from wirestate.reduce import compile_circuit
from wirestate.spec import parse_circuit
from wirestate.units import parse_quantity

NODES = ["gnd", "a", "b", "c", "d"]
KINDS = [
    "resistor",
    "inductor",
    "capacitor",
    "voltage_source",
    "current_source",
    "vcvs",
    "vccs",
    "ccvs",
    "cccs",
    "coupling",
    "electromechanical",
    "fuse",
]
values = st.one_of(
    st.floats(min_value=1e-9, max_value=1e6),
    st.sampled_from(["1k", "4.7uF", "10 mH", "2.2nF", "0.1", "-1", "abc", "3 V", "1e-3"]),
)


@st.composite
def parts(draw):
    n = draw(st.integers(1, 7))
    names = [f"P{i}" for i in range(n)]
    out = {}
    for name in names:
        kind = draw(st.sampled_from(KINDS))
        part = {"kind": kind}
        if kind == "coupling":
            part["inductors"] = draw(st.lists(st.sampled_from(names), min_size=2, max_size=2))
            part["coefficient"] = draw(st.floats(min_value=-0.5, max_value=1.5))
        else:
            part["nodes"] = draw(st.lists(st.sampled_from(NODES), min_size=2, max_size=2))
            if kind in ("vcvs", "vccs"):
                part["control"] = draw(st.lists(st.sampled_from(NODES), min_size=2, max_size=2))
                part["gain"] = draw(values)
            elif kind in ("ccvs", "cccs"):
                part["control"] = draw(st.sampled_from([*names, "nope"]))
                part["gain"] = draw(values)
            elif kind == "electromechanical":
                part["emf_constant"] = draw(values)
            elif kind not in ("voltage_source", "current_source"):
                part["value"] = draw(values)
        out[name] = part
    outputs = {}
    if draw(st.booleans()):
        outputs["v"] = {"voltage": draw(st.sampled_from(NODES + ["zz"]))}
    if draw(st.booleans()):
        outputs["i"] = {"current": draw(st.sampled_from(names + ["zz"]))}
    return {"circuit": {"name": "random"}, "parts": out, "outputs": outputs}


@settings(max_examples=400, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(parts())
def test_random_circuits_compile_or_raise_wirestate_errors(data):
    try:
        block = compile_circuit(parse_circuit(data))
    except WirestateError as error:
        assert error.code and error.message
        return
    spec = block.spec
    reactive = sum(p.kind in ("capacitor", "inductor") for p in spec.parts.values())
    assert block.n_states <= reactive
    assert block.A.shape == (block.n_states, block.n_states)
    assert np.all(np.isfinite(block.A)) and np.all(np.isfinite(block.D))


@given(st.text(max_size=12), st.sampled_from(["ohm", "H", "F", "V", "A", "s", "1"]))
def test_quantity_parser_never_raises_anything_else(text, unit):
    try:
        value = parse_quantity(text, unit)
    except WirestateError:
        return
    assert np.isfinite(value)
