"""Switched circuits against physics: turn-off ringing, snubber damping and loss, energy.

The exact energies over a mode sequence are computed here independently of the engine, in
50-digit arithmetic (mpmath, sympy's number library): in each mode ``dx/dt = A x + c``
has the solution ``x_ss + V e^{Lambda t} V^-1 (x0 - x_ss)`` (eigen-decomposition of A), so
every current and voltage is a constant plus a sum of exponentials, and the integral of a
product of two of them is a sum of closed-form terms ``(e^{(l_j + l_k) h} - 1) / (l_j +
l_k)``. scipy's expm is not used: on these stiff modes (10 Mohm off-state against 20 nH,
eigenvalues near -5e14 /s beside a 10 kHz filter) its scaling and squaring was off by
2.5e-7 relative over one on-time, measured against mpmath. Only the modes' matrices and
the event times come from wirestate.
"""

from __future__ import annotations

import math

import mpmath
import numpy as np
import pytest

from wirestate.simulate.pwm import parse_pwm
from wirestate.simulate.switched import simulate_switched
from wirestate.spec import parse_circuit
from wirestate.switching import SwitchedCircuit

VIN = 48.0
TS = 1e-5  # 100 kHz


def switched(parts: dict, outputs: dict, name: str = "dut") -> SwitchedCircuit:
    data = {"circuit": {"name": name}, "parts": parts, "outputs": outputs}
    return SwitchedCircuit(parse_circuit(data))


def commutation_loop(Lp, Cp, *, snubber=None, off_resistance=1e12):
    """A source, the loop inductance and a switch with its output capacitance."""
    parts = {
        "Vin": {"kind": "voltage_source", "nodes": ["in", "gnd"], "value": VIN},
        "Lp": {"kind": "inductor", "nodes": ["in", "d"], "value": Lp},
        "Q1": {"kind": "switch", "nodes": ["d", "gnd"], "off_resistance": off_resistance},
        "Cp": {"kind": "capacitor", "nodes": ["d", "gnd"], "value": Cp},
    }
    if snubber is not None:
        Rs, Cs = snubber
        parts["Rs"] = {"kind": "resistor", "nodes": ["d", "x"], "value": Rs}
        parts["Cs"] = {"kind": "capacitor", "nodes": ["x", "gnd"], "value": Cs}
    return switched(parts, {"v_Q": {"voltage": "d"}}, "loop")


def snubbed_buck(Rs=47.0, Cs=2.2e-9, R=5.0, Lp=20e-9, Cp=1e-9, vf=0.7, off=10e6):
    """A diode buck with the loop inductance, the switch capacitance and an RC snubber
    across the switch; outputs for every power in the circuit."""
    parts = {
        "Vin": {"kind": "voltage_source", "nodes": ["in", "gnd"], "value": VIN},
        "Lp": {"kind": "inductor", "nodes": ["in", "d"], "value": Lp},
        "Q1": {"kind": "switch", "nodes": ["d", "sw"], "off_resistance": off},
        "Cp": {"kind": "capacitor", "nodes": ["d", "sw"], "value": Cp},
        "Rs": {"kind": "resistor", "nodes": ["d", "x"], "value": Rs},
        "Cs": {"kind": "capacitor", "nodes": ["x", "sw"], "value": Cs},
        "D1": {
            "kind": "diode",
            "nodes": ["gnd", "sw"],
            "forward_voltage": vf,
            "off_resistance": off,
        },
        "Lo": {"kind": "inductor", "nodes": ["sw", "out"], "value": 22e-6},
        "Co": {"kind": "capacitor", "nodes": ["out", "gnd"], "value": 10e-6},
        "RL": {"kind": "resistor", "nodes": ["out", "gnd"], "value": R},
    }
    outputs = {
        "v_out": {"voltage": "out"},
        "i_Vin": {"current": "Vin"},
        "i_Rs": {"current": "Rs"},
        "i_RL": {"current": "RL"},
    }
    return switched(parts, outputs, "snubbed_buck")


