"""Every user mistake gives one wirestate error with a stable code naming the culprit."""

from __future__ import annotations

import pytest

from tests.conftest import circuit
from wirestate.errors import ERROR_CODES, WirestateError
from wirestate.spec import parse_circuit

V = {"kind": "voltage_source", "nodes": ["in", "gnd"]}
R = {"kind": "resistor", "nodes": ["in", "gnd"], "value": 10}


def error_of(parts, outputs=None, **header) -> WirestateError:
    with pytest.raises(WirestateError) as info:
        circuit(parts, outputs, **header)
    return info.value


@pytest.mark.parametrize(
    ("parts", "outputs", "code", "location", "named"),
    [
        # no ground
        (
            {"R1": {"kind": "resistor", "nodes": ["a", "b"], "value": 1}},
            {},
            "no_ground",
            ("circuit", "ground"),
            "gnd",
        ),
        # a sub-network with no path to ground
        (
            {"Vs": V, "R1": R, "R9": {"kind": "resistor", "nodes": ["x", "y"], "value": 1}},
            {},
            "floating_node",
            ("parts", "R9", "nodes"),
            "x, y",
        ),
        # loop of voltage sources
        (
            {"Vs": V, "V2": {"kind": "voltage_source", "nodes": ["in", "gnd"]}},
            {},
            "voltage_source_loop",
            ("parts", "V2"),
            "Vs",
        ),
        # cutset of current sources
        (
            {
                "Vs": V,
                "R1": R,
                "I1": {"kind": "current_source", "nodes": ["in", "z"]},
                "I2": {"kind": "current_source", "nodes": ["z", "gnd"]},
            },
            {},
            "current_source_cutset",
            ("parts", "I1"),
            "I2",
        ),
        # both terminals on one node
        (
            {"Vs": V, "R1": {"kind": "resistor", "nodes": ["in", "in"], "value": 1}},
            {},
            "shorted_part",
            ("parts", "R1", "nodes"),
            "R1",
        ),
        # output naming an unknown node
        (
            {"Vs": V, "R1": R},
            {"v": {"voltage": "nowhere"}},
            "unknown_node",
            ("outputs", "v", "voltage"),
            "nowhere",
        ),
        # output naming an unknown part
        (
            {"Vs": V, "R1": R},
            {"i": {"current": "R7"}},
            "unknown_part",
            ("outputs", "i", "current"),
            "R7",
        ),
        # controlled source naming an unknown node / part
        (
            {
                "Vs": V,
                "R1": R,
                "E1": {"kind": "vcvs", "nodes": ["o", "gnd"], "control": ["q", "gnd"], "gain": 2},
                "R2": {"kind": "resistor", "nodes": ["o", "gnd"], "value": 1},
            },
            {},
            "unknown_node",
            ("parts", "E1", "control"),
            "q",
        ),
        (
            {
                "Vs": V,
                "R1": R,
                "F1": {"kind": "cccs", "nodes": ["o", "gnd"], "control": "Rx", "gain": 2},
                "R2": {"kind": "resistor", "nodes": ["o", "gnd"], "value": 1},
            },
            {},
            "unknown_part",
            ("parts", "F1", "control"),
            "Rx",
        ),
        # coupling of something that is not an inductor
        (
            {
                "Vs": V,
                "R1": R,
                "K1": {"kind": "coupling", "inductors": ["R1", "Vs"], "coefficient": 0.5},
            },
            {},
            "unknown_part",
            ("parts", "K1", "inductors"),
            "R1",
        ),
        # capacitor current across a voltage source needs dVs/dt
        (
            {"Vs": V, "C1": {"kind": "capacitor", "nodes": ["in", "gnd"], "value": "1u"}},
            {"i_C1": {"current": "C1"}},
            "output_needs_derivative",
            ("outputs", "i_C1"),
            "Vs",
        ),
        # an output unit that does not fit what is measured was accepted and ignored
        (
            {"Vs": V, "R1": R},
            {"v_in": {"voltage": "in", "unit": "furlong"}},
            "invalid_field",
            ("outputs", "v_in"),
            "furlong",
        ),
        (
            {"Vs": V, "R1": R},
            {"i_R1": {"current": "R1", "unit": "V"}},
            "invalid_field",
            ("outputs", "i_R1"),
            "current output, which is in A",
        ),
        # capacitor loop through a controlled voltage source
        (
            {
                "Vs": V,
                "R1": R,
                "E1": {"kind": "vcvs", "nodes": ["o", "gnd"], "control": ["in", "gnd"], "gain": 2},
                "C1": {"kind": "capacitor", "nodes": ["o", "gnd"], "value": "1u"},
            },
            {},
            "unsupported_topology",
            ("parts", "C1"),
            "E1",
        ),
    ],
)
def test_topology_errors_name_the_part(parts, outputs, code, location, named):
    error = error_of(parts, outputs)
    assert error.code == code
    assert error.location == location
    assert named in error.message


