"""Tuning files: loading, SI conversion, and one clear error per mistake."""

from __future__ import annotations

from pathlib import Path

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from wirestate.errors import ERROR_CODES, WirestateError
from wirestate.spec.tuning import LIMIT_KINDS
from wirestate.tune import load_tuning, parse_tuning, solve

MODELS = Path(__file__).resolve().parents[2] / "models" / "tuning"


def test_bundled_demo_loads_in_si_units():
    spec = load_tuning(MODELS / "drive_bus_damping.toml")
    assert spec.variables["Cd"].min == pytest.approx(47e-6, rel=1e-12)
    assert spec.scenario.step == pytest.approx(10e-6, rel=1e-12)
    assert spec.scenario.steps[0].at == pytest.approx(1e-3, rel=1e-12)
    limits = {limit.label: limit for limit in spec.limits}
    assert limits["bus_deviation"].max == pytest.approx(0.03, rel=1e-12)
    assert limits["bus_settling"].band == pytest.approx(0.005, rel=1e-12)
    assert spec.stress.ripple.frequency == pytest.approx(20e3, rel=1e-12)
    assert spec.circuit_path.resolve() == (MODELS / "drive_bus.toml").resolve()


def test_bundled_circuit_compiles_with_the_expected_states():
    from wirestate.reduce import load_block

    block = load_block(MODELS / "drive_bus.toml")
    assert block.states == ["i_Lf", "v_Cf", "v_Cd", "i_La"]
    assert {"v_bus", "i_motor"} <= set(block.outputs)


BASE = """
[tuning]
circuit = "rc.toml"
[variables.C1]
min = "0.1uF"
max = "10uF"
[scenario]
until = "2ms"
step = "10us"
[objective]
capacitance = 1.0
parts = ["C1"]
"""


@pytest.mark.parametrize(
    ("change", "code", "where"),
    [
        (("[variables.C1]", "[variables.C9]"), "unknown_variable", "variables.C9"),
        (("[variables.C1]", "[variables.Vs]"), "unknown_variable", "variables.Vs"),
        (('min = "0.1uF"', 'min = "20uF"'), "invalid_field", "variables.C1"),
        (('min = "0.1uF"', 'min = "0.1uH"'), "wrong_unit", "variables.C1.min"),
        (('step = "10us"', 'step = "3ms"'), "invalid_field", "scenario"),
        # a horizon that is no whole number of steps was rounded silently (issue 10.7)
        (('until = "2ms"', 'until = "2.005ms"'), "invalid_field", "scenario"),
        (("[objective]", "[objective]\nwrong = 1"), "unknown_field", "objective.wrong"),
        (('until = "2ms"\n', ""), "missing_field", "scenario.until"),
        (('circuit = "rc.toml"', 'circuit = "absent.toml"'), "file_not_found", "tuning.circuit"),
        (
            (
                "[objective]",
                '[[limits]]\nkind = "maximum"\noutput = "v_nowhere"\nmax = 1\n[objective]',
            ),
            "invalid_limit",
            "limits.maximum_v_nowhere.output",
        ),
        (
            ("[objective]", '[[limits]]\nkind = "energy"\npart = "C1"\nmax = "1J"\n[objective]'),
            "invalid_limit",
            "limits.energy_C1.part",
        ),
        (
            (
                "[objective]",
                '[[limits]]\nkind = "maximum"\noutput = "v_out"\nmax = 1\n'
                'window = ["5ms", "6ms"]\n[objective]',
            ),
            "invalid_limit",
            "limits.maximum_v_out.window",
        ),
        (
            ("[objective]", '[[limits]]\nkind = "settling"\noutput = "v_out"\n[objective]'),
            "invalid_field",
            "limits.settling_v_out.band",
        ),
        # units checked against what the value names (issue 9, item 2)
        (
            (
                "[objective]",
                '[[limits]]\nkind = "maximum"\noutput = "v_out"\nmax = "22A"\n[objective]',
            ),
            "wrong_unit",
            "limits.maximum_v_out.max",
        ),
        (
            ("[objective]", '[[limits]]\nkind = "energy"\npart = "R1"\nmax = "2mW"\n[objective]'),
            "wrong_unit",
            "limits.energy_R1.max",
        ),
        (
            ("[objective]", '[scenario.inputs]\nVs = "24A"\n[objective]'),
            "wrong_unit",
            "scenario.inputs.Vs",
        ),
        (
            (
                "[objective]",
                '[stress.ripple]\ninput = "Vs"\namplitude = "6A"\nfrequency = "20kHz"\n[objective]',
            ),
            "wrong_unit",
            "stress.ripple.amplitude",
        ),
        (
            (
                "[objective]",
                '[[limits]]\nkind = "peak_current"\npart = "R1"\nmax = "8V"\n[objective]',
            ),
            "wrong_unit",
            "limits.peak_current_R1.max",
        ),
        (
            (
                "[objective]",
                '[[scenario.steps]]\ninput = "Vs"\nat = "1ms"\nto = "15A"\n[objective]',
            ),
            "wrong_unit",
            "scenario.steps.0.to",
        ),
        # a field that does not apply to the kind is refused (issue 9, item 12)
        (
            (
                "[objective]",
                '[[limits]]\nkind = "minimum"\noutput = "v_out"\nmin = "0V"\nafter = "1ms"\n'
                "[objective]",
            ),
            "invalid_field",
            "limits.minimum_v_out.after",
        ),
        # every check of a limit's fields is located by its name (was limits.0)
        (
            (
                "[objective]",
                '[[limits]]\nname = "vwin"\nkind = "maximum"\noutput = "v_out"\n'
                'max = "1V"\nwindow = ["2ms", "1ms"]\n[objective]',
            ),
            "invalid_field",
            "limits.vwin.window",
        ),
    ],
)
def test_mistakes_give_one_clear_error(rc_case, change, code, where):
    path = rc_case()
    text = BASE.replace(*change)
    path.write_text(text, encoding="utf-8")
    with pytest.raises(WirestateError) as info:
        solve(load_tuning(path))
    error = info.value
    assert error.code == code, error
    assert where in error.where
    assert error.message