# -- exact integrals over a mode sequence ----------------------------------------------------


def period_integrals(sc, modes, x0, t0, t1, inputs, products, digits=50):
    """Integrals over ``[t0, t1]`` of products of two affine rows, walking the mode
    sequence of a run from the state ``x0`` at ``t0`` (see the module docstring).

    ``products`` maps a name to ``rows(mode) -> (ra, rb)``, rows over ``z = [x; u; 1]``.
    Returns the integrals and the state at ``t1``.
    """
    totals = dict.fromkeys(products, 0.0)
    x = np.array(x0, float)
    with mpmath.workdps(digits):
        for interval in modes:
            a, b = max(interval.start, t0), min(interval.end, t1)
            if b > a:
                mode = sc.mode(interval.on)
                rows = {name: rows(mode) for name, rows in products.items()}
                found, x = _interval_integrals(mode, x, inputs(0.5 * (a + b)), b - a, rows)
                for name, value in found.items():
                    totals[name] += value
    return totals, x


def _interval_integrals(mode, x, u, h, rows):
    """One mode for ``h`` seconds: every product's integral and the end state."""
    n = len(x)
    A = mpmath.matrix(mode.A.tolist())
    steady = -mpmath.lu_solve(A, mpmath.matrix((mode.B @ u + mode.f).tolist()))
    lam, V = mpmath.eig(A)
    w0 = mpmath.inverse(V) * (mpmath.matrix(x.tolist()) - steady)
    h = mpmath.mpf(h)
    z_ss = [*steady, *(mpmath.mpf(v) for v in u), mpmath.mpf(1)]

    def split(row):  # constant part and the weight of each exponential
        row = [mpmath.mpf(float(v)) for v in row]
        constant = mpmath.fsum(r * v for r, v in zip(row, z_ss, strict=True))
        return constant, [mpmath.fsum(row[i] * V[i, k] * w0[k] for i in range(n))
                          for k in range(n)]  # fmt: skip

    def integral(rate):  # int_0^h e^{rate t} dt
        return h if rate == 0 else mpmath.expm1(rate * h) / rate

    found = {}
    for name, (ra, rb) in rows.items():
        (ca, wa), (cb, wb) = split(ra), split(rb)
        total = ca * cb * h
        total += mpmath.fsum((ca * wb[k] + cb * wa[k]) * integral(lam[k]) for k in range(n))
        total += mpmath.fsum(wa[j] * wb[k] * integral(lam[j] + lam[k])
                             for j in range(n) for k in range(n))  # fmt: skip
        found[name] = float(mpmath.re(total))
    end = steady + V * mpmath.matrix([mpmath.exp(lam[k] * h) * w0[k] for k in range(n)])
    return found, np.array([float(mpmath.re(v)) for v in end])


def output_row(sc, mode, name):
    j = sc.outputs.index(name)
    return np.concatenate([mode.C[j], mode.D[j], [mode.g[j]]])


def device_rows(sc, mode, part):
    k = [d.name for d in sc.devices].index(part)
    n = len(sc.devices)
    current = np.concatenate([mode.P[k], mode.Q[k], [mode.p[k]]])
    voltage = np.concatenate([mode.P[n + k], mode.Q[n + k], [mode.p[n + k]]])
    return current, voltage


def steady_period(sc, gate_text, periods=200):
    """A coarse run of ``periods`` switching periods; the state and mode sequence of its
    last period."""
    gate = parse_pwm(gate_text.removeprefix("pwm:"))
    until = periods * TS
    r = simulate_switched(sc, until, TS / 10, {"Q1": gate})
    _, X = r.physical_states()
    k = int(np.argmin(np.abs(r.time - (until - TS))))
    return r, gate, r.time[k], X[:, k], X[:, -1]


