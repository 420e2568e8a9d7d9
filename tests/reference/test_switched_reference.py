"""Switched circuits against closed forms and an independent solve_ivp reference."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from wirestate.simulate.switched import simulate_switched
from wirestate.spec import parse_circuit
from wirestate.switching import SwitchedCircuit

RON, ROFF = 0.01, 10e6


def buck(L, C, R, vf=0.0, ron=RON, i0=0.0, v0=0.0):
    data = {
        "circuit": {"name": "buck"},
        "parts": {
            "Vin": {"kind": "voltage_source", "nodes": ["in", "gnd"], "value": 12.0},
            "Q1": {"kind": "switch", "nodes": ["in", "sw"], "on_resistance": ron},
            "D1": {"kind": "diode", "nodes": ["gnd", "sw"], "forward_voltage": vf,
                   "on_resistance": ron},
            "L1": {"kind": "inductor", "nodes": ["sw", "out"], "value": L, "initial": i0},
            "C1": {"kind": "capacitor", "nodes": ["out", "gnd"], "value": C, "initial": v0},
            "RL": {"kind": "resistor", "nodes": ["out", "gnd"], "value": R},
        },
        "outputs": {"v_out": {"voltage": "out"}, "i_L": {"current": "L1"}},
    }  # fmt: skip
    return SwitchedCircuit(parse_circuit(data))


def last_period(sc, until, Ts, gate):
    """Run to ``until - Ts`` coarsely, then the last period finely from that state."""
    coarse = simulate_switched(sc, until - Ts, 1e-6, {"Q1": gate})
    _, x = coarse.physical_states()
    return simulate_switched(sc, Ts, Ts / 200, {"Q1": gate}, x0=x[:, -1])


def periodic_average(result, name, t0, t1):
    t, y = result.time, result.output(name)
    keep = (t >= t0 - 1e-15) & (t <= t1 + 1e-15)
    return np.trapezoid(y[keep], t[keep]) / (t1 - t0)


def test_buck_ccm_average_output_and_ripple():
    # Erickson and Maksimovic, Fundamentals of Power Electronics, 2nd ed., ch. 2 (volt-second
    # balance; ripple) and ch. 3 (conduction drop): with both devices of on-resistance Ron,
    # <v_out> = (D Vin - (1 - D) Vf) R / (R + Ron) in periodic steady state.
    D, Vin, vf, L, C, R, Ts = 0.5, 12.0, 0.5, 22e-6, 10e-6, 5.0, 1e-5
    expected = (D * Vin - (1 - D) * vf) * R / (R + RON)
    sc = buck(L, C, R, vf=vf, i0=expected / R, v0=expected)
    r = last_period(sc, 3e-3, Ts, "pwm:100kHz,duty=0.5")
    mean = periodic_average(r, "v_out", 0.0, Ts)
    # 1e-5: the trapezoid rule on 100 samples of a smooth capacitor voltage, and the
    # settling of the LC transient (envelope below 1e-6 by 3 ms), not the model
    assert mean == pytest.approx(expected, rel=1e-5)
    ripple = np.ptp(r.output("i_L"))
    # peak-to-peak ripple (Vin - Vout) D Ts / L; 2 %: the formula takes straight ramps
    # (small-ripple approximation) and neglects the on-resistance drop
    assert ripple == pytest.approx((Vin - expected) * D * Ts / L, rel=2e-2)


def test_buck_dcm_conversion_ratio():
    # Erickson and Maksimovic, ch. 5: M = 2 / (1 + sqrt(1 + 4 K / D^2)), K = 2 L / (R Ts),
    # DCM when K < K_crit = 1 - D.
    D, L, C, R, Ts = 0.3, 2e-6, 100e-6, 10.0, 1e-5
    K = 2 * L / (R * Ts)
    assert K < 1 - D
    M = 2 / (1 + math.sqrt(1 + 4 * K / D**2))
    sc = buck(L, C, R, ron=1e-4, v0=12.0 * M)
    r = last_period(sc, 6e-3, Ts, "pwm:100kHz,duty=0.3")
    mean = periodic_average(r, "v_out", 0.0, Ts)
    # 2e-3: the ideal formula has lossless switches (here 0.1 mohm) and a ripple-free
    # output; the RC settling (1 ms) has decayed well below this by 6 ms
    assert mean / 12.0 == pytest.approx(M, rel=2e-3)
    assert any(e.part == "D1" and e.change == "on -> off" for e in r.events)


def test_ccm_boundary_is_one_minus_d():
    # ch. 5: at K slightly above 1 - D the inductor current never reaches zero (CCM),
    # slightly below it it does (the diode turns off before the switch turns on)
    D, R, Ts, C = 0.5, 10.0, 1e-5, 100e-6
    for factor, dcm in ((1.15, False), (0.85, True)):
        L = factor * (1 - D) * R * Ts / 2
        M = D if not dcm else 2 / (1 + math.sqrt(1 + 4 * (2 * L / (R * Ts)) / D**2))
        sc = buck(L, C, R, ron=1e-4, v0=12.0 * M, i0=12.0 * M / R)
        r = simulate_switched(sc, 2e-3, 1e-6, {"Q1": "pwm:100kHz,duty=0.5"})
        late = [e for e in r.events if e.time > 1.5e-3 and e.part == "D1"]
        phase = [(e.time / Ts) % 1 for e in late if e.change == "on -> off"]
        early_off = [p for p in phase if min(p, 1 - p) > 1e-6]  # not at the switch turn-on
        assert bool(early_off) == dcm


def _reference_buck(D, Vin, vf, L, C, R, Ts, until, x0, *, max_events=200):
    """The same piecewise-linear buck written by hand, integrated by Radau with events.

    Returns the state at every gate edge (a dict time -> [i_L, v_C]) and the times of the
    diode events located by solve_ivp. The diode mode is tracked explicitly: after a
    located event it flips, and each event fires only in the direction that leaves the
    present mode, so a restart exactly on the event cannot fire it again (a mode chosen
    from the sign of a margin of 1e-15 V did, in an endless loop of 1e-13 s restarts).
    """

    def v_sw(i, gq, diode_on):
        gd = 1 / RON if diode_on else 1 / ROFF
        v0 = vf * (1 - RON / ROFF) if diode_on else 0.0
        return (Vin * gq - gd * v0 - i) / (gq + gd)

    def rhs(t, x, gq, diode_on):
        i, v = x
        return [(v_sw(i, gq, diode_on) - v) / L, (i - v / R) / C]

    def jac(t, x, gq, diode_on):
        gd = 1 / RON if diode_on else 1 / ROFF
        return [[-1 / ((gq + gd) * L), -1 / L], [1 / C, -1 / (R * C)]]

    def margin(t, x, gq, diode_on):
        return -v_sw(x[0], gq, diode_on) - vf  # anode at ground, cathode at sw

    def leaving(diode_on):
        def event(t, x, gq, on):
            return margin(t, x, gq, on)

        event.terminal = True
        event.direction = -1 if diode_on else 1
        return event

    x, diode_on = np.array(x0, float), False
    states, located = {0.0: x.copy()}, []
    edges = sorted({k * Ts for k in range(int(until / Ts) + 1)} | {
        (k + D) * Ts for k in range(int(until / Ts))} | {until})  # fmt: skip
    for a, b in zip(edges, edges[1:], strict=False):
        gq = 1 / RON if (a / Ts) % 1 < D - 1e-9 else 1 / ROFF
        g = margin(a, x, gq, diode_on)
        if (diode_on and g < 0) or (not diode_on and g > 0):  # the gate edge moved it
            diode_on = not diode_on
        t = a
        while t < b:
            sol = solve_ivp(rhs, (t, b), x, method="Radau", rtol=1e-10, atol=1e-12, jac=jac,
                            args=(gq, diode_on), events=leaving(diode_on))  # fmt: skip
            x, t = sol.y[:, -1], sol.t[-1]
            if sol.status == 1:
                diode_on = not diode_on
                located.append(t)
                # bounded: a reference that chatters fails instead of running for ever
                assert len(located) <= max_events, "reference loop does not settle"
        states[b] = x.copy()
    return states, located


def test_whole_run_against_solve_ivp_with_events():
    # independent reference: the hand-written equations above, scipy Radau (rtol 1e-10)
    # restarted at every gate edge and diode event; 1e-6 of each state's peak (adaptive ODE
    # tolerance) at every gate edge, and the located diode events at the same times
    D, Vin, vf, L, C, R, Ts, until = 0.4, 12.0, 0.6, 10e-6, 4.7e-6, 8.0, 1e-5, 1e-4
    states, located = _reference_buck(D, Vin, vf, L, C, R, Ts, until, (0.0, 0.0))
    sc = buck(L, C, R, vf=vf)
    step = 1e-6
    r = simulate_switched(sc, until, step, {"Q1": "pwm:100kHz,duty=0.4"})
    ours = np.vstack([r.physical_state("i_L1"), r.physical_state("v_C1")])
    ref = np.array(list(states.values())).T
    index = [round(t / step) for t in states]
    scale = np.abs(ref).max(axis=1, keepdims=True)
    assert np.all(np.abs(ours[:, index] - ref) <= 1e-6 * scale)
    # the run is in discontinuous conduction: the diode turns off inside every off-time;
    # events at the gate edges (k Ts and (k + D) Ts) are not located by either side
    edges = np.array(sorted({k * Ts for k in range(11)} | {(k + D) * Ts for k in range(10)}))
    ours_located = [e.time for e in r.events
                    if e.part == "D1" and np.abs(edges - e.time).min() > 1e-9 * Ts]  # fmt: skip
    assert len(located) == len(ours_located) >= 5
    # event times: 1e-6 of a period (the solver's event location within rtol 1e-10 steps)
    assert np.allclose(ours_located, located, rtol=0, atol=1e-6 * Ts)
