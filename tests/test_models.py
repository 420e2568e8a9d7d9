"""Every bundled circuit model loads, compiles and behaves like a passive network."""

from __future__ import annotations

import tomllib

import numpy as np
import pytest

from tests.conftest import MODELS
from wirestate.reduce import load_block

CIRCUIT_FILES = sorted(
    p for p in MODELS.rglob("*.toml") if "circuit" in tomllib.loads(p.read_text("utf-8"))
)


def test_models_are_bundled():
    assert len(CIRCUIT_FILES) >= 4


@pytest.mark.parametrize("path", CIRCUIT_FILES, ids=lambda p: str(p.relative_to(MODELS)))
def test_model_compiles(path):
    block = load_block(path)
    assert block.n_states > 0
    ss = block.state_space()
    assert ss.nstates == block.n_states and ss.name == block.name
    # passive R, L, C networks with ideal sources (and no negative-resistance part) are
    # stable in the wide sense: no pole in the right half-plane
    kinds = {part.kind for part in block.spec.parts.values()}
    if not kinds & {"vcvs", "vccs", "ccvs", "cccs"}:
        assert np.all(block.poles().real <= 1e-9 * np.abs(block.poles()).max())


def test_bus_filter_matches_hand_values():
    # the undamped LC corner of the bus filter, 1/(2 pi sqrt(L C)), is 2.29 kHz; with the
    # damping leg the resonant pair must be better damped than 0.3 (Erickson-style leg,
    # n = Cd/C ~ 3) - a design check on the bundled example, closed form for the corner.
    block = load_block(MODELS / "drive_bus_filter.toml")
    f0 = 1 / (2 * np.pi * np.sqrt(22e-6 * 220e-6))
    assert f0 == pytest.approx(2288.0, rel=1e-3)
    pair = [p for p in block.poles() if p.imag > 0][0]
    assert -pair.real / abs(pair) > 0.3
    gain = block.dc_gain()
    assert gain[block.outputs.index("v_bus"), block.inputs.index("Vbat")] == pytest.approx(1.0)
    # DC drop across the cable for 1 A of inverter current: -Rcable (Ohm's law)
    assert gain[block.outputs.index("v_bus"), block.inputs.index("Iinv")] == pytest.approx(
        -12e-3, rel=1e-9
    )


def test_buck_stage_ring_is_the_snubbed_loop_resonance():
    # the bundled 48 V -> 12 V stage: after turn-off (Q1 off, D1 on) the loop inductance
    # rings with the switch capacitance, damped by the RC snubber; its pole pair is the
    # complex root of s^3 Lp Cp Rs Cs + s^2 Lp (Cp + Cs) + s Rs Cs + 1 (the snubbed loop,
    # tests/reference/test_switched_physics.py). 2 %: the closed form takes the input
    # capacitor (10 uF, 0.5 mohm at 35 MHz) as a short, the output inductor as open and
    # ignores the diode's 15 mohm
    from wirestate.spec import load_circuit
    from wirestate.switching import SwitchedCircuit

    circuit = SwitchedCircuit(load_circuit(MODELS / "aux_buck.toml"))
    values = {
        name: part.value for name, part in circuit.spec.parts.items() if hasattr(part, "value")
    }
    Lp, Cp, Rs, Cs = (values[k] for k in ("Lloop", "Coss", "Rsnub", "Csnub"))
    roots = np.roots([Lp * Cp * Rs * Cs, Lp * (Cp + Cs), Rs * Cs, 1.0])
    expected = roots[np.argmax(roots.imag)]
    poles = circuit.mode((False, True)).A
    ring = max(np.linalg.eigvals(poles), key=lambda p: p.imag)
    assert ring.imag == pytest.approx(expected.imag, rel=2e-2)
    assert ring.real == pytest.approx(expected.real, rel=2e-2)
    assert 20e6 < ring.imag / (2 * np.pi) < 60e6  # a ring of tens of megahertz, as stated


def test_buck_loop_regulates_the_rail_and_keeps_the_switch_inside_its_rating():
    # the bundled closed loop: soft start by a 1 ms reference ramp; after 3 ms the rail's
    # period average is 12 V within 3 % (the PI regulates the sample taken at the
    # period start, the ripple's valley, so the average sits a little above), the duty
    # near the lossless buck's D = Vout / Vin (Erickson and Maksimovic ch. 2; 10 %: the
    # diode drop and the resistances), and the switch voltage, sampled every 0.5 ns for
    # 60 ns after each event, below its 100 V rating
    from wirestate.compose import load_system
    from wirestate.simulate import simulate

    system = load_system(MODELS / "systems" / "aux_buck_loop.toml")
    r = simulate(system, 3.5e-3, 1e-6, {"v_ref": "ramp:1V,end=1ms"}, fine_step=0.5e-9,
                 fine_window=60e-9)  # fmt: skip
    late = r.time >= 3.4e-3
    t, v = r.time[late], r.output("v_aux")[late]
    average = np.trapezoid(v, t) / (t[-1] - t[0])
    assert average == pytest.approx(12.0, rel=3e-2)
    assert r.output("duty")[-1] == pytest.approx(12.0 / 48.0, rel=0.1)
    assert 48.0 < r.output("v_Q1").max() < 100.0
    assert any(e.located for e in r.events)
