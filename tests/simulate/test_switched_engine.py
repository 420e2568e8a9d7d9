"""The switched engine: mode sequence and events of a run, accuracy of the modal stepping."""

from __future__ import annotations

import mpmath
import numpy as np
import pytest

from tests.reference.test_switched_physics import snubbed_buck
from tests.reference.test_switched_reference import buck
from wirestate.simulate.switched import SwitchedEngine, _phi1, simulate_switched


def test_mode_sequence_covers_the_run_and_follows_the_events():
    # a buck in discontinuous conduction: switch edges at fixed times, diode turn-off found
    sc = buck(2e-6, 100e-6, 10.0, ron=1e-4, v0=4.0)
    r = simulate_switched(sc, 5e-5, 1e-6, {"Q1": "pwm:100kHz,duty=0.3"})
    modes = r.modes
    assert modes[0].start == 0.0 and modes[-1].end == pytest.approx(5e-5, rel=1e-12)
    assert all(a.end == b.start and a.on != b.on for a, b in zip(modes, modes[1:], strict=False))
    devices = [d.name for d in sc.devices]
    for interval in modes[1:]:
        at = [e for e in r.events if e.time == interval.start]
        assert at, "every mode starts at an event"
        for e in at:
            assert interval.on[devices.index(e.part)] == (e.after == "on")
    # gate-timed edges sit at fixed times; the diode turn-off in each off-time is located
    q_edges = [e for e in r.events if e.part == "Q1"]
    assert not any(e.located for e in q_edges)
    assert all(abs(e.time / 1e-5 - round(e.time / 1e-5 * 10) / 10) < 1e-9 for e in q_edges)
    found = [e for e in r.events if e.located]
    assert found and all(e.part == "D1" and e.change == "on -> off" for e in found)
    assert {e.before for e in r.events} == {"on", "off"}


def test_modal_stepping_of_a_stiff_mode_against_50_digit_arithmetic():
    # the modal form against mpmath's matrix exponential (50 digits) on the stiffest mode
    # of the snubbed buck (eigenvalues from -5e14 /s to 1e4 /s); 1e-11 of the state
    sc = snubbed_buck()
    engine = SwitchedEngine(sc, x0=np.array([2.4, 0.1, 0.2, 2.4, 12.0]))
    engine.apply(np.array([48.0, 1.0]))
    on = tuple(engine.on)
    mode = sc.mode(on)
    tau = 3.7e-7
    ours = engine.states_at(engine.data(), np.array([tau]))[:, 0]
    n = len(engine.x)
    M = np.zeros((n + 1, n + 1))
    M[:n, :n], M[:n, n] = mode.A, mode.B @ engine.inputs + mode.f
    with mpmath.workdps(50):
        E = mpmath.expm(mpmath.matrix((M * tau).tolist()))
        z = mpmath.matrix([*engine.x.tolist(), 1.0])
        ref = np.array([float(v) for v in (E * z)[:n]])
    assert np.abs(ours - ref).max() <= 1e-11 * np.abs(ref).max()


def test_phi1_on_both_of_its_paths_against_40_digit_arithmetic():
    # phi1(w) = (e^w - 1) / w against mpmath at 40 digits, on small arrays (numpy's expm1)
    # and on a large one (from e^w where |w| >= 1e-2, a seven-term series below). 1e-13
    # relative: the quotient's round-off is about eps / |w| <= 2.2e-14 at the threshold;
    # the series' first omitted term is below 2.5e-19 there
    rng = np.random.default_rng(12)
    w = (rng.standard_normal(3000) + 1j * rng.standard_normal(3000)) * 10.0 ** rng.uniform(
        -12, 2, 3000
    )
    w[:3] = 0.0, 1e-2, -1e-2 + 1e-9j  # the special case and both sides of the threshold
    with mpmath.workdps(40):
        ref = np.array([
            complex(mpmath.expm1(mpmath.mpc(v.real, v.imag)) / mpmath.mpc(v.real, v.imag))
            if v != 0 else 1.0
            for v in w
        ])  # fmt: skip
    large = _phi1(w)
    small = np.concatenate([_phi1(part) for part in np.array_split(w, 30)])
    for ours in (large, small):
        assert np.max(np.abs(ours - ref) / np.abs(ref)) <= 1e-13


