"""Compiled circuits against textbook closed forms."""

from __future__ import annotations

import math

import numpy as np
import pytest

from tests.conftest import circuit, frequency_response
from wirestate.reduce import compile_circuit
from wirestate.spec.generate import ladder


def test_parallel_rlc_driven_by_current_source():
    # Parallel RLC: s^2 + s/(RC) + 1/(LC); wn = 1/sqrt(LC), zeta = 1/(2R) sqrt(L/C)
    # (Nilsson and Riedel, Electric Circuits, 10th ed., sec. 8.1). Closed form: 1e-12 rel.
    R, L, C = 50.0, 1e-3, 1e-6
    block = circuit(
        {
            "Is": {"kind": "current_source", "nodes": ["gnd", "top"]},
            "R1": {"kind": "resistor", "nodes": ["top", "gnd"], "value": R},
            "L1": {"kind": "inductor", "nodes": ["top", "gnd"], "value": L},
            "C1": {"kind": "capacitor", "nodes": ["top", "gnd"], "value": C},
        },
        {"v": {"voltage": "top"}, "i_L": {"current": "L1"}},
    )
    wn, zeta = 1 / math.sqrt(L * C), 1 / (2 * R) * math.sqrt(L / C)
    p = block.poles()
    assert np.allclose(np.abs(p), wn, rtol=1e-12)
    assert np.allclose(-p.real / np.abs(p), zeta, rtol=1e-12)
    # V(s)/I(s) = 1 / (1/R + 1/(sL) + sC) (parallel admittances add); inductor takes all DC
    w = 0.7 * wn
    z = 1 / (1 / R + 1 / (1j * w * L) + 1j * w * C)
    assert abs(frequency_response(block, w)[0, 0] - z) <= 1e-12 * abs(z)
    assert block.dc_gain()[1, 0] == pytest.approx(1.0, rel=1e-12)


@pytest.mark.parametrize("sections", [1, 3, 8, 25])
def test_lc_ladder_eigenfrequencies(sections):
    # Uniform L-C ladder, shorted at the source end, open at the far end: a fixed-free chain
    # with w_k = (2/sqrt(LC)) sin((2k-1) pi / (2(2n+1))), k = 1..n (from memory; the same
    # result as the fixed-free mass-spring chain, e.g. Brillouin, Wave Propagation in
    # Periodic Structures, ch. 1). Eigenvalues of a 50x50 matrix: 1e-9 rel.
    L, C = 2e-6, 5e-9
    block = compile_circuit(ladder(sections, resistance=0.0, inductance=L, capacitance=C))
    assert block.n_states == 2 * sections
    k = np.arange(1, sections + 1)
    expected = 2 / math.sqrt(L * C) * np.sin((2 * k - 1) * math.pi / (2 * (2 * sections + 1)))
    p = block.poles()
    assert np.allclose(p.real, 0.0, atol=1e-9 * expected.max())
    got = np.sort(p.imag[p.imag > 0])
    assert np.allclose(got, expected, rtol=1e-9)


def test_three_capacitors_in_a_loop_give_two_states():
    # order = C + L - (C/V loops) - (L/I cutsets): 3 - 1 = 2 (normal-tree count, Chua and
    # Lin, Computer-Aided Analysis of Electronic Circuits, 1975, ch. 8)
    block = circuit(
        {
            "Is": {"kind": "current_source", "nodes": ["gnd", "a"]},
            "R1": {"kind": "resistor", "nodes": ["a", "gnd"], "value": 100},
            "R2": {"kind": "resistor", "nodes": ["b", "gnd"], "value": 220},
            "C1": {"kind": "capacitor", "nodes": ["a", "b"], "value": "1u"},
            "C2": {"kind": "capacitor", "nodes": ["b", "c"], "value": "2u"},
            "C3": {"kind": "capacitor", "nodes": ["c", "a"], "value": "3u"},
            "R3": {"kind": "resistor", "nodes": ["c", "gnd"], "value": 330},
        },
        {"v_a": {"voltage": "a"}},
    )
    assert block.n_states == 2
    assert set(block.states) <= {"v_C1", "v_C2", "v_C3"}