@pytest.mark.parametrize(
    ("part", "code", "location", "text"),
    [
        (
            {"kind": "inductor", "nodes": ["in", "gnd"], "value": "100uF"},
            "wrong_unit",
            ("parts", "X", "value"),
            "H",
        ),
        (
            {"kind": "resistor", "nodes": ["in", "gnd"], "value": "ten ohm"},
            "invalid_quantity",
            ("parts", "X", "value"),
            "ten ohm",
        ),
        (
            {"kind": "resistor", "nodes": ["in", "gnd"], "value": "-3"},
            "out_of_range",
            ("parts", "X", "value"),
            "greater than 0",
        ),
        (
            {"kind": "transistor", "nodes": ["in", "gnd"]},
            "unknown_kind",
            ("parts", "X"),
            "transistor",
        ),
        ({"nodes": ["in", "gnd"], "value": 1}, "missing_field", ("parts", "X", "kind"), "kind"),
        (
            {"kind": "resistor", "nodes": ["in", "gnd"]},
            "missing_field",
            ("parts", "X", "value"),
            "value",
        ),
        (
            {"kind": "resistor", "nodes": ["in", "gnd"], "value": 1, "colour": "red"},
            "unknown_field",
            ("parts", "X", "colour"),
            "colour",
        ),
        (
            {"kind": "resistor", "nodes": ["in", "gnd"], "value": 1, "tolerance": "150%"},
            "out_of_range",
            ("parts", "X", "tolerance"),
            "100 %",
        ),
        (
            {"kind": "resistor", "nodes": ["in", "g-nd"], "value": 1},
            "invalid_name",
            ("parts", "X", "nodes", 1),
            "g-nd",
        ),
        (
            {"kind": "coupling", "inductors": ["a", "b"], "coefficient": 1.5},
            "out_of_range",
            ("parts", "X", "coefficient"),
            "less than 1",
        ),
        # pydantic's own words were "Input should be a valid tuple" and "Tuple should have
        # at most 2 items after validation, not 3"
        (
            {"kind": "resistor", "nodes": "in", "value": 1},
            "invalid_field",
            ("parts", "X", "nodes"),
            "expected a list such as",
        ),
        (
            {"kind": "resistor", "nodes": ["in", "gnd", "x"], "value": 1},
            "invalid_field",
            ("parts", "X", "nodes"),
            "too many items: got ['in', 'gnd', 'x']",
        ),
    ],
)
def test_field_errors_name_the_field(part, code, location, text):
    with pytest.raises(WirestateError) as info:
        parse_circuit({"circuit": {"name": "c"}, "parts": {"Vs": V, "X": part}}, file="m.toml")
    error = info.value
    assert (error.code, error.location) == (code, location)
    assert text in error.message
    assert str(error).startswith("m.toml: parts.X")


