"""Simulation speed against references measured in the same run.

* ``stepper_step``: ``Stepper.step`` per call against a bare numpy loop on the same block
  (the bundled bus filter) that computes what ``step`` returns: ``x = Ad @ x + Bd @ u`` and
  the outputs ``y = C @ x + D @ u``; target ratio <= 1.2.
* ``batch_lti``: ``simulate_linear`` (first-order hold) against ``control.forced_response``
  (which also uses a first-order hold) on the bus filter driven by a sine, both checked
  against scipy's DOP853 at rtol 1e-12; target ratio <= 0.1 (>= 10x faster) with errors
  within 1 % of each other.
* ``nonlinear_loop``: a continuous speed loop (tachometer filter + DC motor + PI with
  output limits and back-calculation) run by wirestate's CasADi/CVODES engine against
  ``control.input_output_response``; both checked against scipy's DOP853 at rtol 1e-10,
  the reference solver's tolerance picked as the loosest that reaches wirestate's error;
  target ratio <= 0.05 (>= 20x faster).

* ``sampled_system``: ``simulate`` of ``models/systems/battery_drive.toml`` (DC-bus filter,
  armature, drive train, tachometer and a sampled PI with limits, back-calculation and a
  computation delay; 0.2 s at 20 us) against a hand-written numpy loop of the same system
  (``_battery_drive_loop``: its own python-control interconnection and ZOH, one step per
  output step, the PI written out); both warm (the system loaded and run once before),
  outputs checked equal to 1e-9; target ratio <= 1.2.

``ratio`` is ``median_s / reference_median_s`` (lower is better). Every benchmark times
wirestate and its reference the same number of times, interleaved, so load changes hit
both alike. Run as
``python benchmarks/bench_simulate.py`` to print JSON.
"""

from __future__ import annotations

import json
import statistics
import sys
import time
import warnings
from pathlib import Path

import control
import numpy as np
from scipy.integrate import solve_ivp

ROOT = Path(__file__).resolve().parents[1]


def _median_time(fn, repeats: int) -> float:
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return statistics.median(times)


def _interleaved(ours, reference, repeats: int) -> tuple[float, float]:
    """Medians of ``repeats`` timings of each, taken alternately so that load changes on a
    shared machine hit both alike; both have run once before (warm)."""
    ours_t, ref_t = [], []
    for _ in range(repeats):
        ours_t.append(_median_time(ours, 1))
        ref_t.append(_median_time(reference, 1))
    return statistics.median(ours_t), statistics.median(ref_t)


def _bus_filter():
    from wirestate.reduce import load_block

    return load_block(ROOT / "models" / "drive_bus_filter.toml")


def bench_stepper(calls: int = 20_000, repeats: int = 9) -> dict:
    from wirestate.simulate import Stepper, zoh

    block = _bus_filter()
    dt = 1e-6
    Ad, Bd = zoh(block.A, block.B, dt)
    u = np.array([48.0, 2.0])
    stepper = Stepper(block, dt)

    C, D = block.C, block.D

    def bare():
        x = np.zeros(block.n_states)
        for _ in range(calls):
            x = Ad @ x + Bd @ u
            _ = C @ x + D @ u  # the outputs, as Stepper.step returns them

    def ours():
        step = stepper.step
        for _ in range(calls):
            step(u)

    ours(), bare()  # warm
    median, reference = _interleaved(ours, bare, repeats)
    ratio = median / reference
    return {
        "name": "stepper_step",
        "median_s": median / calls,
        "reference_median_s": reference / calls,
        "ratio": ratio,
        "target": 1.2,
        "meets_target": ratio <= 1.2,
        "higher_is_better": False,
        "details": {
            "block": block.name,
            "states": block.n_states,
            "calls": calls,
            "note": "per call, warm; both compute the outputs y = C x + D u",
            "repeats_each": repeats,
        },
    }


