"""Switched simulation speed against scipy's solve_ivp with events, in the same run.

The case: 2 ms of a 100 kHz diode buck (48 V to about 19 V, duty 0.4) with 10 nH of
commutation-loop inductance, 1 nF of switch capacitance and an RC snubber: every turn-off
rings at about 50 MHz. Output: every 1 us, and every 1 ns (20 samples per ring period)
for 300 ns after each switching event.

* ``switched_run``: :func:`wirestate.simulate.switched.simulate_switched` against
  ``solve_ivp`` (Radau, analytic Jacobian) on the same piecewise-linear equations (the
  engine's own mode matrices), restarted at every gate edge, with terminal events on the
  diode margin, its dense output evaluated at the same sample times. Equal accuracy:
  over one period at 1 ms (steady operation, both from the engine's state there), both
  are compared with a tight Radau run (rtol 1e-11), and the reference tolerance is the
  loosest of 1e-7 ... 1e-10 whose error (largest deviation over each state's range)
  reaches the engine's. The reference is timed on that period and scaled by 200 (a
  whole run at such tolerances takes hours); the engine on the whole 2 ms. Target
  ratio <= 1/30.
* ``switched_per_event``: the engine's overhead per switching event, ``(T_events -
  T_quiet) / N``: ``T_events`` is the run above (N events, S samples), ``T_quiet`` the
  same circuit over the same 2 ms with no event at all (the switch held on, so the diode
  never conducts) sampled on a uniform grid of the same S points. Sampling the exact
  solution costs the same per sample in both, so the difference is what the events cost:
  locating them, the mode changes, the stretches they cut the run into and the results
  assembled per stretch. The two runs are timed in interleaved pairs and the median of
  the pairs' differences is taken (wall clock; the CPU-time figure is in the details).
  Target 50 us. The whole run divided by N (which also carries the samples) is in the
  details as ``run_per_event_s``.
* ``switched_event_kernel``: the same overhead per event (CPU time) with the compiled
  event search (``simulate/event_kernel.c``, the default where a C compiler exists)
  and sampling against the pure-Python ones (``WIRESTATE_NO_NATIVE=1``), each against
  its own quiet run, all four timed in the same interleaved rounds. Without a compiler
  both take the Python path and the ratio is about 1.

Run as ``python benchmarks/bench_switched.py`` to print JSON.
"""

from __future__ import annotations

import json
import math
import os
import statistics
import sys
import time

import numpy as np
from scipy.integrate import solve_ivp

UNTIL, STEP = 2e-3, 1e-6
FINE_STEP, FINE_WINDOW = 1e-9, 300e-9
PERIOD, DUTY = 1e-5, 0.4
#: the accuracy reference's tolerance, and the candidates for "equal accuracy"
TIGHT = 1e-11
CANDIDATES = (1e-7, 1e-8, 1e-9, 1e-10)


def buck():
    from wirestate.spec import parse_circuit
    from wirestate.switching import SwitchedCircuit

    parts = {
        "Vin": {"kind": "voltage_source", "nodes": ["in", "gnd"], "value": 48.0},
        "Cin": {"kind": "capacitor", "nodes": ["in2", "gnd"], "value": 10e-6, "initial": 48.0},
        "Rin": {"kind": "resistor", "nodes": ["in", "in2"], "value": 0.02},
        "Lp": {"kind": "inductor", "nodes": ["in2", "d"], "value": 10e-9},
        "Q1": {"kind": "switch", "nodes": ["d", "sw"]},
        "Coss": {"kind": "capacitor", "nodes": ["d", "sw"], "value": 1e-9},
        "Rs": {"kind": "resistor", "nodes": ["d", "x"], "value": 6.8},
        "Cs": {"kind": "capacitor", "nodes": ["x", "sw"], "value": 0.47e-9},
        "D1": {"kind": "diode", "nodes": ["gnd", "sw"], "forward_voltage": 0.45},
        "L1": {"kind": "inductor", "nodes": ["sw", "out"], "value": 22e-6},
        "C1": {"kind": "capacitor", "nodes": ["out", "gnd"], "value": 47e-6},
        "RL": {"kind": "resistor", "nodes": ["out", "gnd"], "value": 4.0},
    }
    data = {"circuit": {"name": "bench_buck"}, "parts": parts,
            "outputs": {"v_out": {"voltage": "out"}, "v_Q1": {"voltage": ["d", "sw"]}}}  # fmt: skip
    return SwitchedCircuit(parse_circuit(data))


def ours(sc, until):
    from wirestate.simulate.switched import simulate_switched

    return simulate_switched(sc, until, STEP, {"Q1": f"pwm:100kHz,duty={DUTY}"},
                             fine_step=FINE_STEP, fine_window=FINE_WINDOW)  # fmt: skip


def python_path(function, *args):
    """``function(*args)`` with the pure-Python event search and sampling."""
    os.environ["WIRESTATE_NO_NATIVE"] = "1"
    try:
        return function(*args)
    finally:
        del os.environ["WIRESTATE_NO_NATIVE"]


