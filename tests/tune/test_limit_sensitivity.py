"""Elasticities of each limit's value to every part value (issue 15, tuning files).

Checked against closed forms of a first-order RC circuit and against central differences
of the independent numeric evaluation (numeric compile and scipy's exponential, the
re-verification's path) on the bundled tuning files.
"""

from __future__ import annotations

import math
import textwrap

import numpy as np
import pytest

from tests.conftest import MODELS
from tests.tune.conftest import RLC
from tests.tune.test_erickson_optimiser import CIRCUIT as FILTER
from tests.tune.test_erickson_optimiser import TUNING as FILTER_TUNING
from wirestate.spec.tuning import parse_tuning
from wirestate.tune import load_tuning
from wirestate.tune.margins import margin_table
from wirestate.tune.problem import Problem
from wirestate.tune.sensitivity import limit_sensitivities, sensitivity_parts

RC = """
    [circuit]
    name = "rc"
    [parts.Vs]
    kind = "voltage_source"
    nodes = ["in", "gnd"]
    value = "0V"
    [parts.R1]
    kind = "resistor"
    nodes = ["in", "out"]
    value = "2kohm"
    [parts.C1]
    kind = "capacitor"
    nodes = ["out", "gnd"]
    value = "0.5uF"
    [outputs.v_out]
    voltage = "out"
"""

#: a step of Vs from 0 to 1 V at 0.1 ms; the limits' values have closed forms
RC_TUNING = """
    [tuning]
    name = "rc_limits"
    circuit = "rc.toml"
    [variables.C1]
    min = "0.1uF"
    max = "2uF"
    [scenario]
    until = "4ms"
    step = "10us"
    [[scenario.steps]]
    input = "Vs"
    at = "0.1ms"
    to = "1V"
    [[limits]]
    name = "rise_by_0_6ms"
    kind = "maximum"
    output = "v_out"
    window = ["0s", "0.6ms"]
    max = "0.9V"
    [[limits]]
    name = "settled"
    kind = "settling"
    output = "v_out"
    band = "50%"
    settled_by = "1.1ms"
    percent_of = "final"
    [[limits]]
    name = "charging_loss"
    kind = "energy"
    part = "R1"
    max = "1J"
    [[limits]]
    name = "pole"
    kind = "pole_real_part"
    max = "-100"
    [[limits]]
    name = "start_level"
    kind = "maximum"
    output = "v_out"
    window = ["0s", "0.05ms"]
    max = "0.5V"
    [objective]
    capacitance = 1.0
    parts = ["C1"]
"""


@pytest.fixture
def rc_problem(write):
    write("rc.toml", RC)
    path = write("rc_limits.toml", RC_TUNING)
    return Problem(load_tuning(path), file=str(path))


def _start(problem: Problem):
    return problem.evaluate([problem.start_values()])


