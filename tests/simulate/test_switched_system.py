"""Systems with switched circuits: modulator, sampled loop, synchronised sampling, errors."""

from __future__ import annotations

import numpy as np
import pytest

from tests.conftest import MODELS
from wirestate.blocks import Modulator, PIDController
from wirestate.compose import load_system
from wirestate.errors import WirestateError
from wirestate.simulate import simulate
from wirestate.simulate.pwm import parse_pwm
from wirestate.simulate.switched import simulate_switched
from wirestate.simulate.switched_system import simulate_switched_system
from wirestate.spec import parse_circuit
from wirestate.switching import SwitchedCircuit

BUCK = """
[circuit]
name = "buck"
[parts.Vin]
kind = "voltage_source"
nodes = ["in", "gnd"]
value = "24V"
[parts.Q1]
kind = "switch"
nodes = ["in", "sw"]
gate = "g"
[parts.D1]
kind = "diode"
nodes = ["gnd", "sw"]
forward_voltage = "0.5V"
[parts.L1]
kind = "inductor"
nodes = ["sw", "out"]
value = "22uH"
[parts.C1]
kind = "capacitor"
nodes = ["out", "gnd"]
value = "47uF"
[parts.RL]
kind = "resistor"
nodes = ["out", "gnd"]
value = "5ohm"
[outputs.v_out]
voltage = "out"
[outputs.i_L]
current = "L1"
"""

LOOP = """
[system]
name = "buck_loop"
[blocks.stage]
kind = "circuit"
file = "buck.toml"
[blocks.pwm]
kind = "modulator"
frequency = "100kHz"
[blocks.vloop]
kind = "pi"
kp = 0.02
ki = 300.0
sample_time = "10us"
output_limits = [0.0, 0.9]
delay = true
[wiring]
"stage.g" = "pwm.gate"
"pwm.duty" = "vloop.command"
"vloop.measurement" = "stage.v_out"
[inputs]
v_ref = "vloop.reference"
Vbat = "stage.Vin"
[outputs]
v_out = "stage.v_out"
duty = "vloop.command"
gate = "pwm.gate"
"""


@pytest.fixture
def loop_file(tmp_path):
    (tmp_path / "buck.toml").write_text(BUCK)
    path = tmp_path / "loop.toml"
    path.write_text(LOOP)
    return path


def test_a_system_without_switching_runs_as_in_the_hybrid_engine():
    # the same sampled system through both engines: sampling order, holds and the exact
    # plant between samples agree to round-off (1e-9 of the largest output)
    system = load_system(MODELS / "systems" / "battery_drive.toml")
    inputs = {"speed_ref": "step:100,at=1ms"}
    hybrid = simulate(system, 0.02, 20e-6, inputs)
    ours = simulate_switched_system(system, 0.02, 20e-6, inputs)
    scale = np.abs(hybrid.outputs).max()
    assert np.abs(ours.outputs - hybrid.outputs).max() <= 1e-9 * scale
    assert np.abs(ours.states - hybrid.states).max() <= 1e-9 * np.abs(hybrid.states).max()


def test_closed_loop_against_a_period_by_period_reference(loop_file):
    # reference written here: at every carrier start the PI (the block's own sample
    # function) reads v_out, its delayed command becomes the duty of one period of the
    # pwm waveform, and the switched circuit runs one period from the state reached
    # (simulate_switched, itself checked against solve_ivp); the system engine must give
    # the same commands and states (1e-9 of each state's range: event location and modal
    # stepping, no model difference)
    T, periods, ref = 1e-5, 60, 12.0
    system = load_system(loop_file)
    result = simulate(system, periods * T, 1e-6, {"v_ref": ref})
    sc = SwitchedCircuit(parse_circuit(__import__("tomllib").loads(BUCK)))
    pi = PIDController(
        "vloop", kp=0.02, ki=300.0, sample_time=T, output_limits=(0.0, 0.9), delay=True
    )
    xc, x = pi.initial_state(), sc.x0.copy()
    commands, starts = [], [x.copy()]
    for _ in range(periods):
        duty, xc = pi.sample(xc, ref, x[sc.states.index("v_C1")])
        commands.append(duty)
        run = simulate_switched(sc, T, T / 10, {"g": parse_pwm(f"100kHz,duty={duty!r}")}, x0=x)
        x = run.physical_states()[1][:, -1]
        starts.append(x.copy())
    at_starts = [int(np.argmin(np.abs(result.time - k * T))) for k in range(periods + 1)]
    ours_duty = result.output("duty")[at_starts[:-1]]
    assert ours_duty == pytest.approx(commands, abs=1e-9)
    assert max(commands) > 0.3  # the loop really acts
    reference = np.array(starts).T
    ours = np.vstack([result.state("stage.i_L1"), result.state("stage.v_C1")])[:, at_starts]
    span = np.ptp(reference, axis=1, keepdims=True)
    assert np.all(np.abs(ours - reference) <= 1e-9 * span)


def test_the_gate_output_follows_the_latched_duty(loop_file):
    # the gate turns on at each carrier start and off after the duty latched there
    result = simulate(load_system(loop_file), 2e-4, 1e-6, {"v_ref": 12.0})
    on = [e for e in result.events if e.part == "stage.Q1"]
    duty = result.output("duty")
    for rise, fall in zip(on[::2], on[1::2], strict=False):
        assert rise.change == "off -> on" and fall.change == "on -> off"
        k = int(np.argmin(np.abs(result.time - rise.time)))
        assert rise.time == pytest.approx(round(rise.time / 1e-5) * 1e-5, abs=1e-15)
        assert fall.time - rise.time == pytest.approx(duty[k] * 1e-5, abs=1e-15)