def test_two_inductors_in_series_give_one_state():
    # the common node carries only the two inductors: an L-only cutset removes one state;
    # the pair acts as L1 + L2 (series inductances add): 1e-12 rel on the time constant
    block = circuit(
        {
            "Vs": {"kind": "voltage_source", "nodes": ["in", "gnd"]},
            "R1": {"kind": "resistor", "nodes": ["in", "a"], "value": 10},
            "L1": {"kind": "inductor", "nodes": ["a", "m"], "value": "1mH"},
            "L2": {"kind": "inductor", "nodes": ["m", "gnd"], "value": "3mH"},
        },
        {"i_L2": {"current": "L2"}, "v_m": {"voltage": "m"}},
    )
    assert block.n_states == 1
    assert block.poles()[0].real == pytest.approx(-10 / 4e-3, rel=1e-12)
    # inductive divider: v_m = L2/(L1+L2) * (Vs - R i) at high frequency -> 0.75 Vs
    assert frequency_response(block, 1e9)[1, 0].real == pytest.approx(0.75, rel=1e-6)


def test_capacitor_across_voltage_source_is_not_a_state():
    block = circuit(
        {
            "Vs": {"kind": "voltage_source", "nodes": ["in", "gnd"]},
            "C0": {"kind": "capacitor", "nodes": ["in", "gnd"], "value": "1u"},
            "R1": {"kind": "resistor", "nodes": ["in", "a"], "value": 1000},
            "C1": {"kind": "capacitor", "nodes": ["a", "gnd"], "value": "1u"},
        },
        {"v_a": {"voltage": "a"}},
    )
    assert block.states == ["v_C1"]
    assert block.poles()[0].real == pytest.approx(-1000.0, rel=1e-12)  # 1/(RC)


def test_capacitive_divider_across_source_has_shifted_state():
    # C1 in series with C2 across Vs, R2 across C2: v_m jumps with Vs by C1/(C1+C2)
    # (capacitive divider), then relaxes with tau = R2 (C1 + C2). Closed forms, 1e-12 rel.
    block = circuit(
        {
            "Vs": {"kind": "voltage_source", "nodes": ["in", "gnd"]},
            "C1": {"kind": "capacitor", "nodes": ["in", "m"], "value": "1u"},
            "C2": {"kind": "capacitor", "nodes": ["m", "gnd"], "value": "3u"},
            "R2": {"kind": "resistor", "nodes": ["m", "gnd"], "value": 1000},
        },
        {"v_m": {"voltage": "m"}},
    )
    assert block.states == ["v_C1_shifted"]
    assert block.D[0, 0] == pytest.approx(0.25, rel=1e-12)
    assert block.poles()[0].real == pytest.approx(-1 / (1000 * 4e-6), rel=1e-12)
    assert block.state_offset[0, 0] == pytest.approx(0.75, rel=1e-12)


def test_inverting_amplifier_with_finite_gain():
    # Inverting amplifier, op amp as a VCVS of gain A: H = -(Zf/R1) / (1 + (1 + Zf/R1)/A)
    # (Sedra and Smith, Microelectronic Circuits, 7th ed., sec. 2.3.2), Zf = Rf || Cf.
    R1, Rf, Cf, A = 1e3, 10e3, 1e-9, 2e4
    block = circuit(
        {
            "Vin": {"kind": "voltage_source", "nodes": ["in", "gnd"]},
            "R1": {"kind": "resistor", "nodes": ["in", "inv"], "value": R1},
            "Rf": {"kind": "resistor", "nodes": ["inv", "out"], "value": Rf},
            "Cf": {"kind": "capacitor", "nodes": ["inv", "out"], "value": Cf},
            "E1": {"kind": "vcvs", "nodes": ["out", "gnd"], "control": ["gnd", "inv"], "gain": A},
        },
        {"v_out": {"voltage": "out"}},
    )
    assert block.n_states == 1
    for w in (1e2, 1e5, 1e6, 1e7):
        zf = Rf / (1 + 1j * w * Rf * Cf)
        h = -(zf / R1) / (1 + (1 + zf / R1) / A)
        assert abs(frequency_response(block, w)[0, 0] - h) <= 1e-12 * abs(h)