def test_singular_equations_are_reported():
    # an ideal amplifier of gain 1 driving its own control node: v_o = 1 * v_o has no
    # unique solution
    error = error_of(
        {
            "Vs": V,
            "R1": R,
            "E1": {"kind": "vcvs", "nodes": ["o", "gnd"], "control": ["o", "gnd"], "gain": 1},
            "R2": {"kind": "resistor", "nodes": ["o", "gnd"], "value": 1},
        }
    )
    assert error.code == "singular_equations"


def test_unstable_elimination_names_the_part_and_its_value():
    # an output capacitor with its ESR: with the ESR from 1 mohm to 1 kohm no order of
    # pivots keeps every pivot at 1 % of its column (tests/test_symbolic.py has the why)
    import casadi

    from tests.test_symbolic import _esr_output_stage
    from wirestate.reduce import symbolic_state_space

    with pytest.raises(WirestateError) as info:
        symbolic_state_space(
            _esr_output_stage(), {"Resr": casadi.SX.sym("r")}, bounds={"Resr": (1e-3, 1e3)}
        )
    error = info.value
    assert (error.code, error.location) == ("unstable_elimination", ("parts", "Resr"))
    assert "KCL at esr" in error.message


def test_every_code_is_documented_and_unknown_codes_are_refused():
    for code, text in ERROR_CODES.items():
        assert code == code.lower() and " " not in code and text
    with pytest.raises(ValueError):
        WirestateError("no_such_code", "x")


# tolerance Monte Carlo and design sweeps (wirestate yield / sweep)
@pytest.mark.parametrize(
    ("call", "code", "location"),
    [
        (lambda m: dict(parts=["Rs"]), "no_tolerance", ("parts", "Rs")),
        (lambda m: dict(values={"Rz": 1.0}), "unknown_part", ("values", "Rz")),
        (lambda m: dict(scheduler="tcp://127.0.0.1:9", samples=5), "scheduler_unreachable",
         ("scheduler",)),
    ],
)  # fmt: skip
def test_yield_errors_name_the_part_or_option(call, code, location):
    from tests.conftest import MODELS
    from wirestate.explore import tolerance_yield
    from wirestate.tune import load_tuning

    spec = load_tuning(MODELS / "tuning" / "drive_bus_damping.toml")
    with pytest.raises(WirestateError) as info:
        tolerance_yield(spec, **call(None))
    assert info.value.code == code and info.value.location == location


def test_sweep_grid_errors():
    from wirestate.explore import parse_grid

    with pytest.raises(WirestateError) as info:
        parse_grid("Rd=1ohm")
    assert info.value.code == "invalid_grid" and info.value.location == ("grid",)


@pytest.mark.parametrize(
    "text", ["Rd=1:2:3,Rd=1:2:3", "Rd=1:2:3, Rd =1:2:5", "Rd=1:2:3,Cd=1:2:3,Rd=2:3:3"]
)
def test_a_part_named_twice_in_a_grid_is_refused(text):
    # the library kept the last axis (the command line alone checked): a sweep of one part
    # taken for a sweep of two
    from wirestate.explore import parse_grid

    with pytest.raises(WirestateError) as info:
        parse_grid(text)
    assert info.value.code == "invalid_grid" and info.value.location == ("grid", "Rd")
    assert info.value.message == "Rd appears twice in --grid"


