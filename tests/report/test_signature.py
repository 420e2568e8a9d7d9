"""Response signatures against closed forms, and the drift rules that compare them."""

from __future__ import annotations

import math

import numpy as np
import pytest

from wirestate.lti import CircuitBlock
from wirestate.report import signature as sig


def rc_lowpass(R: float = 1e3, C: float = 1e-6) -> CircuitBlock:
    # source Vs -> R -> node out, C from out to ground; state v_C1, output v_out = v_C1
    return CircuitBlock(
        name="rc",
        A=[[-1 / (R * C)]],
        B=[[1 / (R * C)]],
        C=[[1.0]],
        D=[[0.0]],
        states=["v_C1"],
        inputs=["Vs"],
        outputs=["v_out"],
    )


def series_rlc(R: float, L: float, C: float) -> CircuitBlock:
    # states i_L1, v_C1; KVL: L di/dt = Vs - R i - v_C; C dv/dt = i
    return CircuitBlock(
        name="rlc",
        A=[[-R / L, -1 / L], [1 / C, 0.0]],
        B=[[1 / L], [0.0]],
        C=[[0.0, 1.0], [1.0, 0.0]],
        D=[[0.0], [0.0]],
        states=["i_L1", "v_C1"],
        inputs=["Vs"],
        outputs=["v_C1", "i_L1"],
    )


def test_rc_step_response_matches_the_first_order_closed_form():
    # source: first-order RC charging v(t) = 1 - exp(-t/RC) for a unit step (Nilsson and
    # Riedel, Electric Circuits, ch. 7); tolerance 1e-9 absolute: matrix exponential
    R, C = 2.2e3, 470e-9
    s = sig.linear_signature(rc_lowpass(R, C))
    t = np.asarray(s["step"]["times_s"])
    y = np.asarray(s["step"]["responses"]["Vs"]["v_out"])
    assert t[0] == 0.0 and t[-1] == pytest.approx(5 * R * C, rel=1e-3)
    np.testing.assert_allclose(y, 1 - np.exp(-t / (R * C)), rtol=0, atol=1e-9)


def test_series_rlc_step_current_matches_the_underdamped_closed_form():
    # source: series RLC driven by a unit step, i(t) = exp(-alpha t) sin(wd t) / (wd L),
    # alpha = R/2L, wd = sqrt(1/LC - alpha^2) (Nilsson and Riedel, ch. 8; from memory);
    # tolerance 1e-9 of the peak: matrix exponential
    R, L, C = 1.0, 1e-3, 10e-6
    s = sig.linear_signature(series_rlc(R, L, C))
    alpha, wd = R / (2 * L), math.sqrt(1 / (L * C) - (R / (2 * L)) ** 2)
    t = np.asarray(s["step"]["times_s"])
    i = np.asarray(s["step"]["responses"]["Vs"]["i_L1"])
    expected = np.exp(-alpha * t) * np.sin(wd * t) / (wd * L)
    np.testing.assert_allclose(i, expected, rtol=0, atol=1e-9 * np.abs(expected).max())
    # poles -alpha +- j wd, closed form; 1e-12 relative (well-conditioned 2x2 eigenproblem)
    poles = sorted((complex(*p) for p in s["poles"]), key=lambda p: p.imag)
    expected_poles = [complex(-alpha, -wd), complex(-alpha, wd)]
    for p, q in zip(poles, expected_poles, strict=True):
        assert abs(p - q) <= 1e-12 * abs(q)


def test_rc_frequency_response_matches_the_phasor_closed_form():
    # source: phasor divider H(jw) = 1 / (1 + jwRC) (any circuits text); 1e-12 relative,
    # one complex solve per frequency
    R, C = 1e3, 1e-6
    s = sig.linear_signature(rc_lowpass(R, C))
    w = np.asarray(s["frequency_response"]["frequencies_rad_s"])
    H = 1 / (1 + 1j * w * R * C)
    mag = np.asarray(s["frequency_response"]["magnitude"]["Vs"]["v_out"])
    phase = np.asarray(s["frequency_response"]["phase_deg"]["Vs"]["v_out"])
    np.testing.assert_allclose(mag, np.abs(H), rtol=1e-12)
    np.testing.assert_allclose(phase, np.degrees(np.angle(H)), rtol=0, atol=1e-10)
    # grid spans a decade below and above the corner 1/RC (the rule in derive_grid)
    assert w[0] == pytest.approx(100.0, rel=1e-3) and w[-1] == pytest.approx(1e4, rel=1e-3)


