"""The project's own fuzz target (issue 10): generated circuit, system and tuning files
through the library, and a sample through the command line. Every outcome is a compiled
block (or composed system, or validated tuning file) or a WirestateError, never another
exception.

CI runs a short version with the normal suite; ``make fuzz`` sets
``WIRESTATE_FUZZ_EXAMPLES=10000`` for the long one.
"""

from __future__ import annotations

import os
import warnings

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from tests.robustness.conftest import buck, toml_text
from wirestate.errors import WirestateError

EXAMPLES = int(os.environ.get("WIRESTATE_FUZZ_EXAMPLES", "60"))
FUZZ = settings(
    max_examples=EXAMPLES,
    deadline=None,
    suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large],
    derandomize=EXAMPLES < 1000,  # CI: the same sample each run; make fuzz: new ones
)

NODES = ["gnd", "a", "b", "c"]
KINDS = ["resistor", "inductor", "capacitor", "voltage_source", "current_source", "vcvs",
         "vccs", "ccvs", "cccs", "coupling", "electromechanical", "switch", "diode",
         "transformer"]  # fmt: skip
numbers = st.one_of(
    st.floats(allow_nan=True, allow_infinity=True),
    st.floats(min_value=1e-12, max_value=1e6),
    st.integers(-3, 3),
)
texts = st.sampled_from(["1k", "4.7uF", "10 mH", "-5ohm", "0W", "nan", "1e999", "abc", "3 V",
                         "2.2nF", "0.99", "63V", "", "1e-300"])  # fmt: skip
anything = st.one_of(numbers, texts, st.booleans(), st.lists(st.sampled_from(NODES), max_size=3))


@st.composite
def circuit_files(draw):
    n = draw(st.integers(1, 6))
    names = [f"P{i}" for i in range(n)]
    parts = {}
    for name in names:
        kind = draw(st.sampled_from([*KINDS, "fuse"]))
        part = {"kind": kind}
        if kind == "coupling":
            part["inductors"] = draw(st.lists(st.sampled_from(names), min_size=2, max_size=2))
            part["coefficient"] = draw(st.one_of(st.floats(0.01, 0.999), numbers))
        elif kind == "transformer":
            for winding in ("primary", "secondary"):
                part[winding] = draw(st.lists(st.sampled_from(NODES), min_size=2, max_size=2))
            part["ratio"] = draw(st.one_of(st.floats(0.1, 10.0), numbers, texts))
        else:
            part["nodes"] = draw(st.lists(st.sampled_from(NODES), min_size=2, max_size=2))
            if kind in ("vcvs", "vccs"):
                part["control"] = draw(st.lists(st.sampled_from(NODES), min_size=2, max_size=2))
                part["gain"] = draw(st.one_of(numbers, texts))
            elif kind in ("ccvs", "cccs"):
                part["control"] = draw(st.sampled_from([*names, "nope"]))
                part["gain"] = draw(st.one_of(numbers, texts))
            elif kind == "electromechanical":
                part["emf_constant"] = draw(st.one_of(numbers, texts))
            elif kind in ("switch", "diode"):
                for field in ("on_resistance", "off_resistance", "forward_voltage", "gate"):
                    if draw(st.integers(0, 2)) == 0 and (field != "gate" or kind == "switch"):
                        part[field] = draw(
                            st.sampled_from(names + ["g1", "bad name"])
                            if field == "gate"
                            else st.one_of(numbers, texts)
                        )
            elif kind not in ("voltage_source", "current_source"):
                part["value"] = draw(st.one_of(st.floats(1e-9, 1e6), numbers, texts))
            for rating in ("rated_voltage", "rated_power", "initial"):
                if draw(st.integers(0, 5)) == 0:
                    part[rating] = draw(st.one_of(numbers, texts))
        if draw(st.integers(0, 12)) == 0:
            part[draw(st.sampled_from(["valu", "extra", "tolerance"]))] = draw(anything)
        parts[name] = part
    outputs = {}
    for k in range(draw(st.integers(0, 2))):
        if draw(st.booleans()):
            outputs[f"y{k}"] = {"voltage": draw(st.sampled_from([*NODES, "zz"]))}
        else:
            outputs[f"y{k}"] = {"current": draw(st.sampled_from([*names, "zz"]))}
    return {"circuit": {"name": draw(st.sampled_from(["c", "bad name", "c2"]))},
            "parts": parts, "outputs": outputs}  # fmt: skip


def _compile(data, mode_seed: int = 0):
    from wirestate.reduce import compile_circuit
    from wirestate.spec import parse_circuit
    from wirestate.switching import switched_circuit

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        block = compile_circuit(parse_circuit(data))
        block.dc_gain()
        block.poles()
        block.state_space()
        circuit = switched_circuit(block)
        if circuit is not None:  # a mode with some switches and diodes on, from the seed
            on = tuple(bool(mode_seed >> k & 1) for k in range(len(circuit.devices)))
            circuit.mode(on)
    return block


@FUZZ
@given(circuit_files(), st.integers(0, 63))
def test_generated_circuits_compile_or_give_our_error(data, mode_seed):
    try:
        _compile(data, mode_seed)
    except WirestateError:
        pass