# -- robustness codes (issue 10): each raised once here, asserting on code and location ----
def _robustness_error(code: str) -> WirestateError:
    import numpy as np

    from wirestate.simulate import guards
    from wirestate.spec import parse_circuit

    L = {f"L{k}": {"kind": "inductor", "nodes": [f"n{k}", "gnd"], "value": 1e-3} for k in (1, 2, 3)}
    R = {f"R{k}": {"kind": "resistor", "nodes": [f"n{k}", "gnd"], "value": 1} for k in (1, 2, 3)}
    K = lambda a, b, k: {"kind": "coupling", "inductors": [a, b], "coefficient": k}  # noqa: E731
    cases = {
        "duplicate_coupling": lambda: parse_circuit(
            {"circuit": {"name": "c"}, "parts": {**L, **R, "K1": K("L1", "L2", 0.7),
                                                 "K2": K("L2", "L1", 0.7)}}),
        "indefinite_inductance": lambda: parse_circuit(
            {"circuit": {"name": "c"}, "parts": {**L, **R, "K1": K("L1", "L2", 0.99),
                                                 "K2": K("L1", "L3", 0.99),
                                                 "K3": K("L2", "L3", 0.5)}}),
        "non_finite_value": lambda: parse_circuit(
            {"circuit": {"name": "c"}, "parts": {"R1": {"kind": "resistor", "nodes": ["a", "gnd"],
                                                       "value": float("nan")}}}),
        "nesting_too_deep": lambda: guards_nesting(),
        "non_finite_result": lambda: guards.check_finite_result(
            "b", np.array([0.0, 1.0]), [np.array([[1.0, np.inf]])], np.array([2.0 + 0j]), 1.0),
        "run_too_large": lambda: guards.check_run_size(
            types_model(), 1e6, 1e-9),
        "unwritable_output": lambda: guards.check_output_path("/no/such/folder/x.csv", "--csv"),
    }  # fmt: skip
    with pytest.raises(WirestateError) as err:
        cases[code]()
    return err.value


def guards_nesting():
    from wirestate.spec.load import check_plain_data

    data: dict = {}
    for _ in range(100):
        data = {"a": data}
    check_plain_data(data)


def types_model():
    import types

    return types.SimpleNamespace(states=["x"], inputs=["u"], outputs=["y"])


@pytest.mark.parametrize(
    ("code", "location"),
    [
        ("duplicate_coupling", ("parts", "K2")),
        ("indefinite_inductance", ("parts", "K1")),
        ("non_finite_value", ("parts", "R1", "value")),
        ("nesting_too_deep", ("a",) * 64),
        ("non_finite_result", ()),
        ("run_too_large", ()),
        ("unwritable_output", ()),
    ],
)
def test_robustness_codes(code, location):
    error = _robustness_error(code)
    assert error.code == code and code in ERROR_CODES
    assert error.location == location


def test_mistyped_key_is_named_with_a_suggestion(tmp_path):
    # a misspelt required field is reported as the unknown key it is, with the close match
    from wirestate.spec import load_circuit

    path = tmp_path / "typo.toml"
    path.write_text(
        '[circuit]\nname = "x"\n[parts.R1]\nkind = "resistor"\nnodes = ["a", "gnd"]\n'
        'vaule = "1k"\n[parts.V1]\nkind = "voltage_source"\nnodes = ["a", "gnd"]\n'
    )
    with pytest.raises(WirestateError) as info:
        load_circuit(path)
    assert info.value.code == "unknown_field"
    assert "'vaule'" in info.value.message and "did you mean 'value'" in info.value.message
    assert info.value.location == ("parts", "R1", "vaule")