def test_first_order_rc_limits_match_their_closed_forms(rc_problem):
    # First-order RC step response v(t) = V (1 - exp(-t / RC)) and its resistor current
    # i = (V / R) exp(-t / RC) (any circuits text, e.g. Hayt and Kemmerly, Engineering
    # Circuit Analysis, the chapter on RC circuits; from memory). The zero-order hold of a
    # step that starts on a sample is exact, so the sampled values are these values.
    R, C = 2e3, 0.5e-6
    tau = R * C
    found = limit_sensitivities(rc_problem, {}, _start(rc_problem), at="the file's values")
    by_name = {q.name: q for q in found.quantities}
    # maximum over [0, 0.6 ms]: the last sample, t = 0.5 ms after the step;
    # d ln(1 - e^-x) / d ln R = d ... / d ln C = -x e^-x / (1 - e^-x) with x = t / RC
    x = 0.5e-3 / tau
    rise = by_name["rise_by_0_6ms"]
    assert rise.value == pytest.approx(1 - math.exp(-x), rel=1e-9)
    expected = -x * math.exp(-x) / (1 - math.exp(-x))
    # tolerance: the Taylor exponential's truncation bound (~1e-12), with margin
    assert rise.elasticity["R1"] == pytest.approx(expected, rel=1e-9)
    assert rise.elasticity["C1"] == pytest.approx(expected, rel=1e-9)
    assert found.active["rise_by_0_6ms"] == "t = 600 µs"
    # settling from 1.1 ms (1 ms after the step): |v - V| / V = e^-x, x = 1 ms / RC, so
    # the value depends on R and C only through RC: elasticity x to each
    x = 1e-3 / tau
    settled = by_name["settled"]
    assert settled.value == pytest.approx(math.exp(-x), rel=1e-9)
    assert settled.elasticity["R1"] == pytest.approx(x, rel=1e-9)
    assert settled.elasticity["C1"] == pytest.approx(x, rel=1e-9)
    # energy in R over the T = 3.9 ms after the step: integral of R i^2 =
    # (C V^2 / 2) (1 - e^(-2T/RC)) (half the energy drawn is lost in R, whatever R, as T
    # grows; same source)
    y = 2 * 3.9e-3 / tau
    loss = by_name["charging_loss"]
    assert loss.value == pytest.approx(0.5 * C * (1 - math.exp(-y)), rel=1e-9)
    share = y * math.exp(-y) / (1 - math.exp(-y))
    assert loss.elasticity["R1"] == pytest.approx(-share, rel=1e-9, abs=1e-12)
    assert loss.elasticity["C1"] == pytest.approx(1 - share, rel=1e-9)
    # the pole -1/RC: elasticities -1 and -1 (first-order eigenvalue perturbation exact
    # for a 1x1 matrix; AD round-off only)
    pole = by_name["pole"]
    assert pole.value == pytest.approx(-1 / tau, rel=1e-12)
    assert pole.elasticity == pytest.approx({"R1": -1.0, "C1": -1.0}, rel=1e-12)


def test_a_flat_maximum_is_noted_and_has_no_effect(rc_problem, write):
    # from rest at 0 V, v_out is 0 at every sample before the step: a zero value has no
    # elasticity, and the limit says why
    found = limit_sensitivities(rc_problem, {}, _start(rc_problem), at="here")
    at_zero = next(q for q in found.quantities if q.name == "start_level")
    assert at_zero.elasticity is None and "zero" in at_zero.note
    rise = next(q for q in found.quantities if q.name == "rise_by_0_6ms")
    assert rise.note == ""  # a strict maximum at one sample: nothing to say
    # from a steady 0.2 V the maximum before the step is tied at every sample with the same
    # derivatives (zero: the steady level is Vs itself, whatever R1 and C1); noted
    write("rc.toml", RC)
    path = write(
        "rc_level.toml",
        RC_TUNING.replace(
            "[[scenario.steps]]", '[scenario.inputs]\nVs = "0.2V"\n[[scenario.steps]]'
        ),
    )
    problem = Problem(load_tuning(path), file=str(path))
    found = limit_sensitivities(problem, {}, _start(problem), at="here")
    flat = next(q for q in found.quantities if q.name == "start_level")
    assert flat.value == pytest.approx(0.2, rel=1e-12)
    assert "flat stretch" in flat.note and "same derivatives" in flat.note
    assert flat.elasticity == pytest.approx({"R1": 0.0, "C1": 0.0}, abs=1e-12)
    assert found.most_sensitive()["start_level"] == []


#: a second RC section from the source node, R2 = {r2}, C2 = 1 uF
SECOND_SECTION = """
    [parts.R2]
    kind = "resistor"
    nodes = ["in", "b"]
    value = "{r2}"
    [parts.C2]
    kind = "capacitor"
    nodes = ["b", "gnd"]
    value = "1uF"
"""


def _pole_limit(write, circuit: str):
    """The pole limit of ``RC_TUNING`` on ``circuit`` at the file's values."""
    write("rc.toml", circuit)
    path = write("rc_limits.toml", RC_TUNING)
    problem = Problem(load_tuning(path), file=str(path))
    found = limit_sensitivities(problem, {}, _start(problem), at="here")
    return found, next(q for q in found.quantities if q.name == "pole")