def test_coupled_inductors_against_reflected_impedance():
    # Z_in = R1 + jwL1 + (wM)^2 / (R2 + jwL2) (reflected impedance of a linear transformer,
    # Alexander and Sadiku, Fundamentals of Electric Circuits, 5th ed., sec. 13.4).
    R1, L1, L2, k, R2 = 0.5, 1e-3, 4e-3, 0.9, 20.0
    M = k * math.sqrt(L1 * L2)
    block = circuit(
        {
            "Vs": {"kind": "voltage_source", "nodes": ["in", "gnd"]},
            "R1": {"kind": "resistor", "nodes": ["in", "p"], "value": R1},
            "Lp": {"kind": "inductor", "nodes": ["p", "gnd"], "value": L1},
            "Ls": {"kind": "inductor", "nodes": ["s", "gnd"], "value": L2},
            "R2": {"kind": "resistor", "nodes": ["s", "gnd"], "value": R2},
            "K1": {"kind": "coupling", "inductors": ["Lp", "Ls"], "coefficient": k},
        },
        {"i_in": {"current": "R1"}, "v_s": {"voltage": "s"}},
    )
    assert block.n_states == 2
    for w in (10.0, 1e3, 1e5):
        z_in = R1 + 1j * w * L1 + (w * M) ** 2 / (R2 + 1j * w * L2)
        assert abs(frequency_response(block, w)[0, 0] - 1 / z_in) <= 1e-12 * abs(1 / z_in)


def test_coupled_inductors_against_tee_equivalent():
    # T-equivalent of coupled inductors with a common terminal: L1 - M, L2 - M and M
    # (Alexander and Sadiku, sec. 13.5). Two compiled circuits, same response: 1e-10 rel.
    L1, L2, k = 2e-3, 0.8e-3, 0.5
    M = k * math.sqrt(L1 * L2)
    common = {
        "Vs": {"kind": "voltage_source", "nodes": ["in", "gnd"]},
        "R1": {"kind": "resistor", "nodes": ["in", "p"], "value": 3.0},
        "R2": {"kind": "resistor", "nodes": ["s", "gnd"], "value": 7.0},
    }
    coupled = circuit(
        {
            **common,
            "La": {"kind": "inductor", "nodes": ["p", "gnd"], "value": L1},
            "Lb": {"kind": "inductor", "nodes": ["s", "gnd"], "value": L2},
            "K": {"kind": "coupling", "inductors": ["La", "Lb"], "coefficient": k},
        },
        {"v_s": {"voltage": "s"}},
    )
    tee = circuit(
        {
            **common,
            "Lx": {"kind": "inductor", "nodes": ["p", "t"], "value": L1 - M},
            "Ly": {"kind": "inductor", "nodes": ["s", "t"], "value": L2 - M},
            "Lm": {"kind": "inductor", "nodes": ["t", "gnd"], "value": M},
        },
        {"v_s": {"voltage": "s"}},
    )
    for w in (30.0, 3e3, 3e5):
        a, b = frequency_response(coupled, w)[0, 0], frequency_response(tee, w)[0, 0]
        assert abs(a - b) <= 1e-10 * abs(b)


def test_dc_motor_armature_coupling():
    # Armature R, L with back-EMF k*w: torque = k i; at stall (w = 0) i = V/R; with speed
    # held, i = (V - k w)/R (DC machine equations, Krause, Analysis of Electric Machinery,
    # ch. 2). DC gains are closed forms: 1e-12 rel.
    R, L, k = 0.8, 1.2e-3, 0.05
    block = circuit(
        {
            "Va": {"kind": "voltage_source", "nodes": ["p", "gnd"]},
            "Ra": {"kind": "resistor", "nodes": ["p", "a"], "value": R},
            "La": {"kind": "inductor", "nodes": ["a", "b"], "value": L},
            "M1": {
                "kind": "electromechanical",
                "nodes": ["b", "gnd"],
                "emf_constant": f"{k} N*m/A",
            },
        },
        {"i_a": {"current": "La"}},
    )
    assert block.inputs == ["Va", "M1"]
    assert block.outputs == ["i_a", "torque_M1"]
    assert block.units["M1"] == "rad/s" and block.units["torque_M1"] == "N*m"
    g = block.dc_gain()
    assert g[0, 0] == pytest.approx(1 / R, rel=1e-12)
    assert g[0, 1] == pytest.approx(-k / R, rel=1e-12)
    assert g[1, 0] == pytest.approx(k / R, rel=1e-12)
    assert block.poles()[0].real == pytest.approx(-R / L, rel=1e-12)