def bench_batch(steps: int = 100_000, repeats: int = 5) -> dict:
    from wirestate.simulate import simulate_linear
    from wirestate.simulate.inputs import Sine

    block = _bus_filter()
    dt = 1e-6
    until = steps * dt
    wave = Sine(5.0, 3e3, offset=48.0)
    sys = block.state_space()
    t = np.arange(steps + 1) * dt
    U = np.vstack([wave.values(t), np.zeros_like(t)])

    def ours():
        return simulate_linear(block, until, dt, {"Vbat": wave, "Iinv": 0.0}, hold="foh")

    def reference():
        return control.forced_response(sys, t, U)

    mine = ours()
    theirs = reference()
    A, B = block.A, block.B
    exact = solve_ivp(
        lambda tt, x: A @ x + B[:, 0] * wave.values(np.array(tt)),
        (0, until), np.zeros(block.n_states), t_eval=t, method="DOP853",
        rtol=1e-12, atol=1e-12, max_step=2e-5,
    )  # fmt: skip
    Y_exact = block.C @ exact.y + block.D @ U
    scale = np.max(np.abs(Y_exact))
    err_ours = float(np.max(np.abs(mine.outputs - Y_exact)) / scale)
    err_ref = float(np.max(np.abs(np.asarray(theirs.outputs) - Y_exact)) / scale)
    median, ref = _interleaved(ours, reference, repeats)  # warm: both ran above
    ratio = median / ref
    equal = err_ours <= 1.01 * err_ref + 1e-12
    return {
        "name": "batch_lti",
        "median_s": median,
        "reference_median_s": ref,
        "ratio": ratio,
        "target": 0.1,
        "meets_target": ratio <= 0.1 and equal,
        "higher_is_better": False,
        "details": {
            "steps": steps,
            "speedup": 1 / ratio,
            "repeats_each": repeats,
            "warm": "both (the discretisation cached by wirestate after its first run)",
            "max_rel_error_wirestate": err_ours,
            "max_rel_error_forced_response": err_ref,
            "reference_solution": "scipy DOP853 rtol 1e-12",
        },
    }


# continuous speed loop: textbook DC motor (J=0.01, b=0.1, K=0.01, R=1, L=0.5, from memory),
# tachometer filter 20 ms, PI kp=60 ki=150 limited to +-8 V with back-calculation Tt = kp/ki
J, b, K, R, L = 0.01, 0.1, 0.01, 1.0, 0.5
TAU, KP, KI, LIM = 0.02, 60.0, 150.0, 8.0


def _loop_system():
    from wirestate.blocks import PIDController, rotary_inertia, sensor_filter
    from wirestate.compose import compose
    from wirestate.lti import CircuitBlock

    armature = CircuitBlock(
        "armature", [[-R / L]], [[1 / L, -K / L]], [[K]], [[0.0, 0.0]],
        ["i_La"], ["Va", "M1"], ["torque_M1"],
    )  # fmt: skip
    return compose(
        [armature, rotary_inertia("rotor", J, b), sensor_filter("tacho", TAU),
         PIDController("pi", kp=KP, ki=KI, output_limits=(-LIM, LIM))],
        {"rotor.torque": "armature.torque_M1", "armature.M1": "rotor.speed",
         "tacho.signal": "rotor.speed", "pi.measurement": "tacho.measured",
         "armature.Va": "pi.command"},
        {"ref": "pi.reference", "TL": "rotor.load_torque"},
        {"speed": "rotor.speed"},
        name="speed_loop",
    )  # fmt: skip


def _loop_rhs(t, z):
    i, w, _angle, f, integral = z
    e = 1.0 - f
    v = KP * e + integral
    u = min(max(v, -LIM), LIM)
    return [(u - R * i - K * w) / L, (K * i - b * w) / J, w, (w - f) / TAU,
            KI * e + (u - v) / (KP / KI)]  # fmt: skip