def test_block_too_large_for_sensitivities():
    from wirestate.sensitivity import MAX_STATES, circuit_sensitivities
    from wirestate.spec.generate import ladder

    spec = ladder(MAX_STATES // 2 + 1, resistance=0.01, inductance=1e-6, capacitance=1e-9)
    with pytest.raises(WirestateError) as info:
        circuit_sensitivities(spec)
    assert info.value.code == "block_too_large" and info.value.location == ("circuit",)


# order reduction (wirestate reduce, issue 15); each case has a fuller test in tests/reduction
def _reduction_error(code: str) -> WirestateError:
    from tests.conftest import MODELS
    from wirestate.balanced import reduce_block
    from wirestate.reduce import load_block

    integrator = {"Is": {"kind": "current_source", "nodes": ["gnd", "q"]},
                  "Cq": {"kind": "capacitor", "nodes": ["q", "gnd"], "value": 1e-6}}  # fmt: skip
    cases = {
        "invalid_order": lambda: reduce_block(load_block(MODELS / "feeder_cable.toml"), order=13),
        "error_unreachable": lambda: reduce_block(
            load_block(MODELS / "feeder_cable.toml"), error=1e-12
        ),
        "no_stable_part": lambda: reduce_block(
            circuit(integrator, {"v_q": {"voltage": "q"}}), order=0
        ),
        "unstable_block": lambda: reduce_block(
            circuit(integrator, {"v_q": {"voltage": "q"}}), order=0, gramians="low_rank"
        ),
    }
    with pytest.raises(WirestateError) as info:
        cases[code]()
    return info.value


@pytest.mark.parametrize(
    "code", ["invalid_order", "error_unreachable", "no_stable_part", "unstable_block"]
)
def test_reduction_codes(code):
    error = _reduction_error(code)
    assert error.code == code and code in ERROR_CODES
    assert "feeder" in error.message or "dut" in error.message  # names the block


def test_stale_source_code(tmp_path):
    import shutil

    from tests.conftest import MODELS
    from wirestate.lti import load_state_space_block

    shutil.copy(MODELS / "feeder_cable.toml", tmp_path / "feeder_cable.toml")
    shutil.copy(MODELS / "feeder_cable_reduced.toml", tmp_path / "reduced.toml")
    (tmp_path / "feeder_cable.toml").write_text(
        "# edited\n" + (MODELS / "feeder_cable.toml").read_text()
    )
    with pytest.raises(WirestateError) as info:
        load_state_space_block(tmp_path / "reduced.toml", on_stale="error")
    assert info.value.code == "stale_source" and info.value.location[0] == "reduction"


def test_switched_system_with_a_continuous_nonlinear_block():
    # issue 12: the switched engine runs linear, sampled and modulator blocks beside
    # switched circuits; a continuous limited controller is refused by name
    from wirestate.blocks import Modulator, PIDController
    from wirestate.compose import compose
    from wirestate.reduce import compile_circuit
    from wirestate.simulate import simulate

    stage = compile_circuit(
        parse_circuit(
            {
                "circuit": {"name": "stage"},
                "parts": {
                    "Vs": {"kind": "voltage_source", "nodes": ["in", "gnd"], "value": 12},
                    "Q1": {"kind": "switch", "nodes": ["in", "out"]},
                    "R1": {"kind": "resistor", "nodes": ["out", "gnd"], "value": 10},
                },
                "outputs": {"v": {"voltage": "out"}},
            }
        )
    )
    loop = PIDController("loop", kp=0.1, ki=10.0, output_limits=(0.0, 1.0))
    system = compose(
        [stage, Modulator("pwm", 1e5), loop],
        {"stage.Q1": "pwm.gate", "pwm.duty": "loop.command", "loop.measurement": "stage.v"},
        {"Vs": "stage.Vs", "ref": "loop.reference"},
    )
    with pytest.raises(WirestateError) as info:
        simulate(system, 1e-4, 1e-6)
    assert info.value.code == "unsupported_switched_system"
    assert info.value.location == ("blocks", "loop")


# review of the newest features: an output that would replace an input, a switched circuit
# given to reduce
def test_output_is_input_code(tmp_path):
    from wirestate.simulate import guards

    model = tmp_path / "rc.toml"
    model.write_text('[circuit]\nname = "rc"\n')
    with pytest.raises(WirestateError) as info:
        guards.check_output_path(model, "--csv", inputs=(model,))
    assert info.value.code == "output_is_input" and info.value.file == str(model)
    other = tmp_path / "other.toml"
    other.write_text('[circuit]\nname = "other"\n')
    with pytest.raises(WirestateError) as info:
        guards.check_output_path(other, "--csv")
    assert info.value.code == "output_is_input" and "circuit file" in info.value.message


def test_not_reducible_code(tmp_path, capsys):
    from wirestate.cli import main

    model = tmp_path / "rect.toml"
    model.write_text(
        '[circuit]\nname = "rect"\n[parts.Vac]\nkind = "voltage_source"\nnodes = ["a", "gnd"]\n'
        '[parts.D1]\nkind = "diode"\nnodes = ["a", "b"]\n[parts.C1]\nkind = "capacitor"\n'
        'nodes = ["b", "gnd"]\nvalue = "1uF"\n[parts.R1]\nkind = "resistor"\n'
        'nodes = ["b", "gnd"]\nvalue = "1kohm"\n[outputs.v]\nvoltage = "b"\n'
    )
    assert main(["reduce", str(model), "--order", "0", "--out", str(tmp_path / "r.toml")]) == 2
    assert "parts.D1" in capsys.readouterr().err


def test_switched_model_code():
    from wirestate.reduce import compile_circuit
    from wirestate.simulate.linear import simulate_linear
    from wirestate.spec import parse_circuit

    # a half-wave rectifier given to the linear-only entry point
    block = compile_circuit(
        parse_circuit(
            {
                "circuit": {"name": "rect"},
                "parts": {
                    "Vac": {"kind": "voltage_source", "nodes": ["a", "gnd"]},
                    "D1": {"kind": "diode", "nodes": ["a", "b"]},
                    "R1": {"kind": "resistor", "nodes": ["b", "gnd"], "value": 1e3},
                },
            }
        )
    )
    with pytest.raises(WirestateError) as info:
        simulate_linear(block, 1e-3, 1e-4)
    assert info.value.code == "switched_model" and info.value.location == ("parts", "D1")


# issue 12, tuning over switching transients: each new code once, on code and location
@pytest.mark.parametrize(
    ("change", "code", "location"),
    [
        ({"tuning": {"name": "t", "circuit": "tuning/drive_bus.toml"},
          "variables": {"Rd": {"min": "50mohm", "max": "5ohm"}},
          "objective": {"capacitance": 1.0, "parts": ["Cd"]}},
         "switched_limit_on_linear", ("limits", "peak_after_switching_v_Q1", "kind")),
        ({"limits": [{"kind": "peak_after_switching", "output": "v_Q1", "part": "Qx",
                      "edge": "turn_off", "within": "200ns", "max": "60V"}]},
         "unknown_switching_event", ("limits", "peak_after_switching_v_Q1", "part")),
        ({"solver": {"robust": True}, "stress": {"tolerance_corners": False}},
         "invalid_field", ("solver", "robust")),
        ({"objective": {"squared_error": 1.0, "output": "v_aux"}},
         "unsupported_switched_tuning", ("objective",)),
    ],
)  # fmt: skip
def test_switched_tuning_codes(change, code, location):
    from tests.conftest import MODELS
    from wirestate.spec.tuning import parse_tuning
    from wirestate.tune.switched_problem import SwitchedProblem

    data = {
        "tuning": {"name": "t", "system": "systems/aux_buck_loop.toml", "block": "stage"},
        "variables": {"Rsnub": {"min": "1ohm", "max": "47ohm"}},
        "scenario": {"until": "10us", "step": "1us", "inputs": {"v_ref": "1V"}},
        "limits": [{"kind": "peak_after_switching", "output": "v_Q1", "part": "Q1",
                    "edge": "turn_off", "within": "200ns", "max": "60V"}],
        "objective": {"resistor_energy": 1.0, "parts": ["Rsnub"]},
        **change,
    }  # fmt: skip
    with pytest.raises(WirestateError) as info:
        SwitchedProblem(parse_tuning(data, base_dir=str(MODELS)))
    assert info.value.code == code and info.value.location == location
    assert "\n" not in str(info.value)


@pytest.mark.parametrize("kind", ["pi", "sensor_filter", "gain"])
def test_a_block_unit_not_in_si_symbols_is_named(kind):
    # 'volts' was taken as dimensionless: the pi block's output limits then failed with
    # "'-24V' is not in  (accepted: a plain number...)", and a filter or gain carried it on
    from wirestate.spec.system import parse_system

    fields = {"pi": {"kp": 1, "ki": 1}, "sensor_filter": {"time_constant": "1ms"},
              "gain": {"gain": 2}}[kind]  # fmt: skip
    data = {"system": {"name": "s"}, "blocks": {"b": {"kind": kind, "unit": "volts", **fields}}}
    with pytest.raises(WirestateError) as info:
        parse_system(data, file="s.toml")
    assert info.value.location == ("blocks", "b", "unit")
    assert info.value.code == "wrong_unit"
    assert "'volts' is not a unit in SI symbols" in info.value.message


# a TOML boolean is true or false: pydantic's lax reading took "yes", "off", 1 and 0.0
# as booleans, so `delay = "no"` switched nothing off without a word
_BOOLEANS = [
    ("system", ("blocks", "pi", "delay")),
    ("system", ("blocks", "pwm", "complementary")),
    ("tuning", ("stress", "tolerance_corners")),
    ("tuning", ("stress", "corners_must_pass")),
    ("tuning", ("solver", "robust")),
]


def _with_flag(kind: str, where: tuple[str, ...], value: object):
    from wirestate.spec.system import parse_system
    from wirestate.spec.tuning import parse_tuning

    if kind == "system":
        data = {"system": {"name": "s"},
                "blocks": {"pi": {"kind": "pi", "kp": 1, "ki": 1, "sample_time": "1ms"},
                           "pwm": {"kind": "modulator", "frequency": "10kHz"}}}  # fmt: skip
    else:
        data = {"tuning": {"name": "t", "circuit": "c.toml"},
                "variables": {"R1": {"min": "1ohm", "max": "2ohm"}},
                "scenario": {"until": "1ms", "step": "10us"},
                "objective": {"capacitance": 1.0, "parts": ["R1"]}}  # fmt: skip
    table = data
    for key in where[:-1]:
        table = table.setdefault(key, {})
    table[where[-1]] = value
    parse = parse_system if kind == "system" else parse_tuning
    return parse(data, file="f.toml")


@pytest.mark.parametrize(("kind", "where"), _BOOLEANS)
@pytest.mark.parametrize("value", ["yes", "true", "off", 1, 0, 0.0])
def test_a_boolean_field_takes_only_true_or_false(kind, where, value):
    with pytest.raises(WirestateError) as info:
        _with_flag(kind, where, value)
    assert info.value.code == "invalid_field"
    assert info.value.location == where
    assert info.value.message == f"expected true or false, got {value!r}"
    assert "\n" not in str(info.value)


@pytest.mark.parametrize(("kind", "where"), _BOOLEANS)
def test_a_boolean_field_reads_true_and_false(kind, where):
    for value in (True, False):
        spec = _with_flag(kind, where, value)
        item = spec.blocks[where[1]] if kind == "system" else getattr(spec, where[0])
        assert getattr(item, where[-1]) is value


@pytest.mark.parametrize(("value", "code"), [("2kF", "wrong_unit"), ("abc", "invalid_quantity")])
def test_a_block_value_replacement_is_located_by_its_dotted_place(tmp_path, value, code):
    # was located at blocks.div with "values.R1: " in the message
    from wirestate.compose import load_system

    (tmp_path / "d.toml").write_text(
        '[circuit]\nname = "d"\n[parts.Vs]\nkind = "voltage_source"\nnodes = ["a", "gnd"]\n'
        '[parts.R1]\nkind = "resistor"\nnodes = ["a", "gnd"]\nvalue = "1kohm"\n'
    )
    (tmp_path / "s.toml").write_text(
        f'[system]\nname = "s"\n[blocks.div]\nkind = "circuit"\nfile = "d.toml"\n'
        f'values = {{ R1 = "{value}" }}\n'
    )
    with pytest.raises(WirestateError) as info:
        load_system(tmp_path / "s.toml")
    assert info.value.location == ("blocks", "div", "values", "R1")
    assert info.value.code == code
    assert not info.value.message.startswith("values")