def test_identical_blocks_do_not_drift():
    s = sig.linear_signature(series_rlc(1.0, 1e-3, 10e-6))
    assert sig.compare_signatures(s, s, sig.default_tolerances(s)) == []


def test_pole_matching_ignores_ordering():
    # the same block with its states listed in the other order has the same poles; the
    # golden list is also reversed, so only a by-nearest match can pair them
    a = series_rlc(0.5, 1e-3, 10e-6)
    P = np.array([[0.0, 1.0], [1.0, 0.0]])
    b = CircuitBlock(
        "rlc", P @ a.A @ P, P @ a.B, a.C @ P, a.D, ["v_C1", "i_L1"], a.inputs, a.outputs
    )
    golden = sig.linear_signature(a)
    golden["poles"] = golden["poles"][::-1]
    current = sig.linear_signature(b, sig.signature_grid(golden))
    current["states"] = golden["states"]  # the state order is checked separately
    assert sig.compare_signatures(golden, current, sig.default_tolerances(golden)) == []


def test_a_pole_shift_beyond_the_tolerance_is_named_and_one_within_it_is_not():
    golden = sig.linear_signature(rc_lowpass(1e3, 1e-6))  # pole at -1000 rad/s
    tolerances = sig.default_tolerances(golden)
    allowed = tolerances["poles"]["atol"] + tolerances["poles"]["rtol"] * 1000.0
    within = dict(golden, poles=[[-1000.0 - 0.5 * allowed, 0.0]])
    beyond = dict(golden, poles=[[-1000.0 - 2.0 * allowed, 0.0]])
    assert sig.compare_signatures(golden, within, tolerances) == []
    drifts = sig.compare_signatures(golden, beyond, tolerances)
    assert [d.quantity for d in drifts] == ["poles"]
    assert drifts[0].difference == pytest.approx(2.0 * allowed, rel=1e-9)


def test_a_changed_resistor_drifts_poles_step_and_frequency_response():
    golden = sig.linear_signature(series_rlc(1.0, 1e-3, 10e-6))
    current = sig.linear_signature(series_rlc(1.05, 1e-3, 10e-6), sig.signature_grid(golden))
    quantities = {d.quantity for d in sig.compare_signatures(golden, current, {})}
    assert {"poles", "step", "frequency_response.magnitude"} <= quantities
    # the DC gain of v_C1 is 1 whatever R is (capacitor charges to the source voltage)
    assert "dc_gain" not in quantities


def test_pole_count_change_is_reported():
    golden = sig.linear_signature(rc_lowpass())
    current = sig.linear_signature(series_rlc(1.0, 1e-3, 10e-6), sig.signature_grid(golden))
    drifts = sig.compare_signatures(golden, current, {})
    assert any(d.quantity == "poles" and d.item == "count" for d in drifts)
    assert any(d.quantity == "signals" and d.item == "states" for d in drifts)


def test_integrator_dc_gain_is_stored_as_inf_and_compares_equal():
    # an ideal capacitor charged by a current source: v = (1/C) * integral of i, DC gain
    # unbounded (pole at s = 0)
    block = CircuitBlock("int", [[0.0]], [[1e6]], [[1.0]], [[0.0]], ["v_C1"], ["Is"], ["v"])
    s = sig.linear_signature(block)
    assert s["dc_gain"] == [["inf"]]
    assert sig.compare_signatures(s, s, sig.default_tolerances(s)) == []
    finite = dict(s, dc_gain=[[5.0]])
    assert [d.quantity for d in sig.compare_signatures(s, finite, {})] == ["dc_gain"]


