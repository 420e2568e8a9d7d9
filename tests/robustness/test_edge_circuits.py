"""Legitimate circuits that used to crash (issue 10, items 3-5): singular A, no inputs,
no states."""

from __future__ import annotations

import control
import numpy as np
import pytest
import sympy

from tests.robustness.conftest import circuit, part
from wirestate.lti import dc_gain_limit
from wirestate.reduce import compile_circuit
from wirestate.report.tables import block_json, block_summary
from wirestate.spec import parse_circuit


def _compile(parts, outputs=None):
    return compile_circuit(parse_circuit(circuit("edge", parts, outputs)))


def _sympy_dc_gain(A, B, C, D):
    """lim_{s->0} C (sI - A)^-1 B + D by sympy, on the exact rationals of the floats."""
    s = sympy.symbols("s", positive=True)
    As, Bs, Cs, Ds = (sympy.Matrix(np.asarray(M)).applyfunc(sympy.nsimplify) for M in (A, B, C, D))
    G = Cs * (s * sympy.eye(As.shape[0]) - As).inv() * Bs + Ds
    return np.array(
        [
            [float(sympy.limit(sympy.simplify(G[i, j]), s, 0, "+")) for j in range(G.shape[1])]
            for i in range(G.shape[0])
        ]  # fmt: skip
    )


def test_current_source_into_capacitor_gives_unit_current_gain():
    # i_C / I_s = 1 at every frequency (KCL at the node); v_C / I_s = 1/(sC) is unbounded
    block = _compile(
        {"I1": part("current_source", ["gnd", "a"]),
         "C1": part("capacitor", ["a", "gnd"], value="1uF")},
        {"iC": {"current": "C1"}, "vC": {"voltage": "a"}},
    )  # fmt: skip
    gain = block.dc_gain()
    assert gain[0, 0] == pytest.approx(1.0, rel=1e-12)
    assert gain[1, 0] == np.inf
    # the same limits by sympy (tolerance 1e-12: closed form)
    reference = _sympy_dc_gain(block.A, block.B, block.C, block.D)
    assert reference[0, 0] == pytest.approx(gain[0, 0], rel=1e-12)
    assert reference[1, 0] == np.inf
    text = block_summary(block)
    assert "unbounded" in text and "inf" not in text.split("DC gain")[1].replace("unbounded", "")


def test_inductor_loop_splits_the_dc_current_by_inductance():
    # V -> R -> L1 || L2: at DC the loop of inductors carries V/R, split in the inverse
    # ratio of the inductances, i_L1 = V/R * L2/(L1 + L2) (current divider of parallel
    # inductors, Hayt and Kemmerly, Engineering Circuit Analysis, ch. 7); the circulating
    # current of the loop is a pole at s = 0 that no input drives
    block = _compile(
        {"V1": part("voltage_source", ["a", "gnd"]),
         "R1": part("resistor", ["a", "b"], value="2ohm"),
         "L1": part("inductor", ["b", "gnd"], value="1mH"),
         "L2": part("inductor", ["b", "gnd"], value="3mH")},
        {"i1": {"current": "L1"}, "vb": {"voltage": "b"}},
    )  # fmt: skip
    assert np.min(np.abs(np.linalg.eigvals(block.A))) < 1e-9
    gain = block.dc_gain()
    assert gain[0, 0] == pytest.approx(0.5 * 3 / 4, rel=1e-9)  # 1e-9: a round-off pole
    assert abs(gain[1, 0]) < 1e-9
    # sympy limit of the hand-derived admittance: I_L1/V = L2/(L1+L2) / (R + s L1 L2/(L1+L2))
    s, R, L1, L2 = sympy.symbols("s R L1 L2", positive=True)
    i1 = L2 / (L1 + L2) / (R + s * L1 * L2 / (L1 + L2))
    limit = sympy.limit(
        i1.subs({R: 2, L1: sympy.Rational(1, 1000), L2: sympy.Rational(3, 1000)}), s, 0
    )
    assert float(limit) == pytest.approx(gain[0, 0], rel=1e-9)


def test_lone_capacitor_inspects():
    block = _compile({"C1": part("capacitor", ["a", "gnd"], value="1uF")}, {"v": {"voltage": "a"}})
    assert block.dc_gain().shape == (1, 0)
    assert "no inputs" in block_summary(block)
    assert block_json(block)["dc_gain"] == [[]]


