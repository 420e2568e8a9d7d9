"""Where a run starts: the steady state at the operating point, zero, single states by name
(``simulate --initial`` / ``--initial-value``), checked against closed forms."""

from __future__ import annotations

import numpy as np
import pytest

from tests.conftest import MODELS, circuit
from wirestate.cli import main
from wirestate.compose import load_system
from wirestate.errors import SimulationError
from wirestate.simulate import simulate, start_from

R1, R2, L1, C1 = 2.0, 6.0, 1e-3, 100e-6


def rlc_divider():
    # Vs - R1 - L1 - node b; C1 and R2 from b to ground
    return circuit(
        {
            "Vs": {"kind": "voltage_source", "nodes": ["a", "gnd"], "value": "12V"},
            "R1": {"kind": "resistor", "nodes": ["a", "m"], "value": R1},
            "L1": {"kind": "inductor", "nodes": ["m", "b"], "value": L1},
            "C1": {"kind": "capacitor", "nodes": ["b", "gnd"], "value": C1},
            "R2": {"kind": "resistor", "nodes": ["b", "gnd"], "value": R2},
        },
        {"v_b": {"voltage": "b"}, "i_L1": {"current": "L1"}},
    )


def test_the_steady_state_is_the_dc_operating_point_and_stays_there():
    # DC divider: i = V / (R1 + R2), v_b = V R2 / (R1 + R2) (Ohm's and Kirchhoff's laws);
    # the run from there stays put. Tolerance 1e-9 relative: exact ZOH steps through a
    # matrix exponential
    V = 24.0
    result = simulate(rlc_divider(), 5e-3, 1e-5, {"Vs": V}, initial="steady_state")
    v_b, i_L = result.output("v_b"), result.output("i_L1")
    assert v_b == pytest.approx(np.full_like(v_b, V * R2 / (R1 + R2)), rel=1e-9)
    assert i_L == pytest.approx(np.full_like(i_L, V / (R1 + R2)), rel=1e-9)


def test_the_operating_point_is_the_inputs_at_t_zero():
    # a step at 1 ms from the steady state at 10 V: before the step nothing moves
    block = rlc_divider()
    result = simulate(block, 2e-3, 1e-5, {"Vs": "step:20V,at=1ms,from=10V"}, initial="steady_state")
    before = result.time < 1e-3
    assert result.output("v_b")[before] == pytest.approx(10 * R2 / (R1 + R2), rel=1e-9)
    assert result.output("v_b")[-1] != pytest.approx(10 * R2 / (R1 + R2), rel=1e-3)


def test_a_single_state_set_by_name_decays_as_the_closed_form():
    # RC discharge from v_C(0) = 42 V through R: v = 42 exp(-t / RC) (first-order circuit,
    # e.g. Alexander and Sadiku, Fundamentals of Electric Circuits, 5th ed., sec. 7.2);
    # tolerance 1e-9 relative (matrix exponential)
    R, C = 1e3, 1e-6
    block = circuit(
        {
            "C1": {"kind": "capacitor", "nodes": ["a", "gnd"], "value": C},
            "R1": {"kind": "resistor", "nodes": ["a", "gnd"], "value": R},
        },
        {"v_a": {"voltage": "a"}},
    )
    for initial in ("zero", "steady_state", "parts"):
        result = simulate(block, 5e-3, 1e-5, initial=initial, initial_values={"v_C1": "42V"})
        expected = 42.0 * np.exp(-result.time / (R * C))
        assert result.output("v_a") == pytest.approx(expected, rel=1e-9, abs=1e-12)


def test_zero_ignores_the_parts_initial_fields():
    block = circuit(
        {
            "C1": {"kind": "capacitor", "nodes": ["a", "gnd"], "value": 1e-6, "initial": "5V"},
            "R1": {"kind": "resistor", "nodes": ["a", "gnd"], "value": 1e3},
        },
        {"v_a": {"voltage": "a"}},
    )
    assert simulate(block, 1e-3, 1e-5).output("v_a")[0] == pytest.approx(5.0)
    assert simulate(block, 1e-3, 1e-5, initial="zero").output("v_a")[0] == 0.0