# -- ringing after turn-off --------------------------------------------------------------------


def test_undamped_lc_step_peaks_at_twice_the_step():
    # textbook LC step response (series LC from rest, a step V): v_C = V (1 - cos w0 t),
    # peak 2 V at t = pi / w0, w0 = 1 / sqrt(L C). The switch stays off (1e12 ohm, damping
    # ratio sqrt(L/C) / (2 Roff) ~ 4e-12), so the sample at half a period is the peak.
    Lp, Cp = 50e-9, 1e-9
    T0 = 2 * math.pi * math.sqrt(Lp * Cp)
    r = simulate_switched(commutation_loop(Lp, Cp), 3 * T0, T0 / 200, {"Q1": 0.0})
    v = r.output("v_Q")
    # 1e-9: matrix-exponential accuracy over 600 steps of a lossless oscillator
    assert v[100] == pytest.approx(2 * VIN, rel=1e-9)
    assert v.max() == pytest.approx(2 * VIN, rel=1e-9)
    expected = VIN * (1 - np.cos(r.time / math.sqrt(Lp * Cp)))
    assert np.abs(v - expected).max() <= 1e-9 * 2 * VIN


def test_turn_off_ring_at_the_loop_resonance():
    # after the switch opens with current I0 in Lp and v0 on Cp, the loop is a series LC
    # driven by Vin (textbook initial-value solution): v = Vin - (Vin - v0) cos w0 t
    # + I0 Z0 sin w0 t, w0 = 1/sqrt(Lp Cp), Z0 = sqrt(Lp/Cp); the ring is at
    # f = 1 / (2 pi sqrt(Lp Cp)) and peaks at Vin + sqrt((Vin - v0)^2 + (I0 Z0)^2)
    Lp, Cp, t_off = 50e-9, 1e-9, 100e-9
    loop = commutation_loop(Lp, Cp)
    gate = f"step:0,at={t_off * 1e9:g}ns,from=1"
    before = simulate_switched(loop, t_off, t_off / 100, {"Q1": gate})
    I0, v0 = before.physical_state("i_Lp")[-1], before.physical_state("v_Cp")[-1]
    # the on-time: an RL step, i = Vin / Ron (1 - e^{-t Ron / Lp}) (textbook); 1e-3 for
    # the current Cp takes while its voltage follows i Ron
    ron = 10e-3
    assert I0 == pytest.approx(VIN / ron * -math.expm1(-t_off * ron / Lp), rel=1e-3)
    w0, Z0 = 1 / math.sqrt(Lp * Cp), math.sqrt(Lp / Cp)
    T0 = 2 * math.pi / w0
    until = t_off + 4 * T0
    r = simulate_switched(loop, until, until / 300, {"Q1": gate},
                          fine_step=T0 / 64, fine_window=4 * T0)  # fmt: skip
    after = r.time > t_off * (1 + 1e-12)
    tau = r.time[after] - t_off
    expected = VIN - (VIN - v0) * np.cos(w0 * tau) + I0 * Z0 * np.sin(w0 * tau)
    peak = VIN + math.hypot(VIN - v0, I0 * Z0)
    # 1e-9 of the peak: matrix exponential (the off state is lossless to 4e-12)
    assert np.abs(r.output("v_Q")[after] - expected).max() <= 1e-9 * peak
    assert [e.time for e in r.events] == [pytest.approx(t_off, abs=1e-18)]