def _python_control_loop():
    motor = control.ss(
        [[-R / L, -K / L], [K / J, -b / J]], [[1 / L], [0]], [[0, 1]], [[0]],
        name="motor", inputs=["Va"], outputs=["w"], states=["i", "w"],
    )  # fmt: skip
    tacho = control.ss([[-1 / TAU]], [[1 / TAU]], [[1]], [[0]], name="tacho",
                       inputs=["w"], outputs=["f"])  # fmt: skip

    def update(t, x, u, params):
        e = u[0] - u[1]
        v = KP * e + x[0]
        sat = min(max(v, -LIM), LIM)
        return [KI * e + (sat - v) / (KP / KI)]

    def output(t, x, u, params):
        v = KP * (u[0] - u[1]) + x[0]
        return [min(max(v, -LIM), LIM)]

    pi = control.nlsys(update, output, name="pi", inputs=["r", "f"], outputs=["Va"],
                       states=["I"])  # fmt: skip
    return control.interconnect(
        [motor, tacho, pi],
        connections=[["motor.Va", "pi.Va"], ["tacho.w", "motor.w"], ["pi.f", "tacho.f"]],
        inplist=["pi.r"], outlist=["motor.w"], inputs=["r"], outputs=["w"],
    )  # fmt: skip


def bench_nonlinear(repeats: int = 5) -> dict:
    from wirestate.simulate import simulate

    until, dt = 2.0, 1e-3
    t = np.arange(round(until / dt) + 1) * dt
    exact = solve_ivp(_loop_rhs, (0, until), np.zeros(5), t_eval=t, method="DOP853",
                      rtol=1e-10, atol=1e-12)  # fmt: skip
    w_exact = exact.y[1]
    scale = np.max(np.abs(w_exact))
    system = _loop_system()
    rtol = 1e-8

    def ours():
        return simulate(system, until, dt, {"ref": 1.0}, rtol=rtol, atol=1e-10)

    t0 = time.perf_counter()
    first = ours()  # includes building the CasADi right-hand side and integrator
    first_run = time.perf_counter() - t0
    err_ours = float(np.max(np.abs(first.output("speed") - w_exact)) / scale)
    loop = _python_control_loop()
    chosen, err_ref = None, None
    for ref_rtol in (1e-5, 1e-6, 1e-7, 1e-8, 1e-9, 1e-10):
        resp = control.input_output_response(
            loop, t, np.ones_like(t),
            solve_ivp_kwargs={"rtol": ref_rtol, "atol": ref_rtol * 1e-2},
        )  # fmt: skip
        err = float(np.max(np.abs(np.asarray(resp.outputs).ravel() - w_exact)) / scale)
        chosen, err_ref = ref_rtol, err
        if err <= err_ours:
            break

    def reference():
        control.input_output_response(
            loop, t, np.ones_like(t), solve_ivp_kwargs={"rtol": chosen, "atol": chosen * 1e-2}
        )

    reference()  # warm
    median, ref = _interleaved(ours, reference, repeats)
    ratio = median / ref
    return {
        "name": "nonlinear_loop",
        "median_s": median,
        "reference_median_s": ref,
        "ratio": ratio,
        "target": 0.05,
        "meets_target": ratio <= 0.05 and err_ref <= max(err_ours, 1e-12) * 1.5 + 1e-9,
        "higher_is_better": False,
        "details": {
            "speedup": 1 / ratio,
            "first_run_s": first_run,
            "first_run_speedup": ref / first_run,
            "note": "median_s is warm (repeated runs reuse the compiled right-hand side); "
            "first_run_s is cold",
            "repeats_each": repeats,
            "wirestate": f"CasADi CVODES rtol {rtol:g}",
            "reference": f"input_output_response RK45 rtol {chosen:g}",
            "max_rel_error_wirestate": err_ours,
            "max_rel_error_reference": err_ref,
            "reference_solution": "scipy DOP853 rtol 1e-10",
        },
    }