def test_a_complementary_pair_with_dead_time_matches_the_pwm_waveforms():
    # a modulator fed a constant duty gives the pwm waveform's edges, for both outputs,
    # both carriers (the waveform is this block with a constant duty)
    for carrier in ("sawtooth", "triangle"):
        m = Modulator("leg", 100e3, carrier, dead_time=200e-9, complementary=True, phase=0.25)
        schedule = m.schedule()
        edges = {0: [], 1: []}
        t, k = 0.0, 0
        schedule.latch(0.0, 0.37, start=m.carrier_start(0) - m.period)
        schedule.advance_to(0.0)
        before = schedule.values.copy()
        while t < 4 * m.period:
            nxt = min(schedule.next_edge(), m.carrier_start(k))
            if nxt == m.carrier_start(k):
                schedule.latch(nxt, 0.37)
                k += 1
            schedule.advance_to(nxt)
            for j in (0, 1):
                if schedule.values[j] != before[j]:
                    edges[j].append(nxt)
            before = schedule.values.copy()
            t = nxt
        for j, side in ((0, "high"), (1, "low")):
            wave = parse_pwm(
                f"100kHz,duty=0.37,dead=200ns,carrier={carrier},phase=90deg,side={side}"
            )
            expected = wave.edges(0.0, 4 * m.period)
            ours = [e for e in edges[j] if e <= 4 * m.period]
            # 1e-15 s: round-off of k T + offset sums, 1e-10 of a period
            assert ours == pytest.approx(expected, abs=1e-15)


def test_synchronous_buck_leg_never_conducts_through(tmp_path):
    # a half-bridge of two switches driven by one complementary modulator with 100 ns of
    # dead time: the two switches are never on together, and in the dead time after the
    # high switch opens the diode carries the (then positive) inductor current
    (tmp_path / "leg.toml").write_text(
        BUCK.replace('gate = "g"', 'gate = "g_high"').replace(
            "[parts.D1]",
            '[parts.Q2]\nkind = "switch"\nnodes = ["sw", "gnd"]\ngate = "g_low"\n[parts.D1]',
        )
    )
    (tmp_path / "sync.toml").write_text(
        LOOP.replace('file = "buck.toml"', 'file = "leg.toml"')
        .replace('"stage.g" = "pwm.gate"', '"stage.g_high" = "pwm.high"\n"stage.g_low" = "pwm.low"')
        .replace('frequency = "100kHz"',
                 'frequency = "100kHz"\ncomplementary = true\ndead_time = "100ns"')
        .replace('gate = "pwm.gate"', 'high = "pwm.high"\nlow = "pwm.low"')
    )  # fmt: skip
    result = simulate(load_system(tmp_path / "sync.toml"), 2e-4, 1e-6, {"v_ref": 12.0})
    q1 = [m.on[0] for m in result.modes]
    q2 = [m.on[1] for m in result.modes]
    assert not any(a and b for a, b in zip(q1, q2, strict=True))
    assert any(q1) and any(q2)
    devices = ["stage.Q1", "stage.Q2", "stage.D1"]
    opened = {e.time for e in result.events if e.part == "stage.Q1" and e.after == "off"}
    dead = [m for m in result.modes if m.start in opened]
    assert len(dead) > 5
    for m in dead:
        assert not m.on[1] and m.on[devices.index("stage.D1")]
        assert m.end - m.start == pytest.approx(100e-9, abs=1e-15)


def test_a_gate_from_a_continuous_signal_is_refused(loop_file, tmp_path):
    # through a gain without a unit: wired straight, the output's V against the gate's
    # dimensionless unit is refused when the system is read (wrong_unit), below
    text = LOOP.replace(
        '"stage.g" = "pwm.gate"', '"stage.g" = "k.output"\n"k.input" = "stage.v_out"'
    )
    path = tmp_path / "analog.toml"
    path.write_text(text.replace("[wiring]", '[blocks.k]\nkind = "gain"\ngain = 1.0\n[wiring]'))
    with pytest.raises(WirestateError) as info:
        simulate(load_system(path), 1e-4, 1e-6)
    assert info.value.code == "invalid_gate"
    assert info.value.location == ("wiring", "stage.g")
    path.write_text(LOOP.replace('"stage.g" = "pwm.gate"', '"stage.g" = "stage.v_out"'))
    with pytest.raises(WirestateError) as info:
        load_system(path)
    assert info.value.code == "wrong_unit"
    assert info.value.location == ("wiring", "stage.g")


def test_a_continuous_nonlinear_block_is_refused(loop_file, tmp_path):
    path = tmp_path / "continuous.toml"
    path.write_text(LOOP.replace('sample_time = "10us"\n', "").replace("delay = true\n", ""))
    with pytest.raises(WirestateError) as info:
        simulate(load_system(path), 1e-4, 1e-6)
    assert info.value.code == "unsupported_switched_system"
    assert info.value.location == ("blocks", "vloop")


def test_a_dead_time_longer_than_the_period_is_refused(tmp_path):
    (tmp_path / "buck.toml").write_text(BUCK)
    path = tmp_path / "loop.toml"
    path.write_text(
        LOOP.replace('frequency = "100kHz"', 'frequency = "100kHz"\ndead_time = "20us"')
    )
    with pytest.raises(WirestateError) as info:
        load_system(path)
    assert info.value.location[:2] == ("blocks", "pwm")
    assert "dead_time" in info.value.message