def quiet(sc, samples):
    """The same circuit and horizon without events: the switch held on (the diode stays
    reverse-biased), sampled at ``samples`` evenly spaced times."""
    from wirestate.simulate.switched import simulate_switched

    return simulate_switched(sc, UNTIL, UNTIL / (samples - 1), {"Q1": 1.0})


def _timed(function, *args):
    wall, cpu = time.perf_counter(), time.process_time()
    value = function(*args)
    return value, time.perf_counter() - wall, time.process_time() - cpu


def reference(sc, start, until, x0, times, rtol):
    """solve_ivp on the engine's mode matrices from ``x0`` at ``start`` to ``until``:
    restarts at gate edges, terminal events on the diode margins."""
    diodes = [k for k, d in enumerate(sc.devices) if d.kind == "diode"]
    n_dev = len(sc.devices)
    vf = np.array([sc.devices[k].forward_voltage for k in diodes])
    u_on, u_off = np.array([48.0, 1.0]), np.array([48.0, 0.0])
    x = np.array(x0, float)
    on = [False] * n_dev
    out = np.zeros((len(x), len(times)))
    first, last = int(round(start / PERIOD)), int(round(until / PERIOD))
    edges = sorted({k * PERIOD for k in range(first, last + 1)}
                   | {(k + DUTY) * PERIOD for k in range(first, last)})  # fmt: skip
    events = 0
    for a, b in zip(edges, edges[1:], strict=False):
        gate = (a / PERIOD) % 1 < DUTY - 1e-9
        u = u_on if gate else u_off
        on[0] = gate
        on = _consistent(sc, on, x, u, diodes, vf)  # at the gate edge; a located event
        t = a  # below flips its diode and is not second-guessed (stiff rows' round-off)
        while t < b - 1e-15:
            mode = sc.mode(tuple(on))
            c = mode.B @ u + mode.f
            rows = mode.P[[n_dev + k for k in diodes]]
            q = mode.Q[[n_dev + k for k in diodes]] @ u + mode.p[[n_dev + k for k in diodes]] - vf
            leaving = [_event(rows[i], q[i], -1 if on[k] else 1) for i, k in enumerate(diodes)]
            sol = solve_ivp(lambda _t, y, A=mode.A, c=c: A @ y + c, (t, b), x, method="Radau",
                            rtol=rtol, atol=rtol * 1e-3, jac=lambda *_, A=mode.A: A,
                            events=leaving, dense_output=True)  # fmt: skip
            end = sol.t[-1]
            inside = (times >= t) & (times <= end)
            if inside.any():
                out[:, inside] = sol.sol(times[inside])
            x, t = sol.y[:, -1], end
            if sol.status == 1:
                hit = next(i for i, ev in enumerate(sol.t_events) if len(ev))
                on[diodes[hit]] = not on[diodes[hit]]
                events += 1
    return out, events


def _event(row, q, direction):
    def f(_t, y):
        return row @ y + q

    f.terminal = True
    f.direction = direction
    return f


def _consistent(sc, on, x, u, diodes, vf):
    n_dev = len(sc.devices)
    for _ in range(4):
        mode = sc.mode(tuple(on))
        v = mode.P[[n_dev + k for k in diodes]] @ x + mode.Q[[n_dev + k for k in diodes]] @ u
        v = v + mode.p[[n_dev + k for k in diodes]] - vf
        flips = [k for i, k in enumerate(diodes) if (v[i] > 1e-9) != on[k] and abs(v[i]) > 1e-9]
        if not flips:
            break
        on = list(on)
        on[flips[0]] = not on[flips[0]]
    return on


def _error(x, ref):
    scale = np.abs(ref).max(axis=1, keepdims=True)
    return float((np.abs(x - ref) / scale).max())


