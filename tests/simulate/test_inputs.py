"""Input waveform text: every kind, its values, its errors; random text never crashes."""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from wirestate.errors import WirestateError
from wirestate.simulate.inputs import build_inputs, parse_assignment, parse_waveform

T = np.array([0.0, 0.5e-3, 1e-3, 2e-3, 3e-3, 6e-3])


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        ("48V", [48, 48, 48, 48, 48, 48]),
        ("const:12V", [12] * 6),
        ("step:48V", [48] * 6),
        ("step:48V,at=2ms,from=12V", [12, 12, 12, 48, 48, 48]),
        ("ramp:40V,end=4ms", [0, 5, 10, 20, 30, 40]),
        ("ramp:40V,from=10V,start=1ms,end=5ms", [10, 10, 10, 17.5, 25, 40]),
        ("points:0s=0V,1ms=48V,5ms=24V", [0, 24, 48, 42, 36, 24]),
        ("sinusoid:10V,250Hz,mean=48V", [48 + 10 * math.sin(2 * math.pi * 250 * t) for t in T]),
        (
            "sinusoid:1V,250Hz,phase=90deg,start=1ms",
            [0, 0] + [math.cos(2 * math.pi * 250 * (t - 1e-3)) for t in T[2:]],
        ),  # noqa: E501
    ],
)
def test_waveform_values(text, expected):
    # hand-computed values of each waveform at the sample times (exact arithmetic, 1e-12)
    wave = parse_waveform(text, "V")
    np.testing.assert_allclose(wave.values(T), expected, rtol=1e-12, atol=1e-12)


def test_waveform_expression_matches_values():
    import casadi as ca

    t = ca.SX.sym("t")
    for text in ("step:48V,at=2ms", "points:0s=0V,1ms=48V,5ms=24V", "sinusoid:10V,50Hz,mean=1V"):
        wave = parse_waveform(text, "V")
        f = ca.Function("f", [t], [wave.expression(t)])
        np.testing.assert_allclose([float(f(v)) for v in T], wave.values(T), atol=1e-12)


def test_csv_waveform(tmp_path):
    path = tmp_path / "drive.csv"
    path.write_text("time,Vs,other\n0,0,1\n0.002,10,1\n")
    wave = parse_waveform(f"csv:{path}", "V", name="Vs")
    np.testing.assert_allclose(wave.values(np.array([0, 1e-3, 5e-3])), [0, 5, 10])
    with pytest.raises(WirestateError) as info:
        parse_waveform(f"csv:{path}", "V", name="Vx")
    assert info.value.code == "invalid_input_signal" and "column" in info.value.message
    with pytest.raises(WirestateError) as info:
        parse_waveform(f"csv:{tmp_path / 'missing.csv'}", "V", name="Vs")
    assert info.value.code == "file_not_found"


@pytest.mark.parametrize(
    "text",
    ["square:1V", "step:", "step:48A", "ramp:48V", "ramp:1V,end=1ms,start=2ms",
     "points:2ms=1V,1ms=2V", "points:1V", "points:", "sinusoid:1V", "sinusoid:1V,50Hz,colour=red",
     "step:1V,from=2V,3V", "step:48V@2ms", "step:1V,at=1ms,at=2ms",
     # a sinusoid of no or negative frequency was accepted (a constant, an inverted wave)
     "sinusoid:1V,-5Hz", "sinusoid:1V,0Hz"],
)  # fmt: skip
def test_bad_waveforms_name_the_input(text):
    with pytest.raises(WirestateError) as info:
        parse_waveform(text, "V", name="Vs")
    assert info.value.code == "invalid_input_signal"
    assert info.value.location == ("inputs", "Vs")


def test_an_unreadable_phase_is_told_without_an_empty_unit():
    # the message ended "...with an optional SI prefix and unit " (a phase has no unit key)
    with pytest.raises(WirestateError) as info:
        parse_waveform("sinusoid:1V,1kHz,phase=nan", "V", name="Vs")
    assert info.value.message.endswith("with an optional SI prefix"), info.value.message


def test_assignment_and_defaults():
    assert parse_assignment("Vs=step:48V") == ("Vs", "step:48V")
    with pytest.raises(WirestateError) as info:
        parse_assignment("Vs")
    assert info.value.code == "invalid_input_signal"
    inputs = build_inputs({"Ia": "2A"}, ["Vs", "Ia"], {"Vs": "V", "Ia": "A"}, defaults={"Vs": 5})
    np.testing.assert_array_equal(inputs.matrix(["Vs", "Ia"], T[:2]), [[5, 5], [2, 2]])


@settings(max_examples=200, deadline=None)
@given(st.text(alphabet="steprampoinsuidcv:@,=0123456789.-mVHzk ", max_size=30))
def test_random_text_gives_waveform_or_our_error(text):
    try:
        wave = parse_waveform(text, "V")
    except WirestateError:
        return
    assert np.all(np.isfinite(wave.values(T)))


def test_the_old_time_marker_gets_a_hint():
    # the value-then-time form is not ours; the message says how times are written now
    with pytest.raises(WirestateError) as info:
        parse_waveform("step:48V@2ms", "V", name="Vs")
    assert "at=TIME" in info.value.message


def test_each_waveform_kind_is_one_table_entry():
    from wirestate.simulate.inputs import WAVEFORM_KINDS

    assert set(WAVEFORM_KINDS) == {"const", "step", "ramp", "sinusoid", "points", "csv", "pwm"}