def test_phase_comparison_wraps_around_180_degrees():
    s = sig.linear_signature(rc_lowpass())
    a = dict(s, frequency_response=dict(s["frequency_response"]))
    b = dict(s, frequency_response=dict(s["frequency_response"]))
    n = len(s["frequency_response"]["frequencies_rad_s"])
    a["frequency_response"]["phase_deg"] = {"Vs": {"v_out": [179.9999] * n}}
    b["frequency_response"]["phase_deg"] = {"Vs": {"v_out": [-179.9999] * n}}
    assert sig.compare_signatures(a, b, {}) == []  # 0.0002 degrees apart, allowed 1e-3


def test_undamped_mode_on_a_round_frequency_is_not_sampled_on_the_pole():
    # lossless LC with w0 = 1e4 rad/s exactly: a symmetric grid would hit w0 and divide by 0
    L, C = 1e-3, 1e-5
    block = CircuitBlock(
        "lc",
        [[0.0, -1 / L], [1 / C, 0.0]],
        [[1 / L], [0.0]],
        [[0.0, 1.0]],
        [[0.0]],
        ["i_L1", "v_C1"],
        ["Vs"],
        ["v_C1"],
    )
    s = sig.linear_signature(block)
    mag = np.asarray(s["frequency_response"]["magnitude"]["Vs"]["v_C1"], dtype=float)
    assert np.all(np.isfinite(mag))
    # step of a lossless LC: v = 1 - cos(w0 t) (closed form); 1e-9, matrix exponential
    t = np.asarray(s["step"]["times_s"])
    v = np.asarray(s["step"]["responses"]["Vs"]["v_C1"])
    np.testing.assert_allclose(v, 1 - np.cos(1e4 * t), rtol=0, atol=1e-9)


def test_tuned_values_compare_with_their_own_tolerances():
    golden = sig.tuned_signature(
        {"Rd": {"optimum": 1.234, "preferred": 1.2}}, series="E24", feasible=True
    )
    tolerances = sig.default_tolerances(golden)
    assert set(tolerances) == {"tuned.optimum", "tuned.preferred"}
    close = sig.tuned_signature({"Rd": {"optimum": 1.234 * (1 + 1e-5), "preferred": 1.2}})
    close.update(series="E24", feasible=True)
    moved = sig.tuned_signature({"Rd": {"optimum": 1.30, "preferred": 1.3}}, series="E24")
    assert sig.compare_signatures(golden, close, tolerances) == []
    quantities = [d.quantity for d in sig.compare_signatures(golden, moved, tolerances)]
    assert quantities == ["tuned", "tuned.optimum", "tuned.preferred"]  # feasible absent


def test_control_state_space_is_accepted():
    block = series_rlc(1.0, 1e-3, 10e-6)
    from_block = sig.linear_signature(block)
    from_control = sig.linear_signature(block.state_space(), sig.signature_grid(from_block))
    assert sig.compare_signatures(from_block, from_control, {}) == []


def _bundled_circuits():
    from tests.conftest import MODELS
    from wirestate.report import golden

    if not MODELS.is_dir():
        return []
    from wirestate.spec import load_circuit
    from wirestate.switching import is_switched

    # switched circuits have their own signature (poles of every mode), tested below
    return [
        p
        for p in golden.discover_models(MODELS, MODELS / "golden")
        if golden.detect_kind(p) == "circuit" and not is_switched(load_circuit(p))
    ]