def test_a_repeated_active_pole_gets_a_note_not_a_number(write):
    # two RC sections with the same time constant (2 kohm x 0.5 uF = 1 kohm x 1 uF): the
    # loop's largest real part is a double pole, which has no derivative
    found, pole = _pole_limit(write, RC + SECOND_SECTION.format(r2="1kohm"))
    assert pole.value == pytest.approx(-1e3, rel=1e-9)
    assert pole.elasticity is None and "repeated" in pole.note
    assert found.most_sensitive()["pole"] == []
    # the other limits still have numbers for all four parts
    rise = next(q for q in found.quantities if q.name == "rise_by_0_6ms")
    assert set(rise.elasticity) == {"R1", "C1", "R2", "C2"}


def test_every_part_with_a_value_is_a_parameter():
    # the bundled drive's circuit: resistors, inductors, capacitors and the controlled
    # sources' gains, not only the two design variables
    spec = load_tuning(MODELS / "tuning" / "drive_bus_damping.toml")
    problem = Problem(spec, file="drive_bus_damping.toml")
    parts = sensitivity_parts(problem)
    assert {"Rd", "Cd", "Lf", "Cf", "Rs", "La", "Ra", "Gcpl", "Fmotor", "Gmotor"} == set(parts)


def _value_at(problem, start, point, name_index):
    ev = problem.numeric(point)
    return float(margin_table(problem, ev, start).value[0, name_index])


def _check_against_differences(problem: Problem, found, start) -> int:
    """AD elasticities against a fourth-order central difference (in ln p, step 1e-4) of
    the independent numeric path (numeric compile, scipy's exponential, the verification's
    margins): truncation ~h^4 e^5 ~ 1e-9 even for the largest elasticities here (~40),
    round-off ~1e-10 / 1e-4; the two paths' own difference (Taylor truncation bound
    ~1e-12) is far below. Tolerance 1e-6 of the row's largest elasticity (or of 1).
    Returns the number of elasticities checked."""
    names = [limit.label for limit in problem.spec.limits]
    h = 1e-4
    checked = 0
    for q in found.quantities:
        if q.elasticity is None or q.note:
            continue  # a tie: the one-sided derivatives may differ
        j = names.index(q.name)
        assert q.value == pytest.approx(_value_at(problem, start, found.values, j), rel=1e-9)
        scale = max(1.0, *(abs(v) for v in q.elasticity.values()))
        for part in found.parts:
            samples = []
            for k in (2, 1, -1, -2):
                point = dict(found.values, **{part: found.values[part] * math.exp(k * h)})
                samples.append(_value_at(problem, start, point, j))
            a, b, c, d = samples
            difference = (-a + 8 * b - 8 * c + d) / (12 * h) / q.value
            assert q.elasticity[part] == pytest.approx(difference, abs=1e-6 * scale), (
                q.name,
                part,
            )
            checked += 1
    return checked


@pytest.mark.parametrize(
    ("tuning", "design"),
    [
        ("drive_bus_damping.toml", {"Rd": 0.22, "Cd": 240e-6}),  # its preferred values
        ("drive_bus_loop_damping.toml", {}),  # the circuit file's values
    ],
)
def test_ad_elasticities_agree_with_central_differences(tuning, design):
    # the bundled tuning files: a continuous PI loop, and a system with a sampled PI
    spec = load_tuning(MODELS / "tuning" / tuning)
    problem = Problem(spec, file=tuning)
    start = problem.evaluate([problem.start_values()])
    found = limit_sensitivities(problem, design, start, at="test")
    assert _check_against_differences(problem, found, start) >= 5 * len(found.parts)


def test_sampled_loop_poles_agree_with_central_differences(tmp_path):
    # a PI sampled every 40 us around a series RLC: both pole limits go through
    # s = ln(z) / T of the loop's poles over one period (the verification's definition)
    (tmp_path / "rlc.toml").write_text(textwrap.dedent(RLC), encoding="utf-8")
    spec = {
        "tuning": {"name": "sampled_rlc", "circuit": "rlc.toml"},
        "variables": {"C1": {"min": "1uF", "max": "100uF", "start": "50uF"}},
        "controller": {
            "measurement": "v_out", "command": "Vs", "kp": 0.1, "ki": 150.0,
            "reference": "1V", "sample_time": 40e-6,
        },
        "scenario": {"until": "3ms", "step": 20e-6, "initial": "zero"},
        "limits": [
            {"name": "damping", "kind": "damping_ratio", "min": 0.05},
            {"name": "decay", "kind": "pole_real_part", "max": -10.0},
            {"name": "peak", "kind": "maximum", "output": "v_out", "max": 5.0},
        ],
        "objective": {"capacitance": 1.0, "parts": ["C1"]},
    }  # fmt: skip
    problem = Problem(parse_tuning(spec, base_dir=str(tmp_path)))
    assert problem.sampled
    start = problem.evaluate([problem.start_values()])
    found = limit_sensitivities(problem, {}, start, at="test")
    assert found.active["damping"].startswith("mode ")
    assert _check_against_differences(problem, found, start) == 3 * len(found.parts)