def _battery_drive_loop(cs, until: float, dt: float, speed_ref: float):
    """The battery drive stepped by hand: continuous blocks joined by python-control's
    ``interconnect``, exact ZOH by scipy's ``expm`` (Van Loan 1978), and the sampled PI
    (back-calculation, one-sample delay) written out as in its documentation."""
    from scipy.linalg import expm

    blocks = [cs.blocks[name].system for name in ("bus", "armature", "bridge_draw")]
    blocks += [cs.blocks[name].system for name in ("drivetrain", "tacho")]
    with warnings.catch_warnings():  # the outputs the loop does not read
        warnings.filterwarnings("ignore", "Unused output", UserWarning)
        plant = control.interconnect(
            blocks,
            connections=[["armature.w_shaft", "drivetrain.drive_speed"],
                         ["drivetrain.torque", "armature.T_motor"],
                         ["tacho.signal", "drivetrain.drive_speed"],
                         ["bridge_draw.input", "armature.i_arm"],
                         ["bus.Iinv", "bridge_draw.output"]],
            inplist=["bus.Vbat", "drivetrain.load_torque", "armature.Va"],
            outlist=["tacho.measured", "drivetrain.load_speed", "drivetrain.drive_speed",
                     "bus.v_bus", "armature.i_arm"],
        )  # fmt: skip
    A, B, C, D = (np.asarray(M, dtype=float) for M in (plant.A, plant.B, plant.C, plant.D))
    n, m = B.shape
    E = expm(np.block([[A, B], [np.zeros((m, n + m))]]) * dt)
    Ad, Bd = E[:n, :n], E[:n, n:]
    pi = cs.blocks["speed_loop"].source
    kp, ki, Ts, (low, high) = pi.kp, pi.ki, pi.sample_time, pi.output_limits
    Tt, per = kp / ki, round(pi.sample_time / dt)

    def loop():
        steps = round(until / dt)
        X = np.empty((n, steps + 1))
        U = np.empty((m, steps + 1))
        x = np.zeros(n)
        u = np.array([48.0, 0.0, 0.0])  # Vbat, load torque, held command
        integral = delayed = 0.0
        for k in range(steps + 1):
            if k % per == 0:
                e = speed_ref - (C[0] @ x + D[0] @ u)
                v = kp * e + integral
                command = min(max(v, low), high)
                integral += ki * Ts * e + Ts / Tt * (command - v)
                u[2], delayed = delayed, command
            X[:, k] = x
            U[:, k] = u
            x = Ad @ x + Bd @ u
        return C @ X + D @ U

    return loop


def bench_sampled_system(until: float = 0.2, dt: float = 20e-6, repeats: int = 9) -> dict:
    from wirestate.compose import load_system
    from wirestate.simulate import simulate

    cs = load_system(ROOT / "models" / "systems" / "battery_drive.toml")
    inputs = {"Vbat": 48.0, "speed_ref": "step:150rad/s", "load_torque": 0.0}

    def ours():
        return simulate(cs, until, dt, inputs)

    reference = _battery_drive_loop(cs, until, dt, 150.0)
    mine, theirs = ours(), reference()  # warm-up runs: figures below are warm
    rows = [mine.outputs[mine.output_names.index(name)] for name in ("speed", "v_bus", "i_arm")]
    want = theirs[[1, 3, 4]]
    scale = np.abs(want).max(axis=1, keepdims=True)
    error = float(np.max(np.abs(np.array(rows) - want) / scale))
    ours_t, ref_t = [], []
    for _ in range(repeats):  # interleaved so load changes hit both alike
        ours_t.append(_median_time(ours, 1))
        ref_t.append(_median_time(reference, 1))
    median, ref = statistics.median(ours_t), statistics.median(ref_t)
    ratio = median / ref
    return {
        "name": "sampled_system",
        "median_s": median,
        "reference_median_s": ref,
        "ratio": ratio,
        "target": 1.2,
        "meets_target": ratio <= 1.2 and error <= 1e-9,
        "higher_is_better": False,
        "details": {
            "system": "models/systems/battery_drive.toml",
            "horizon_s": until,
            "step_s": dt,
            "repeats_each": repeats,
            "warm": "both: the system loaded, its linear part and ZOH built in a first run",
            "reference": "hand-written numpy loop: python-control interconnect, scipy expm, "
            "PI written out",
            "max_rel_output_difference": error,
        },
    }


def run() -> list[dict]:
    """All simulation benchmarks (about half a minute)."""
    return [bench_stepper(), bench_batch(), bench_nonlinear(), bench_sampled_system()]


if __name__ == "__main__":
    sys.path.insert(0, str(ROOT / "src"))
    print(json.dumps(run(), indent=2))