@pytest.mark.parametrize("model", _bundled_circuits(), ids=lambda p: p.name)
def test_tolerances_ignore_rounding_but_catch_a_small_design_change(model):
    # rounding stand-in: every matrix entry perturbed by 1e-11 relative (about 1e5 times
    # double-precision rounding, what a different BLAS or compile order could do at most)
    # must not drift; scaling A by 1 + 1e-4 (all time constants 0.01 % faster, far below
    # any part tolerance) must drift. Common practice, no source: the margins are the ones
    # argued beside DEFAULT_TOLERANCES.
    from wirestate.reduce import load_block
    from wirestate.report import golden

    document = golden.read_golden(golden.golden_path(model, _models_root(model) / "golden"))
    stored, tolerances = document["signature"], document["tolerances"]
    grid = sig.signature_grid(stored)
    rng = np.random.default_rng(7)
    block = load_block(model)
    noisy = load_block(model)
    for name in ("A", "B", "C", "D"):
        matrix = getattr(noisy, name)
        setattr(noisy, name, matrix * (1 + 1e-11 * rng.standard_normal(matrix.shape)))
    assert sig.compare_signatures(stored, sig.linear_signature(noisy, grid), tolerances) == []
    if block.n_states:
        faster = load_block(model)
        faster.A = faster.A * (1 + 1e-4)
        drifts = sig.compare_signatures(stored, sig.linear_signature(faster, grid), tolerances)
        assert "poles" in {d.quantity for d in drifts}


def _models_root(model):
    return next(p for p in model.parents if p.name == "models")


def test_switched_circuit_signature_keeps_every_mode_and_names_the_one_that_moved():
    # the bundled buck stage: 2 devices, 4 modes, each mode's poles from the one compile
    # path; a 1 % snubber resistor moves the snubbed ring's poles beyond the default
    # tolerance, and the drift names the mode
    from tests.conftest import MODELS
    from wirestate.reduce import compile_circuit
    from wirestate.spec import load_circuit

    spec = load_circuit(MODELS / "aux_buck.toml")
    stored = sig.switched_circuit_signature(compile_circuit(spec), None)
    assert list(stored["modes"]) == ["Q1 off, D1 off", "Q1 off, D1 on", "Q1 on, D1 off",
                                     "Q1 on, D1 on"]  # fmt: skip
    grid = sig.signature_grid(stored)
    same = sig.switched_circuit_signature(compile_circuit(spec), grid)
    tolerances = sig.default_tolerances(stored)
    assert sig.compare_signatures(stored, same, tolerances) == []
    changed = spec.with_values({"Rsnub": spec.parts["Rsnub"].value * 1.01})
    drifts = sig.compare_signatures(
        stored, sig.switched_circuit_signature(compile_circuit(changed), grid), tolerances
    )
    assert any(d.quantity == "poles" and d.item.startswith("Q1 on, D1 off:") for d in drifts)


def test_switched_run_signature_catches_a_small_change_and_not_a_rerun(tmp_path):
    # the bundled closed loop, on a short grid: the same run twice agrees exactly; a
    # 0.1 % larger output inductor moves the samples or the event times beyond the stated
    # tolerances (1e-6 of full scale, 1e-10 s)
    from tests.conftest import MODELS
    from wirestate.compose import load_system

    system = load_system(MODELS / "systems" / "aux_buck_loop.toml")
    grid = sig.derive_switched_grid(system)
    grid["until_s"] = 1e-3
    grid["sample_indices"] = [k for k in grid["sample_indices"] if k <= 1000]
    stored = sig.switched_signature(system, grid)
    tolerances = sig.default_tolerances(stored)
    assert set(tolerances) == {"switched.samples", "switched.events"}
    assert stored["events"]["count"] > 100 and len(stored["events"]["first"]) == 40
    assert sig.compare_signatures(stored, sig.switched_signature(system, grid), tolerances) == []
    circuit = (MODELS / "aux_buck.toml").read_text().replace('value = "33uH"', 'value = "33.033uH"')
    (tmp_path / "aux_buck.toml").write_text(circuit)
    (tmp_path / "systems").mkdir()
    text = (MODELS / "systems" / "aux_buck_loop.toml").read_text()
    (tmp_path / "systems" / "loop.toml").write_text(text)
    changed = load_system(tmp_path / "systems" / "loop.toml")
    drifts = sig.compare_signatures(stored, sig.switched_signature(changed, grid), tolerances)
    assert {"switched.samples", "switched.events"} & {d.quantity for d in drifts}