def test_peak_impedance_agrees_with_central_differences(write):
    # the peak of |Zout| on the verification's fine grid, at its active frequency
    write("filter.toml", FILTER.format(cd="200uF"))
    problem = Problem(load_tuning(write("tune.toml", FILTER_TUNING.format(n=2))))
    start = problem.evaluate([problem.start_values()])
    found = limit_sensitivities(problem, {"Rd": 0.8}, start, at="test")
    assert found.active["output_impedance"].startswith("f = ")
    assert _check_against_differences(problem, found, start) == len(found.parts)


def test_a_tie_with_other_derivatives_is_noted_as_a_kink(write):
    # series RLC poles -R1/(2 L1) +- j..., real part -5000 1/s (zeta = (R1/2) sqrt(C1/L1)
    # = 0.5, the textbook series RLC, e.g. Hayt and Kemmerly, from memory), and an RC
    # section's pole -1/(R2 C2) = -5000 1/s too: the largest real part is attained by two
    # distinct modes whose derivatives differ (elasticities +1/-1 to R1/L1 against -1/-1
    # to R2/C2), so it has a kink there
    # (the series RLC of tests/tune/conftest.py: 10 ohm, 1 mH, 10 uF)
    _, pole = _pole_limit(write, RLC + SECOND_SECTION.format(r2="200ohm"))
    assert pole.value == pytest.approx(-5000.0, rel=1e-9)
    assert "kink" in pole.note and "also at mode" in pole.note
    shown = {p: v for p, v in pole.elasticity.items() if abs(v) > 1e-9}
    # the active mode's elasticities, one of the two closed forms (to AD round-off)
    assert shown in (
        pytest.approx({"R1": 1.0, "L1": -1.0}, rel=1e-9),
        pytest.approx({"R2": -1.0, "C2": -1.0}, rel=1e-9),
    )


def test_one_jacobian_for_every_limit(rc_problem, monkeypatch):
    # the report's section costs one AD evaluation, not a loop over parts or limits
    import wirestate.tune.sensitivity as module

    calls = []
    real = module.elasticities

    def counted(function, values, **options):
        calls.append(function.n_out())
        return real(function, values, **options)

    monkeypatch.setattr(module, "elasticities", counted)
    limit_sensitivities(rc_problem, {}, _start(rc_problem), at="here")
    # one function: every limit, and the samples tied with a flat maximum (start_level)
    assert len(calls) == 1 and calls[0] >= len(rc_problem.spec.limits)


def test_most_sensitive_lists_up_to_three_real_parts():
    spec = load_tuning(MODELS / "tuning" / "drive_bus_damping.toml")
    problem = Problem(spec, file="drive_bus_damping.toml")
    found = limit_sensitivities(
        problem, {"Rd": 0.22, "Cd": 240e-6}, problem.evaluate([problem.start_values()]), at="x"
    )
    top = found.most_sensitive()
    assert set(top) == {limit.label for limit in spec.limits}
    for name, parts in top.items():
        assert 1 <= len(parts) <= 3
        sizes = [abs(p["elasticity"]) for p in parts]
        assert sizes == sorted(sizes, reverse=True)
        row = next(q for q in found.quantities if q.name == name).elasticity
        assert sizes[0] == max(abs(v) for v in row.values())
        assert all(p["part"] in problem.base_circuit.parts for p in parts)
    assert np.isfinite([p["elasticity"] for parts in top.values() for p in parts]).all()
