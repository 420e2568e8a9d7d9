"""The pwm gate waveform: edges in closed form for every option, its errors, random text."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from wirestate.errors import WirestateError
from wirestate.simulate.inputs import parse_waveform
from wirestate.simulate.pwm import PulseWidth

T = 10e-6  # 100 kHz


def on_intervals(wave: PulseWidth, periods: int = 3) -> list[tuple[float, float]]:
    """On intervals overlapping the first ``periods`` periods, in periods."""
    return [(round(a / T, 12), round(b / T, 12)) for a, b in wave.intervals(0.0, periods * T)]


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        # trailing-edge modulation on a sawtooth: on from each period start for D T
        ("pwm:100kHz,duty=0.42", [(0, 0.42), (1, 1.42), (2, 2.42), (3, 3.42)]),
        ("pwm:100kHz,duty=42%", [(0, 0.42), (1, 1.42), (2, 2.42), (3, 3.42)]),
        # the complement: on for the rest of the period
        ("pwm:100kHz,duty=0.42,side=low", [(-0.58, 0), (0.42, 1), (1.42, 2), (2.42, 3)]),
        # dead time: every turn-on delayed by 1 us, turn-off unchanged
        ("pwm:100kHz,duty=0.42,side=low,dead=1us",
         [(-0.48, 0), (0.52, 1), (1.52, 2), (2.52, 3)]),
        ("pwm:100kHz,duty=0.42,dead=1us", [(0.1, 0.42), (1.1, 1.42), (2.1, 2.42)]),
        # triangle carrier: the pulse centred in the period, both edges modulated
        ("pwm:100kHz,duty=0.4,carrier=triangle", [(0.3, 0.7), (1.3, 1.7), (2.3, 2.7)]),
        ("pwm:100kHz,duty=0.4,carrier=triangle,side=low",
         [(-0.3, 0.3), (0.7, 1.3), (1.7, 2.3), (2.7, 3.3)]),
        # phase: the carrier delayed by a quarter period (both spellings of the angle)
        ("pwm:100kHz,duty=0.5,phase=90deg", [(0.25, 0.75), (1.25, 1.75), (2.25, 2.75)]),
        ("pwm:100kHz,duty=0.5,phase=90", [(0.25, 0.75), (1.25, 1.75), (2.25, 2.75)]),
        # always on, always off
        ("pwm:100kHz,duty=1", [(-1, 4)]),
        ("pwm:100kHz,duty=0", []),
    ],
)  # fmt: skip
def test_on_intervals_in_closed_form(text, expected):
    # hand-computed edges as fractions of the period (exact to 1e-12 of a period)
    wave = parse_waveform(text, "1", name="Q1")
    assert on_intervals(wave) == [(float(a), float(b)) for a, b in expected]
    edges = wave.edges(0.0, 3 * T)
    inside = [x for a, b in on_intervals(wave) for x in (a, b) if 0 < x <= 3]
    assert [round(e / T, 12) for e in edges] == sorted(inside)


@pytest.mark.parametrize(
    "text",
    ["pwm:100kHz,duty=0.42", "pwm:100kHz,duty=0.3,side=low,dead=400ns,phase=30deg",
     "pwm:50kHz,duty=0.7,carrier=triangle,dead=1us", "pwm:20kHz,duty=0.25,carrier=triangle,"
     "side=low,phase=200deg"],
)  # fmt: skip
def test_values_scalar_and_symbolic_forms_agree_with_the_edges(text):
    import casadi as ca

    wave = parse_waveform(text, "1")
    times = np.random.default_rng(7).uniform(0.0, 5 * wave.period, 400)
    inside = np.array([any(a <= t < b for a, b in wave.intervals(0.0, 6 * wave.period))
                       for t in times], dtype=float)  # fmt: skip
    np.testing.assert_array_equal(wave.values(times), inside)
    assert [wave.value_at(float(t)) for t in times] == list(inside)
    t = ca.SX.sym("t")
    f = ca.Function("gate", [t], [wave.expression(t)])
    np.testing.assert_array_equal([float(f(v)) for v in times], inside)


def test_a_leg_with_dead_time_never_conducts_through():
    # the two gates of one leg with the same dead time: never on together, and both off
    # for exactly the dead time after every edge (shoot-through protection)
    high = parse_waveform("pwm:100kHz,duty=0.37,dead=150ns,carrier=triangle", "1")
    low = parse_waveform("pwm:100kHz,duty=0.37,dead=150ns,carrier=triangle,side=low", "1")
    t = np.linspace(0.0, 5 * T, 200_001)
    assert not np.any((high.values(t) > 0) & (low.values(t) > 0))
    ons = high.intervals(0.0, 5 * T) + low.intervals(0.0, 5 * T)
    ons.sort()
    gaps = [b[0] - a[1] for a, b in zip(ons, ons[1:], strict=False)]
    assert gaps == pytest.approx([150e-9] * len(gaps), abs=1e-18)


@pytest.mark.parametrize(
    ("text", "fragment"),
    [
        ("pwm:duty=0.4", "frequency first"),
        ("pwm:-5kHz,duty=0.4", "positive"),
        ("pwm:100kHz", "duty="),
        ("pwm:100kHz,duty=1.2", "0..1"),
        ("pwm:100kHz,duty=120%", "0..1"),
        ("pwm:100kHz,duty=half", "duty"),
        ("pwm:100kHz,duty=0.4,dead=12us", "dead time"),
        ("pwm:100kHz,duty=0.4,side=middle", "side"),
        ("pwm:100kHz,duty=0.4,carrier=sine", "carrier"),
        ("pwm:100kHz,duty=0.4,phase=quarter", "phase"),
        ("pwm:100kHz,duty=0.4,colour=red", "colour"),
        ("pwm:100kHz,duty=0.4,duty=0.5", "twice"),
        ("pwm:100kHz,50kHz,duty=0.4", "frequency first"),
    ],
)
def test_bad_pwm_text_gives_one_line_naming_the_input(text, fragment):
    with pytest.raises(WirestateError) as info:
        parse_waveform(text, "1", name="Q1")
    assert info.value.code == "invalid_input_signal"
    assert info.value.location == ("inputs", "Q1")
    assert fragment in info.value.message and "\n" not in str(info.value)


@settings(max_examples=200, deadline=None)
@given(st.text(alphabet="pwm:0123456789.,=%-kHzunsdutyidecarrgltphgh ", max_size=40))
def test_random_pwm_text_gives_a_gate_or_our_error(text):
    try:
        wave = parse_waveform("pwm:" + text, "1")
    except WirestateError:
        return
    t = np.linspace(0.0, 3 * wave.period, 50)
    assert set(np.unique(wave.values(t))) <= {0.0, 1.0}