def test_many_samples_of_a_stiff_mode_against_50_digit_arithmetic():
    # samples of a whole stretch (the large-array path of phi1, with the series where
    # |lambda tau| < 1e-2) against mpmath's matrix exponential at 50 digits; 1e-11 of the
    # state up to the single-step check's 0.37 us, as there (measured: 7e-12 at 0.7 us
    # and 7e-11 at 4 us, growing with tau alike on both paths and before this path existed)
    sc = snubbed_buck()
    engine = SwitchedEngine(sc, x0=np.array([2.4, 0.1, 0.2, 2.4, 12.0]))
    engine.apply(np.array([48.0, 1.0]))
    mode = sc.mode(tuple(engine.on))
    taus = np.geomspace(1e-12, 3.7e-7, 80)
    ours = engine.states_at(engine.data(), taus)
    n = len(engine.x)
    M = np.zeros((n + 1, n + 1))
    M[:n, :n], M[:n, n] = mode.A, mode.B @ engine.inputs + mode.f
    for k in (0, 20, 40, 60, 79):
        with mpmath.workdps(50):
            E = mpmath.expm(mpmath.matrix((M * taus[k]).tolist()))
            z = mpmath.matrix([*engine.x.tolist(), 1.0])
            ref = np.array([float(v) for v in (E * z)[:n]])
        assert np.abs(ours[:, k] - ref).max() <= 1e-11 * np.abs(ref).max()


def test_save_and_restore_bring_back_state_mode_and_events():
    sc = buck(10e-6, 4.7e-6, 8.0, vf=0.6)
    engine = SwitchedEngine(sc)
    engine.apply(np.array([12.0, 1.0]), record=False)
    engine.advance(4e-6)
    saved = engine.save()
    engine.apply(np.array([12.0, 0.0]))
    engine.advance(3e-6)
    after_once = (engine.x.copy(), tuple(engine.on), list(engine.events))
    engine.restore(saved)
    assert engine.time == 4e-6 and engine.on == [True, False] and engine.events == []
    engine.apply(np.array([12.0, 0.0]))
    engine.advance(3e-6)
    assert np.array_equal(engine.x, after_once[0]) and tuple(engine.on) == after_once[1]
    assert engine.events == after_once[2]


@pytest.mark.parametrize("kind", ["SX", "MX"])
def test_symbolic_modes_come_from_the_same_compile_path(kind):
    # every mode of a snubbed buck as CasADi expressions of two part values equals the
    # numeric mode at other values. Two eliminations (CasADi's QR, SuperLU) of a stiff
    # system (10 kohm off states against 20 nH: 5e11 /s beside 1e4 /s) differ by about
    # 1e-9 of the largest entry of the rows (measured 1.2e-9); 1e-8 keeps a margin, while a
    # different stamp or formula would differ by order one
    import casadi

    from wirestate.spec import parse_circuit
    from wirestate.switching import SwitchedCircuit

    symbol = getattr(casadi, kind).sym
    sc = snubbed_buck(off=1e4)
    assert sc.spec.parts["Rs"].value != 33.0 and sc.spec.parts["Cs"].value != 3.3e-9
    Rs, Cs = symbol("Rs"), symbol("Cs")
    for on in [(False, False), (False, True), (True, False), (True, True)]:
        sym = sc.symbolic_mode(on, {"Rs": Rs, "Cs": Cs})
        f = casadi.Function("m", [Rs, Cs], [sym.A, sym.B, sym.C, sym.D])
        got = [np.array(m) for m in f(33.0, 3.3e-9)]
        data = {"circuit": {"name": "c"}, "parts": dict(sc.spec.model_dump(
            exclude_none=True)["parts"]), "outputs": sc.spec.model_dump(exclude_none=True)[
            "outputs"]}  # fmt: skip
        data["parts"]["Rs"]["value"], data["parts"]["Cs"]["value"] = 33.0, 3.3e-9
        mode = SwitchedCircuit(parse_circuit(data)).mode(on)
        want = [mode.A, mode.B_affine, np.vstack([mode.C, mode.P]),
                np.block([[mode.D, mode.g[:, None]], [mode.Q, mode.p[:, None]]])]  # fmt: skip
        # state rows against the state rows' largest entry, output rows against theirs
        scales = [max(np.abs(want[0]).max(), np.abs(want[1]).max())] * 2
        scales += [max(np.abs(want[2]).max(), np.abs(want[3]).max())] * 2
        for g, w, scale in zip(got, want, scales, strict=True):
            assert np.allclose(g, w, rtol=1e-8, atol=1e-8 * max(1.0, scale))