@pytest.mark.parametrize("seed", range(6))
def test_dc_gain_limit_against_sympy_on_index_two_and_three_poles(seed):
    # random systems with a nilpotent block at the origin (index 1 to 3), some outputs and
    # inputs arranged to cancel the singular terms: the limit decides finite or unbounded
    rng = np.random.default_rng(seed)
    index = 1 + seed % 3
    n_fast = 2
    J = np.diag(np.ones(index - 1), 1)  # nilpotent Jordan block
    T = np.zeros((n_fast + index, n_fast + index))
    T[:n_fast, :n_fast] = np.diag(-rng.integers(1, 5, n_fast).astype(float))
    T[n_fast:, n_fast:] = J
    T[:n_fast, n_fast:] = rng.integers(-2, 3, (n_fast, index))
    S = np.eye(n_fast + index) + np.triu(rng.integers(-1, 2, T.shape), 1)
    A = S @ T @ np.linalg.inv(S)
    B = S @ np.vstack([rng.integers(-2, 3, (n_fast, 2)), np.zeros((index, 2))])
    B[:, 1] += S[:, -1]  # input 2 drives the chain at the origin
    C = np.hstack([rng.integers(-2, 3, (2, n_fast)), np.zeros((2, index))]) @ np.linalg.inv(S)
    C[1] += np.linalg.inv(S)[n_fast]  # output 2 sees its top
    D = rng.integers(-1, 2, (2, 2)).astype(float)
    got = dc_gain_limit(A, B, C, D)
    want = _sympy_dc_gain(A, B, C, D)
    finite = np.isfinite(want)
    assert np.array_equal(np.isfinite(got), finite)
    assert np.array_equal(np.sign(got[~finite]), np.sign(want[~finite]))
    np.testing.assert_allclose(got[finite], want[finite], rtol=1e-9, atol=1e-9)


def test_dc_gain_regular_a_matches_python_control():
    # reference library: python-control's dcgain for an invertible A (1e-12, closed form)
    rng = np.random.default_rng(3)
    A = -np.eye(4) * 3 + rng.normal(size=(4, 4)) * 0.3
    B, C, D = rng.normal(size=(4, 2)), rng.normal(size=(3, 4)), rng.normal(size=(3, 2))
    np.testing.assert_allclose(
        dc_gain_limit(A, B, C, D), control.ss(A, B, C, D).dcgain(), rtol=1e-10, atol=1e-12
    )


RC = {
    "R1": part("resistor", ["a", "gnd"], value="1kohm"),
    "C1": part("capacitor", ["a", "gnd"], value="1uF", initial="5V"),
}


def test_block_without_inputs_converts_simulates_and_composes():
    from wirestate.blocks import sensor_filter
    from wirestate.compose import compose
    from wirestate.simulate import simulate

    block = _compile(RC, {"v": {"voltage": "a"}})
    sys = block.state_space()
    assert sys.ninputs == 0 and sys.nstates == 1
    result = simulate(block, 2e-3, 1e-5)
    # RC discharge v = 5 exp(-t / RC) (first-order closed form; 1e-9: matrix exponential)
    np.testing.assert_allclose(result.output("v"), 5 * np.exp(-result.time / 1e-3), rtol=1e-9)
    system = compose(
        {"rc": block, "f": sensor_filter("f", 1e-3, unit="V")},
        {"f.signal": "rc.v"},
        {},
        {"vf": "f.measured"},
    )
    run = simulate(system, 1e-3, 1e-5)
    # filter of 5 exp(-t/tau) by 1/(1 + s tau), same tau: 5 (t/tau) exp(-t/tau)
    t = run.time
    np.testing.assert_allclose(run.output("vf"), 5 * t / 1e-3 * np.exp(-t / 1e-3), atol=1e-8)


DIVIDER = {
    "V1": part("voltage_source", ["a", "gnd"], value="10V"),
    "R1": part("resistor", ["a", "b"], value="1kohm"),
    "R2": part("resistor", ["b", "gnd"], value="3kohm"),
}


@pytest.mark.parametrize("hold", ["zoh", "foh"])
def test_zero_state_block_simulates_with_either_hold(hold):
    from wirestate.simulate import simulate

    block = _compile(DIVIDER, {"v": {"voltage": "b"}})
    assert block.n_states == 0
    result = simulate(block, 1e-3, 1e-4, {"V1": "ramp:10V,end=1ms"}, hold=hold)
    # divider ratio R2 / (R1 + R2) = 0.75 at every sample (closed form)
    np.testing.assert_allclose(result.output("v"), 0.75 * result.inputs[0], rtol=1e-12)


def test_zero_state_block_steps():
    from wirestate.simulate import Stepper

    stepper = Stepper(_compile(DIVIDER, {"v": {"voltage": "b"}}), dt=1e-6)
    assert stepper.step({"V1": 8.0})[0] == pytest.approx(6.0, rel=1e-12)


def test_regress_update_takes_zero_state_and_no_input_blocks(tmp_path):
    from tests.robustness.conftest import toml_text
    from wirestate.cli import main

    models = tmp_path / "models"
    models.mkdir()
    (models / "divider.toml").write_text(
        toml_text(circuit("divider", DIVIDER, {"v": {"voltage": "b"}}))
    )
    (models / "rc.toml").write_text(toml_text(circuit("rc", RC, {"v": {"voltage": "a"}})))
    # golden files in the test's own folder: the default, models/golden, is the project's
    files = [str(models / "divider.toml"), str(models / "rc.toml")]
    golden = ["--golden", str(tmp_path / "golden")]
    assert main(["regress", *files, *golden, "--update"]) == 0
    assert list((tmp_path / "golden").rglob("rc.json"))
    assert main(["regress", *files, *golden]) == 0


def test_no_states_and_no_inputs_converts():
    # found by make fuzz: a vcvs of gain 0 measured by its current, nothing else
    block = _compile(
        {"P0": part("vcvs", ["gnd", "a"], control=["gnd", "gnd"], gain=0.0)},
        {"y0": {"current": "P0"}},
    )
    sys = block.state_space()
    assert (sys.nstates, sys.ninputs, sys.noutputs) == (0, 0, 1)
