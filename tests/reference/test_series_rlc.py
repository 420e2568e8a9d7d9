"""Series RLC driven by a voltage source, against closed forms and sympy."""

from __future__ import annotations

import math

import numpy as np
import pytest
import sympy

from tests.conftest import circuit, frequency_response, step_response

R, L, C, V = 4.0, 2e-3, 10e-6, 12.0  # underdamped: zeta = R/2*sqrt(C/L) = 0.1414


@pytest.fixture(scope="module")
def block():
    return circuit(
        {
            "Vs": {"kind": "voltage_source", "nodes": ["in", "gnd"]},
            "R1": {"kind": "resistor", "nodes": ["in", "a"], "value": f"{R} ohm"},
            "L1": {"kind": "inductor", "nodes": ["a", "b"], "value": "2mH"},
            "C1": {"kind": "capacitor", "nodes": ["b", "gnd"], "value": "10uF"},
        },
        {"i": {"current": "L1"}, "v_C": {"voltage": "b"}},
    )


def test_order_and_names(block):
    assert block.states == ["i_L1", "v_C1"]
    assert block.inputs == ["Vs"]
    assert block.outputs == ["i", "v_C"]
    ss = block.state_space()
    assert ss.name == "dut" and ss.input_labels == ["Vs"] and ss.state_labels == block.states


def test_natural_frequency_and_damping(block):
    # L i' + R i + q/C = v: s^2 + (R/L) s + 1/(LC); wn = 1/sqrt(LC), zeta = (R/2) sqrt(C/L)
    # (Nilsson and Riedel, Electric Circuits, 10th ed., sec. 8.4). Closed form: 1e-12 rel.
    wn, zeta = 1 / math.sqrt(L * C), R / 2 * math.sqrt(C / L)
    p = block.poles()
    assert np.allclose(np.abs(p), wn, rtol=1e-12)
    assert np.allclose(-p.real / np.abs(p), zeta, rtol=1e-12)


def test_underdamped_step_current_closed_form(block):
    # i(t) = V/(L wd) exp(-alpha t) sin(wd t), alpha = R/2L, wd = sqrt(wn^2 - alpha^2)
    # (Nilsson and Riedel, sec. 8.4, underdamped step response of the series RLC).
    # Matrix exponential against closed form: 1e-9 relative to the peak current.
    alpha = R / (2 * L)
    wd = math.sqrt(1 / (L * C) - alpha**2)
    t = np.linspace(0, 5e-3, 41)
    expected = V / (L * wd) * np.exp(-alpha * t) * np.sin(wd * t)
    got = step_response(block, t, amplitude=V)[0]
    assert np.allclose(got, expected, rtol=0, atol=1e-9 * np.abs(expected).max())


def test_step_response_matches_sympy_inverse_laplace(block):
    # independent reference: I(s) = V / (s (L s + R + 1/(s C))) inverted by sympy
    s, t = sympy.symbols("s t", positive=True)
    Rs, Ls, Cs, Vs = (sympy.Rational(str(v)) for v in (R, L, C, V))
    current = sympy.inverse_laplace_transform(Vs / (s * (Ls * s + Rs + 1 / (s * Cs))), s, t)
    voltage = sympy.inverse_laplace_transform(Vs / (s * (Ls * Cs * s**2 + Rs * Cs * s + 1)), s, t)
    f_i = sympy.lambdify(t, current, "numpy")
    f_v = sympy.lambdify(t, voltage, "numpy")
    times = np.linspace(1e-5, 4e-3, 25)
    got = step_response(block, times, amplitude=V)
    assert np.allclose(got[0], np.real(f_i(times)), atol=1e-9 * 0.5)
    assert np.allclose(got[1], np.real(f_v(times)), atol=1e-9 * 2 * V)


def test_sinusoidal_steady_state_by_undetermined_coefficients(block):
    # v = V cos(w t): try i_p = a cos(w t) + b sin(w t) in L i'' + R i' + i/C = v' and solve
    # for a, b (method of undetermined coefficients, Boyce and DiPrima, Elementary
    # Differential Equations, sec. 3.5); compare with the block's phasor response.
    t, a, b = sympy.symbols("t a b", real=True)
    w = 2 * math.pi * 1200.0
    i_p = a * sympy.cos(w * t) + b * sympy.sin(w * t)
    residual = L * i_p.diff(t, 2) + R * i_p.diff(t) + i_p / C - sympy.diff(V * sympy.cos(w * t), t)
    eqs = [sympy.expand(residual).coeff(f) for f in (sympy.cos(w * t), sympy.sin(w * t))]
    sol = sympy.solve(eqs, [a, b], dict=True)[0]
    phasor = complex(sol[a]) - 1j * complex(sol[b])  # a cos + b sin = Re{(a - j b) e^{jwt}}
    h = frequency_response(block, w)[0, 0] * V
    assert abs(h - phasor) <= 1e-10 * abs(phasor)
    # and the impedance form Z = R + j w L + 1/(j w C) (phasor method): 1e-12 rel
    assert abs(h - V / (R + 1j * w * L + 1 / (1j * w * C))) <= 1e-12 * abs(h)