def test_a_shifted_state_is_set_by_its_physical_value():
    # Vs, C1 and C2 form a loop: one capacitor state is shifted by Vs; setting it by its
    # physical name gives that physical voltage at t = 0 whatever Vs is
    block = circuit(
        {
            "Vs": {"kind": "voltage_source", "nodes": ["a", "gnd"], "value": "10V"},
            "C1": {"kind": "capacitor", "nodes": ["a", "b"], "value": 1e-6},
            "C2": {"kind": "capacitor", "nodes": ["b", "gnd"], "value": 2e-6},
            "R1": {"kind": "resistor", "nodes": ["b", "gnd"], "value": 1e3},
        },
        {"v_b": {"voltage": "b"}},
    )
    shifted = [s for s in block.states if s.endswith("_shifted")]
    assert len(shifted) == 1
    physical = shifted[0].removesuffix("_shifted")
    result = simulate(block, 1e-3, 1e-5, initial="zero", initial_values={physical: 3.0})
    assert result.physical_state(physical)[0] == pytest.approx(3.0, rel=1e-12)


def test_a_sampled_drive_starts_in_its_steady_state():
    # battery_drive at 150 rad/s, no load torque: the speed loop's integral holds the
    # speed at its reference; the motor torque balances the viscous friction, T = (b1 + b2)
    # w, so i = T / k and V = Ra i + k w (steady state of a DC machine, e.g. Chapman,
    # Electric Machinery Fundamentals, 5th ed., sec. 8.4); the bus sags by the cable
    # resistance times the bridge's draw 0.5 i. Parameters from the model files.
    w, b, k, Ra, Rcable = 150.0, 20e-6 + 150e-6, 0.058, 0.85, 12e-3
    i = b * w / k
    system = load_system(MODELS / "systems" / "battery_drive.toml")
    result = simulate(system, 0.05, 2e-5, {"speed_ref": w}, initial="steady_state")
    # tolerance 1e-9 relative: a linear solve and exact ZOH steps
    for name, value in (
        ("speed", w),
        ("motor_speed", w),
        ("i_arm", i),
        ("command", Ra * i + k * w),
        ("v_bus", 48.0 - Rcable * 0.5 * i),
    ):
        trace = result.output(name)
        assert trace == pytest.approx(np.full_like(trace, value), rel=1e-9), name


def test_a_steady_state_outside_the_output_limits_is_refused():
    # 3000 rad/s needs about 174 V from a controller limited to 24 V
    system = load_system(MODELS / "systems" / "battery_drive.toml")
    with pytest.raises(SimulationError) as err:
        start_from(system, "steady_state", inputs={"speed_ref": 3000.0})
    assert err.value.code == "invalid_field" and "speed_loop.command" in err.value.message


def integrator():
    return circuit(
        {
            "Is": {"kind": "current_source", "nodes": ["gnd", "a"]},
            "C1": {"kind": "capacitor", "nodes": ["a", "gnd"], "value": 1e-6},
        },
        {"v_a": {"voltage": "a"}},
    )


def test_a_driven_integrator_has_no_steady_state():
    with pytest.raises(SimulationError) as err:
        start_from(integrator(), "steady_state", inputs={"Is": "1mA"})
    assert err.value.code == "invalid_field" and "pole at s = 0" in err.value.message


def test_an_undriven_integrator_starts_at_rest_with_a_note():
    start = start_from(integrator(), "steady_state", inputs={"Is": 0.0})
    assert start.x0 == pytest.approx([0.0]) and "not unique" in start.notes[0]


@pytest.mark.parametrize(
    ("values", "code", "named"),
    [
        ({"v_C9": "1V"}, "unknown_signal", "v_C9"),
        ({"v_C1": "step:1V"}, "invalid_quantity", "v_C1"),
        ({"v_C1": "3A"}, "invalid_input_signal", "v_C1"),
    ],
)
def test_bad_initial_values_name_the_state(values, code, named):
    with pytest.raises(SimulationError) as err:
        start_from(rlc_divider(), "zero", values)
    assert err.value.code == code and err.value.location == ("initial_values", named)


def test_the_command_line_starts_where_asked(tmp_path, capsys):
    model = str(MODELS / "drive_bus_filter.toml")
    csv = tmp_path / "run.csv"
    args = ["simulate", model, "--until", "2ms", "--step", "10us", "--input", "Vbat=48V",
            "--input", "Iinv=0A", "--initial", "steady_state", "--csv", str(csv)]  # fmt: skip
    assert main(args) == 0
    data = np.loadtxt(csv, delimiter=",", skiprows=1)
    # at the operating point (48 V, no load current) the bus sits at 48 V throughout
    assert data[:, 1] == pytest.approx(np.full(len(data), 48.0), rel=1e-9)
    args += ["--initial-value", "v_Cbus=40V"]
    assert main(args) == 0
    data = np.loadtxt(csv, delimiter=",", skiprows=1)
    assert data[0, 1] == pytest.approx(40.0) and data[:, 1].max() > 48.0
    assert main([*args[:-1], "v_Cbus"]) == 2
    assert "STATE=VALUE" in capsys.readouterr().err