def test_snubber_damps_the_ring_as_the_linear_closed_form():
    # with Rs-Cs across the switch, the open loop has the characteristic polynomial
    #   s^3 Lp Cp Rs Cs + s^2 Lp (Cp + Cs) + s Rs Cs + 1
    # (from sLp + 1 / (s Cp + s Cs / (1 + s Rs Cs)) = 0, derived by hand from the loop
    # impedance). Its roots, by numpy.roots, are the only exponents the ring may contain:
    # a least-squares fit of Vin + e^{sigma t} (a cos wd t + b sin wd t) + c e^{p t} to the
    # simulated ring must leave nothing but round-off.
    Lp, Cp, Rs, Cs, t_off = 50e-9, 1e-9, 4.7, 3.3e-9, 100e-9
    loop = commutation_loop(Lp, Cp, snubber=(Rs, Cs))
    roots = np.roots([Lp * Cp * Rs * Cs, Lp * (Cp + Cs), Rs * Cs, 1.0])
    pair = roots[np.argmax(roots.imag)]
    real = roots[np.argmin(np.abs(roots.imag))].real
    sigma, wd = pair.real, pair.imag
    zeta = -sigma / abs(pair)
    assert 0.1 < zeta < 0.7  # a damped ring, not an overdamped edge (the case is useful)
    T = 2 * math.pi / wd
    gate = f"step:0,at={t_off * 1e9:g}ns,from=1"
    until = t_off + 6 * T
    r = simulate_switched(loop, until, until / 300, {"Q1": gate},
                          fine_step=T / 50, fine_window=6 * T)  # fmt: skip
    after = r.time > t_off * (1 + 1e-12)
    tau = r.time[after] - t_off
    ring = r.output("v_Q")[after] - VIN
    envelope = np.exp(sigma * tau)
    basis = np.column_stack(
        [envelope * np.cos(wd * tau), envelope * np.sin(wd * tau), np.exp(real * tau)]
    )
    coefficients, *_ = np.linalg.lstsq(basis, ring, rcond=None)
    residual = ring - basis @ coefficients
    # 1e-9 of the swing: the matrix exponential of the run, and the 1e12 ohm off state
    # (it moves the roots by ~1e-12 relative)
    assert np.abs(residual).max() <= 1e-9 * np.abs(ring).max()
    # and the ring is a real part of the waveform, not a rounding of the real mode
    assert math.hypot(*coefficients[:2]) > 0.1 * np.abs(ring).max()


# -- snubber loss and energy balance ---------------------------------------------------------


def _snubber_loss(Rs, Cs, R):
    sc = snubbed_buck(Rs=Rs, Cs=Cs, R=R)
    r, gate, t0, x0, _ = steady_period(sc, "pwm:100kHz,duty=0.25")

    def inputs(t):
        return np.array([VIN, gate.value_at(t)])

    def resistor(mode):
        row = output_row(sc, mode, "i_Rs")
        return Rs * row, row

    totals, _ = period_integrals(sc, r.modes, x0, t0, t0 + TS, inputs, {"Rs": resistor})
    load_current = float(np.mean(r.output("i_RL")[-10:]))
    return totals["Rs"] / TS, load_current


def test_snubber_loss_is_cs_v_squared_f_when_the_edge_is_a_voltage_step():
    # common practice, no source: an RC turn-off snubber dissipates about Cs V^2 f_sw (half
    # Cs V^2 charging at turn-off, half discharging at turn-on). Conditions, found with
    # this circuit: (1) Rs Cs (100 ns) well below the on and off times (2.5 / 7.5 us), so
    # the capacitor charges and discharges completely; (2) load current x Rs above the
    # swing V = Vin + Vf, so at turn-off the switch node steps at once and Cs charges
    # from a voltage step through Rs; (3) the loop energy Lp I^2 / 2 small beside
    # Cs V^2 / 2 (here 2 %), since it ends in the snubber too.
    Rs, Cs, R = 47.0, 2.2e-9, 5.0
    V = VIN + 0.7
    loss, current = _snubber_loss(Rs, Cs, R)
    assert current * Rs > V and 5 * Rs * Cs < 0.25 * TS
    # 5 %: the stated conditions hold to a few percent (loop energy, the 10 mohm switch)
    assert loss == pytest.approx(Cs * V**2 / TS, rel=5e-2)