def test_unknown_series_is_refused_before_any_work(rc_case):
    with pytest.raises(WirestateError) as info:
        solve(load_tuning(rc_case()), series="E7")
    assert info.value.code == "invalid_field"


_VALUES = st.one_of(
    st.none(),
    st.booleans(),
    st.integers(-5, 5),
    st.floats(allow_nan=True, allow_infinity=True),
    st.sampled_from(["1ms", "10us", "3%", "-2V", "0.5ohm", "4.7uF", "abc", "", "1e-3 s", "2 kHz"]),
    st.lists(st.sampled_from(["1ms", "2ms", 3, "x"]), max_size=3),
)
_LIMIT = st.fixed_dictionaries(
    {"kind": st.sampled_from([*LIMIT_KINDS, "nonsense"])},
    optional={
        k: _VALUES for k in ("output", "max", "min", "band", "settled_by", "window", "after")
    },
)


@settings(max_examples=150, deadline=None)
@given(
    variable=st.dictionaries(st.sampled_from(["min", "max", "start", "extra"]), _VALUES),
    scenario=st.dictionaries(st.sampled_from(["until", "step", "initial", "steps"]), _VALUES),
    limits=st.lists(_LIMIT, max_size=3),
    objective=st.dictionaries(
        st.sampled_from(["capacitance", "squared_error", "output", "parts", "peak_impedance"]),
        _VALUES,
    ),
)
def test_random_tuning_files_validate_or_raise_our_error(variable, scenario, limits, objective):
    data = {
        "tuning": {"circuit": "rc.toml"},
        "variables": {"C1": variable},
        "scenario": scenario,
        "limits": limits,
        "objective": objective,
    }
    try:
        spec = parse_tuning(data)
    except WirestateError as error:
        assert error.code in ERROR_CODES
    else:
        assert spec.variables["C1"].min < spec.variables["C1"].max


def test_the_documented_example_is_a_valid_tuning_file():
    import tomllib

    import wirestate.spec.tuning as module

    doc = module.__doc__
    block = doc.split(".. code-block:: toml", 1)[1]
    text = "\n".join(line[4:] for line in block.splitlines())
    spec = parse_tuning(tomllib.loads(text))
    assert [limit.label for limit in spec.limits] == [
        "bus_deviation",
        "energy_Rd",
        "output_impedance_v_bus",
    ]


def test_a_field_that_does_not_apply_names_the_fields_that_do(rc_case):
    path = rc_case()
    text = BASE.replace(
        "[objective]",
        '[[limits]]\nname = "vmin"\nkind = "minimum"\noutput = "v_out"\nmin = "0V"\n'
        'after = "1ms"\n[objective]',
    )
    path.write_text(text, encoding="utf-8")
    with pytest.raises(WirestateError) as info:
        load_tuning(path)
    assert "'after' does not apply to a 'minimum' limit" in info.value.message
    assert "output, min, window" in info.value.message
    # located by the limit's name and the field, like every other limit error (was limits.0)
    assert info.value.code == "invalid_field"
    assert info.value.location == ("limits", "vmin", "after")


@pytest.mark.parametrize(
    ("band", "expected"),
    [
        ('"0.5V"', "cannot read '0.5V' as a tolerance"),
        ('["1Hz"]', "too few items"),
    ],
)
def test_a_bad_band_names_the_field_without_the_validator_internals(rc_case, band, expected):
    # a settling band is a fraction or (impedance limits) a pair of frequencies; the error
    # once named pydantic's union member ("band.tuple[function-before[_hertz(), ...]]")
    path = rc_case()
    limit = f'[[limits]]\nkind = "settling"\noutput = "v_out"\nband = {band}\n'
    path.write_text(BASE.replace("[objective]", limit + "[objective]"), encoding="utf-8")
    with pytest.raises(WirestateError) as info:
        load_tuning(path)
    assert info.value.where.endswith("limits.0.band"), info.value.where
    assert expected in info.value.message
    assert "[" not in info.value.where and "function" not in str(info.value)


def test_a_circuit_file_given_as_a_tuning_file_is_told_as_such(rc_case, tmp_path):
    # it was "unknown field 'circuit' (fields here: tuning, ..., base_dir)": the loader's
    # own field was offered as a key of the file
    rc_case()
    with pytest.raises(WirestateError) as info:
        load_tuning(tmp_path / "rc.toml")
    assert info.value.code == "wrong_file_kind"
    assert "a tuning file was expected" in info.value.message
    path = tmp_path / "typo.toml"
    path.write_text(BASE.replace("[objective]", "[objectiv]"), encoding="utf-8")
    with pytest.raises(WirestateError) as info:
        load_tuning(path)
    assert "did you mean 'objective'" in info.value.message
    path.write_text(BASE + "[other]\n", encoding="utf-8")
    with pytest.raises(WirestateError) as info:
        load_tuning(path)
    assert info.value.code == "unknown_field" and "base_dir" not in info.value.message