def run(repeats: int = 3, pairs: int = 5) -> list[dict]:
    sc = buck()
    ours(sc, 2e-5)  # mode compilation, imports and the kernel's build outside the timing
    python_path(ours, sc, 2e-5)
    result = ours(sc, UNTIL)
    samples = len(result.time)
    calm = quiet(sc, samples)  # its mode compiled outside the timing, and checked
    if calm.events or len(calm.time) != samples:
        raise RuntimeError("the run without events must have none and the same samples")
    run_times, run_cpu, quiet_times, quiet_cpu = [], [], [], []
    python_times, python_cpu, python_quiet_times, python_quiet_cpu = [], [], [], []
    for _ in range(max(repeats, pairs)):
        result, wall, cpu = _timed(ours, sc, UNTIL)
        run_times.append(wall)
        run_cpu.append(cpu)
        python_result, wall, cpu = _timed(python_path, ours, sc, UNTIL)
        python_times.append(wall)
        python_cpu.append(cpu)
        _, wall, cpu = _timed(python_path, quiet, sc, samples)
        python_quiet_times.append(wall)
        python_quiet_cpu.append(cpu)
        _, wall, cpu = _timed(quiet, sc, samples)
        quiet_times.append(wall)
        quiet_cpu.append(cpu)
    median = statistics.median(run_times)
    # accuracy over one period in steady operation (from the engine's state at 1 ms)
    start = 1e-3
    _, X = result.physical_states()
    k0 = int(np.argmin(np.abs(result.time - start)))
    window = (result.time >= start) & (result.time <= start + PERIOD * (1 + 1e-9))
    times, x0 = result.time[window], X[:, k0]
    truth, _ = reference(sc, start, start + PERIOD, x0, times, TIGHT)
    ours_error = _error(X[:, window], truth)
    chosen, chosen_error = CANDIDATES[-1], None
    for rtol in CANDIDATES:
        candidate, _ = reference(sc, start, start + PERIOD, x0, times, rtol)
        chosen, chosen_error = rtol, _error(candidate, truth)
        if chosen_error <= ours_error:
            break
    # the reference timed over that period and scaled to the whole run
    ref_times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        reference(sc, start, start + PERIOD, x0, times, chosen)
        ref_times.append((time.perf_counter() - t0) * UNTIL / PERIOD)
    ref_median = statistics.median(ref_times)
    events = len(result.events)
    ring = max(abs(complex(p).imag) for p in np.linalg.eigvals(sc.mode((False, True)).A)) / (
        2 * math.pi
    )
    ratio = median / ref_median
    overhead = statistics.median(a - b for a, b in zip(run_times, quiet_times, strict=True))
    overhead_cpu = statistics.median(a - b for a, b in zip(run_cpu, quiet_cpu, strict=True))
    per_event = overhead / events
    python_overhead_cpu = statistics.median(
        a - b for a, b in zip(python_cpu, python_quiet_cpu, strict=True)
    )
    python_overhead = statistics.median(
        a - b for a, b in zip(python_times, python_quiet_times, strict=True)
    )
    if len(python_result.events) != events:
        raise RuntimeError("the compiled and the Python event search found different events")
    details = {
        "events": events,
        "samples": len(result.time),
        "ring_frequency_hz": ring,
        "samples_per_ring_period": 1.0 / (ring * FINE_STEP),
        "engine_error_vs_tight_radau": ours_error,
        "tight_radau_rtol": TIGHT,
        "reference_rtol": chosen,
        "reference_error_vs_tight_radau": chosen_error,
        "reference_timed_on_s": PERIOD,
        "run_times_s": run_times,
        "reference_times_scaled_s": ref_times,
    }
    return [
        {
            "name": "switched_run",
            "median_s": median,
            "reference_median_s": ref_median,
            "ratio": ratio,
            "higher_is_better": False,
            "target": 1 / 30,
            "meets_target": ratio <= 1 / 30,
            "details": details,
        },
        {
            "name": "switched_per_event",
            "median_s": per_event,
            "reference_median_s": ref_median / max(1, events),
            "ratio": per_event / 50e-6,
            "higher_is_better": False,
            "target": 1.0,
            "meets_target": per_event <= 50e-6,
            "details": {
                "definition": "(run with N events - same horizon and sample count, no "
                "events) / N, median over interleaved pairs",
                "target_s": 50e-6,
                "events": events,
                "samples": samples,
                "run_s": median,
                "quiet_run_s": statistics.median(quiet_times),
                "run_times_s": run_times,
                "quiet_times_s": quiet_times,
                "overhead_per_event_cpu_s": overhead_cpu / events,
                "run_cpu_s": run_cpu,
                "quiet_cpu_s": quiet_cpu,
                "run_per_event_s": median / events,
                "python_path_overhead_per_event_s": python_overhead / events,
                "python_path_overhead_per_event_cpu_s": python_overhead_cpu / events,
            },
        },
        {
            "name": "switched_event_kernel",
            "median_s": overhead_cpu / events,
            "reference_median_s": python_overhead_cpu / events,
            "ratio": overhead_cpu / python_overhead_cpu,
            "higher_is_better": False,
            "target": 1.0,
            "meets_target": overhead_cpu < python_overhead_cpu,
            "details": {
                "definition": "overhead per event (as switched_per_event, CPU time) with the "
                "compiled event search over the same with the Python search "
                "(WIRESTATE_NO_NATIVE=1), interleaved in the same rounds",
                "compiled_search_loaded": _kernel_loaded(),
                "events": events,
                "run_cpu_s": run_cpu,
                "python_run_cpu_s": python_cpu,
                "quiet_cpu_s": quiet_cpu,
                "python_quiet_cpu_s": python_quiet_cpu,
                "python_run_times_s": python_times,
                "wall_overhead_per_event_s": per_event,
                "python_wall_overhead_per_event_s": python_overhead / events,
            },
        },
    ]


def _kernel_loaded() -> bool:
    from wirestate.simulate.switched import event_kernel

    return event_kernel() is not None


if __name__ == "__main__":
    json.dump(run(), sys.stdout, indent=2)
    print()