pwm_options = st.sampled_from(["duty=0.42", "duty=42%", "duty=1.5", "duty=nan", "duty=",
                               "dead=40ns", "dead=1s", "dead=-1ns", "phase=90", "phase=nan",
                               "phase=inf", "phase=abc", "side=low", "side=up",
                               "carrier=triangle", "carrier=sine", "=", "x=1", "duty"])  # fmt: skip
pwm_texts = st.builds(
    lambda frequency, options: ",".join([f"pwm:{frequency}", *options]),
    st.sampled_from(["100kHz", "1Hz", "0Hz", "-5kHz", "nan", "1e999Hz", "abc", "", "10 kHz"]),
    st.lists(pwm_options, max_size=4),
)


@FUZZ
@given(pwm_texts)
def test_generated_pwm_waveforms_give_gates_or_our_error(text):
    import numpy as np

    from wirestate.simulate.inputs import parse_waveform

    try:
        wave = parse_waveform(text, "1", name="Q1")
    except WirestateError:
        return
    values = wave.values(np.linspace(0.0, 3e-5, 301))
    assert np.all((values == 0.0) | (values == 1.0)), "a gate is on or off"


@settings(FUZZ, max_examples=max(5, EXAMPLES // 20))
@given(pwm_texts, st.sampled_from(["40us", "20us", "0s", "-1us", "nan", "1e999s"]),
       st.sampled_from(["1us", "5us", "3us", "0s", "1e-300s"]))  # fmt: skip
def test_a_switched_run_gives_a_result_or_our_error(text, until, step):
    # a buck converter (a switch, a diode, an LC filter) run by the event-driven engine
    import numpy as np

    from wirestate.reduce import compile_circuit
    from wirestate.simulate.switched import simulate_switched
    from wirestate.spec import parse_circuit
    from wirestate.units import parse_quantity

    block = compile_circuit(parse_circuit(buck()))
    try:
        horizon = parse_quantity(until, "s", field="until")
        result = simulate_switched(block, horizon, parse_quantity(step, "s"), {"Q1": text})
    except WirestateError:
        return
    assert np.all(np.isfinite(result.outputs))


SIGNALS = ["c.V1", "c.v", "f.signal", "f.measured", "k.input", "k.output", "x.y"]


@st.composite
def system_files(draw):
    blocks = {"c": {"kind": "circuit", "file": "c.toml"}}
    if draw(st.booleans()):
        blocks["c"]["values"] = {
            draw(st.sampled_from(["R1", "C1", "V1", "Q"])): draw(st.one_of(numbers, texts))
        }
    blocks["f"] = {"kind": "sensor_filter", "time_constant": draw(st.one_of(numbers, texts)),
                   "unit": "V"}  # fmt: skip
    blocks["k"] = {"kind": draw(st.sampled_from(["gain", "pi", "nothing"])),
                   "gain": draw(st.one_of(numbers, texts))}  # fmt: skip
    wiring = {draw(st.sampled_from(SIGNALS)): draw(st.sampled_from(SIGNALS))
              for _ in range(draw(st.integers(0, 4)))}  # fmt: skip
    return {"system": {"name": "s"}, "blocks": blocks, "wiring": wiring,
            "inputs": {"u": draw(st.sampled_from(SIGNALS))},
            "outputs": {"y": draw(st.sampled_from(SIGNALS))}}  # fmt: skip


CIRCUIT = {
    "circuit": {"name": "c"},
    "parts": {"V1": {"kind": "voltage_source", "nodes": ["a", "gnd"]},
              "R1": {"kind": "resistor", "nodes": ["a", "b"], "value": "1k"},
              "C1": {"kind": "capacitor", "nodes": ["b", "gnd"], "value": "1u"}},
    "outputs": {"v": {"voltage": "b"}},
}  # fmt: skip


@FUZZ
@given(system_files())
def test_generated_systems_compose_or_give_our_error(tmp_path_factory, data):
    from wirestate.compose import system_from_spec
    from wirestate.spec.system import parse_system

    folder = tmp_path_factory.mktemp("sys")
    (folder / "c.toml").write_text(toml_text(CIRCUIT))
    try:
        system_from_spec(parse_system(data, file=str(folder / "s.toml")), file=folder / "s.toml")
    except WirestateError:
        pass


@st.composite
def tuning_files(draw):
    limit = {
        "kind": draw(st.sampled_from(["maximum", "minimum", "overshoot", "energy", "x"])),
        draw(st.sampled_from(["output", "part"])): draw(st.sampled_from(["v", "R1", "q"])),
        draw(st.sampled_from(["max", "min", "after"])): draw(st.one_of(numbers, texts)),
    }
    return {
        "tuning": {"name": "t", "circuit": "c.toml"},
        "variables": {draw(st.sampled_from(["R1", "C1", "V1"])): {
            "min": draw(st.one_of(numbers, texts)), "max": draw(st.one_of(numbers, texts))}},
        "scenario": {"until": draw(st.sampled_from(["1ms", "2.005ms", "0", "nan", 1e-3])),
                     "step": draw(st.sampled_from(["10us", "1ms", "-1us", 1e-5])),
                     "steps": [{"input": "V1", "at": draw(st.one_of(numbers, texts)),
                                "to": draw(st.one_of(numbers, texts))}]},
        "limits": [limit],
        "objective": {"capacitance": 1.0, "parts": ["C1"]},
    }  # fmt: skip


@FUZZ
@given(tuning_files())
def test_generated_tuning_files_validate_or_give_our_error(data):
    from wirestate.spec.tuning import parse_tuning

    try:
        parse_tuning(data)
    except WirestateError:
        pass


@settings(FUZZ, max_examples=max(5, EXAMPLES // 100))
@given(circuit_files())
def test_a_sample_through_the_command_line(tmp_path_factory, data):
    import contextlib
    import io

    from wirestate.cli import main

    path = tmp_path_factory.mktemp("cli") / "c.toml"
    path.write_text(toml_text(data))
    out, err = io.StringIO(), io.StringIO()
    with (
        contextlib.redirect_stdout(out),
        contextlib.redirect_stderr(err),
        warnings.catch_warnings(),
    ):
        warnings.simplefilter("ignore")
        status = main(["inspect", str(path)])
    assert status in (0, 2)
    if status == 2:
        lines = err.getvalue().strip().splitlines()
        assert len(lines) == 1 and lines[0].startswith("error: ")


grid_texts = st.lists(
    st.builds(
        lambda part, low, high, points: f"{part}={low}:{high}:{points}",
        st.sampled_from(["Rd", "Cd", "Rs", "X", "", "Rd Cd"]),
        st.sampled_from(["50mohm", "1", "0", "-1", "nan", "abc", "1e999", ""]),
        st.sampled_from(["2ohm", "1mF", "5", "nan", ""]),
        st.sampled_from(["25", "0", "1", "-3", "2.5", "1e9", "abc", ""]),
    ),
    max_size=3,
).map(",".join)
value_texts = st.lists(
    st.builds(lambda part, value: f"{part}={value}",
              st.sampled_from(["Rd", "Cd", "X", ""]),
              st.sampled_from(["220mohm", "240uF", "nan", "abc", "", "-1", "1e-320"])),
    max_size=3,
).map(",".join)  # fmt: skip


@FUZZ
@given(grid_texts, value_texts)
def test_grid_and_value_texts_parse_or_give_our_error(grid, values):
    from wirestate.explore import parse_grid
    from wirestate.explore.parts import parse_assignments

    for parse in (parse_grid, lambda text: parse_assignments(text, "values")):
        for text in (grid, values):
            try:
                parse(text)
            except WirestateError:
                pass


def _cli(argv) -> tuple[int, str]:
    import contextlib
    import io

    from wirestate.cli import main

    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        try:
            status = main(argv)
        except SystemExit as exc:  # argparse
            status = exc.code
    return status, err.getvalue()


options = st.sampled_from(["--samples", "--seed", "--workers", "--distribution", "--parts",
                           "--values", "--tuned", "--json", "--plot", "--csv", "--grid",
                           "--log", "--quiet", "--scheduler", "--bogus"])  # fmt: skip
option_values = st.sampled_from(["10", "-1", "0", "abc", "nan", "normal", "weird", "Rd,Cd",
                                 "Rd=1", "x.json", "no/dir/x.json", "x.txt", "Rd=1:2:3",
                                 "Rd=1:2:3,Rd=1:2:3", "", "tcp://x"])  # fmt: skip


@FUZZ
@given(st.sampled_from(["yield", "sweep"]), st.lists(st.tuples(options, option_values), max_size=4))
def test_yield_and_sweep_arguments_give_one_error_line(command, pairs):
    # the tuning file does not exist, so every run ends before any evaluation: what is
    # fuzzed is the argument parsing and the checks made before the work
    argv = [command, "absent_tuning.toml"]
    for option, value in pairs:
        argv += [option] if option in ("--log", "--quiet") else [option, value]
    status, err = _cli(argv)
    lines = err.strip().splitlines()
    assert status == 2 and len(lines) == 1 and lines[0].startswith("error: "), (argv, err)


@settings(FUZZ, max_examples=max(5, EXAMPLES // 20))
@given(st.sampled_from(["1us", "0", "-1us", "nan", "1e999s", "abc", "1 furlong", "1e-300s"]),
       st.sampled_from(["x.fmu", "x.zip", "no/dir/x.fmu", "", "x"]))  # fmt: skip
def test_export_arguments_give_an_fmu_or_one_error_line(tmp_path_factory, step, name):
    folder = tmp_path_factory.mktemp("fmu")
    model = folder / "rc.toml"
    model.write_text(toml_text(CIRCUIT))
    argv = ["export", str(model), "--fmu", str(folder / name) if name else "", "--step", step,
            "--sources-only"]  # fmt: skip
    status, err = _cli(argv)
    if status != 0:
        lines = err.strip().splitlines()
        assert status == 2 and len(lines) == 1 and lines[0].startswith("error: "), (argv, err)