def test_snubber_loss_falls_short_when_the_load_current_charges_the_capacitor():
    # condition (2) broken: with load current x Rs at a fifth of the swing, the load current
    # charges Cs nearly linearly at turn-off (resistor energy I Rs Cs V instead of
    # Cs V^2 / 2), so the rule of thumb overstates the loss; measured 0.77 Cs V^2 f
    Rs, Cs, R = 4.7, 2.2e-9, 5.0
    V = VIN + 0.7
    loss, current = _snubber_loss(Rs, Cs, R)
    assert current * Rs < 0.25 * V
    assert loss < 0.85 * Cs * V**2 / TS
    # the turn-on half stays Cs V^2 / 2 and the turn-off half is at least I Rs Cs V
    # (the charging current is at least the load current while the node slews)
    assert loss > (0.5 * Cs * V**2 + current * Rs * Cs * V) / TS * 0.9


def test_energy_balance_over_a_period_in_steady_state():
    # conservation of energy (Tellegen's theorem): over any interval, the energy the
    # source delivers equals the energy dissipated in every resistor, switch and diode
    # plus the change of the energy stored in the inductors and capacitors. Checked over
    # the last period of a 2 ms run (near periodic steady state; the storage term is kept
    # so the balance is exact whatever is left of the start-up).
    # Off resistances of 1 Mohm, not the 10 Mohm default: an off device in series with
    # 20 nH makes an eigenvalue of -Roff/Lp, and the round-off of the compiled matrices
    # (1e-16 of entries near Roff/Lp) alone moves the balance by about 1e-10 * Roff / 1 Mohm
    # (measured 9e-10 at 10 Mohm, 1.1e-10 at 1 Mohm, 1.3e-11 at 100 kohm).
    Rs, Cs, R = 47.0, 2.2e-9, 5.0
    sc = snubbed_buck(Rs=Rs, Cs=Cs, R=R, off=1e6)
    r, gate, t0, x0, x_end = steady_period(sc, "pwm:100kHz,duty=0.25")

    def inputs(t):
        return np.array([VIN, gate.value_at(t)])

    def source(mode):
        return -VIN * output_row(sc, mode, "i_Vin"), np.eye(1, len(x0) + 3, len(x0) + 2)[0]

    products = {
        "source": source,
        "Rs": lambda mode: (Rs * output_row(sc, mode, "i_Rs"), output_row(sc, mode, "i_Rs")),
        "RL": lambda mode: (R * output_row(sc, mode, "i_RL"), output_row(sc, mode, "i_RL")),
        "Q1": lambda mode: device_rows(sc, mode, "Q1"),
        "D1": lambda mode: device_rows(sc, mode, "D1"),
    }
    totals, x1 = period_integrals(sc, r.modes, x0, t0, t0 + TS, inputs, products)
    # the engine's end state and the independent walk over its mode sequence agree to
    # 1e-9 of each state's range over the period (exponentials of stiff modes)
    _, X = r.physical_states()
    scale = np.abs(X[:, r.time >= t0 - 1e-15]).max(axis=1)
    assert np.all(np.abs(x1 - x_end) <= 1e-9 * scale)
    names = [s for s in sc.states]
    values = {"Lp": 20e-9, "Cp": 1e-9, "Cs": Cs, "Lo": 22e-6, "Co": 10e-6}

    def stored(x):
        return sum(0.5 * values[n[2:]] * x[k] ** 2 for k, n in enumerate(names))

    dissipated = totals["Rs"] + totals["RL"] + totals["Q1"] + totals["D1"]
    balance = totals["source"] - dissipated - (stored(x1) - stored(x0))
    # 1e-9 relative (issue 12's bound): exact integrals, the engine's states to ~1e-11
    assert abs(balance) <= 1e-9 * totals["source"]
    # and every term is real: the snubber and the devices take a visible share
    assert totals["Rs"] > 1e-3 * totals["source"] and totals["D1"] > 1e-3 * totals["source"]
