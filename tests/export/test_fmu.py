"""Exported FMUs checked by an outside FMI library (fmpy) against wirestate's simulator.

Sources: the FMI 2.0.1 standard (2019) for the archive and the API;
fmpy's ``validate_fmu`` (schema, names, model structure, start values, units) and its
simulation drivers as the independent importer.

Tolerance 1e-12 relative to each output's largest magnitude at the default step: the FMU
steps with the very zero-order-hold matrices wirestate's simulator uses (computed by the
same function at export and written as exact hexadecimal literals) and the controller
arithmetic of ``PIDController.sample`` operation for operation, so the two runs differ only
by the order of the sums in the matrix-vector products (about 1e-16 per step, growing
slowly over a few thousand steps of a stable system). Steps other than the default are
computed in C (balancing, Taylor degree 14 with scaling and squaring; its logged error
bound is checked in test_model_description.py): those runs are held to 1e-9, the
matrix-exponential tolerance of the suite.
"""

from __future__ import annotations

import numpy as np
import pytest

from tests.export.conftest import CIRCUITS, MODELS, SYSTEM, Slave, needs_compiler
from wirestate.export import load_model
from wirestate.simulate import Stepper, simulate

fmpy = pytest.importorskip("fmpy", reason="fmpy (test extra) is needed to import the FMUs")
from fmpy.validation import validate_fmu  # noqa: E402

pytestmark = needs_compiler


def relative_error(got: np.ndarray, expected: np.ndarray) -> np.ndarray:
    """Largest deviation of each row divided by the row's largest magnitude."""
    scale = np.maximum(np.abs(expected).max(axis=1), 1e-300)
    return np.abs(got - expected).max(axis=1) / scale


def drive(model) -> dict[str, float]:
    # constant drives of our own choosing, distinct per input (scenario, no source)
    return {name: 10.0 + 7.0 * k for k, name in enumerate(model.inputs)}


@pytest.mark.parametrize("model", [*CIRCUITS, SYSTEM])
def test_validate_fmu_finds_no_problem(exported, model):
    assert validate_fmu(str(exported(model))) == []


@pytest.mark.parametrize("model", CIRCUITS)
def test_simulate_fmu_matches_wirestate_on_each_circuit(exported, model):
    block, _ = load_model(MODELS / model)
    step, steps = 1e-6, 2000
    values = drive(block)
    fmu = exported(model)
    result = fmpy.simulate_fmu(
        str(fmu), start_time=0.0, stop_time=steps * step, output_interval=step,
        start_values=values, output=list(block.outputs),
    )  # fmt: skip
    ours = simulate(block, steps * step, step, values)
    assert len(result) == steps + 1
    np.testing.assert_allclose(result["time"], ours.time, rtol=1e-12, atol=1e-18)
    got = np.vstack([result[name] for name in block.outputs])
    assert np.all(np.abs(ours.outputs).max(axis=1) > 0)  # the drive reaches every output
    assert relative_error(got, ours.outputs).max() <= 1e-12


def test_simulate_fmu_matches_wirestate_on_a_system_with_a_sampled_pi(exported):
    # battery_drive: 200 us PI with limits, back-calculation and a one-sample delay; the
    # 20 us step puts ten communication steps between samples
    system, _ = load_model(MODELS / SYSTEM)
    step, steps = 20e-6, 2500
    values = {"Vbat": 48.0, "speed_ref": 150.0, "load_torque": 0.0}
    result = fmpy.simulate_fmu(
        str(exported(SYSTEM, step)), start_time=0.0, stop_time=steps * step,
        output_interval=step, start_values=values, output=system.outputs,
    )  # fmt: skip
    ours = simulate(system, steps * step, step, values)
    got = np.vstack([result[name] for name in system.outputs])
    command = ours.outputs[system.outputs.index("command")]
    assert command.max() == 24.0  # the limit is reached, so saturation is exercised
    assert relative_error(got, ours.outputs).max() <= 1e-12


def master_loop(fmu, model, inputs: np.ndarray, steps: list[float]) -> np.ndarray:
    """Set the inputs, read the outputs, step: the FMI 2.0 co-simulation order."""
    slave = Slave(fmu)
    t = 0.0
    rows = []
    for k, h in enumerate([*steps, None]):
        slave.set(**dict(zip(model.inputs, inputs[:, k], strict=True)))
        rows.append(slave.get(model.outputs))
        if h is not None:
            slave.fmu.doStep(currentCommunicationPoint=t, communicationStepSize=h)
            t += h
    slave.close()
    return np.array(rows).T


def test_changing_inputs_with_feedthrough_match_wirestate_on_the_system(exported):
    system, _ = load_model(MODELS / SYSTEM)
    step, steps = 5e-6, 4000
    waves = {
        "Vbat": "ramp:44V,end=10ms,from=48V,start=2ms",
        "speed_ref": "step:120rad/s,at=1ms",
        "load_torque": "step:0.05,at=12ms",
    }
    ours = simulate(system, steps * step, step, waves)
    got = master_loop(exported(SYSTEM, step), system, ours.inputs, [step] * steps)
    assert relative_error(got, ours.outputs).max() <= 1e-12


def test_sample_instants_inside_a_long_step_match_a_fine_simulation(exported):
    # communication steps of 500 us hold 2.5 controller periods (200 us): the C code splits
    # them at the sample instants, with sub-step matrices computed in C
    system, _ = load_model(MODELS / SYSTEM)
    values = {"Vbat": 48.0, "speed_ref": 150.0, "load_torque": 0.01}
    fine = simulate(system, 0.05, 100e-6, values)
    inputs = np.array([[values[n]] * 101 for n in system.inputs])
    got = master_loop(exported(SYSTEM, 20e-6), system, inputs, [500e-6] * 100)
    expected = fine.outputs[:, ::5]
    assert relative_error(got, expected).max() <= 1e-9


def test_variable_communication_steps_match_the_stepper(exported):
    block, _ = load_model(MODELS / "drive_bus_filter.toml")
    pattern = [1e-6, 2e-6, 0.5e-6, 0.5e-6, 2e-6, 1e-6]
    steps = pattern * 200
    rng = np.random.default_rng(7)
    inputs = np.vstack([48.0 + rng.normal(0, 1, len(steps) + 1),
                        rng.uniform(0, 20, len(steps) + 1)])  # fmt: skip
    got = master_loop(exported("drive_bus_filter.toml"), block, inputs, steps)
    # the master reads the outputs after setting the inputs of the coming step, as FMI
    # does, so the stepper's outputs are taken the same way: C x + D u with the new u
    stepper = Stepper(block, 1e-6)
    rows = []
    for k, h in enumerate([*steps, None]):
        rows.append(block.C @ stepper.state + block.D @ inputs[:, k])
        if h is not None:
            stepper.step(inputs[:, k], dt=h)
    expected = np.array(rows).T
    assert relative_error(got, expected).max() <= 1e-9


def test_rollback_and_serialised_state_give_identical_steps(exported):
    system, _ = load_model(MODELS / SYSTEM)
    slave = Slave(exported(SYSTEM, 20e-6))
    slave.set(speed_ref=150.0)
    for k in range(37):  # stop between two controller samples
        slave.fmu.doStep(k * 20e-6, 20e-6)
    t = 37 * 20e-6
    saved = slave.fmu.getFMUstate()
    slave.fmu.doStep(t, 20e-6)
    first = slave.get(system.outputs + [v.name for v in slave.md.modelVariables
                                        if v.causality == "local"])  # fmt: skip
    slave.fmu.setFMUstate(saved)
    slave.fmu.doStep(t, 20e-6)
    again = slave.get(system.outputs + [v.name for v in slave.md.modelVariables
                                        if v.causality == "local"])  # fmt: skip
    assert again == first  # bit for bit
    data = slave.fmu.serializeFMUstate(saved)
    slave.fmu.freeFMUstate(saved)
    # a second instance restored from the bytes continues exactly as the first did
    other = Slave(exported(SYSTEM, 20e-6), "other")
    restored = other.fmu.deSerializeFMUstate(data)
    other.fmu.setFMUstate(restored)
    other.fmu.doStep(t, 20e-6)
    assert other.get(system.outputs) == first[: len(system.outputs)]
    other.fmu.freeFMUstate(restored)
    with pytest.raises(fmpy.fmi1.FMICallException):
        other.fmu.deSerializeFMUstate(bytes(data[:-8]))
    other.close()
    slave.close()


def test_api_refuses_what_it_does_not_have_and_logs_it(exported, capsys):
    block, _ = load_model(MODELS / "servo_armature.toml")
    slave = Slave(exported("servo_armature.toml"))
    assert slave.fmu.getInteger([]) == []
    assert slave.fmu.getBoolean([]) == []
    with pytest.raises(fmpy.fmi1.FMICallException):
        slave.fmu.getInteger([0])
    with pytest.raises(fmpy.fmi1.FMICallException):
        slave.set(**{block.outputs[0]: 1.0})  # outputs are never settable
    with pytest.raises(fmpy.fmi1.FMICallException):
        slave.fmu.doStep(0.0, -1e-6)
    assert "not an input" in capsys.readouterr().out
    slave.close()


def test_states_are_settable_before_initialisation(exported):
    # initial="exact" states: a precharged inductor current, compared with the Stepper
    block, _ = load_model(MODELS / "servo_armature.toml")
    from fmpy import extract, read_model_description
    from fmpy.fmi2 import FMU2Slave

    fmu = exported("servo_armature.toml")
    md = read_model_description(str(fmu))
    refs = {v.name: v.valueReference for v in md.modelVariables}
    slave = FMU2Slave(
        guid=md.guid,
        unzipDirectory=extract(str(fmu)),
        modelIdentifier=md.coSimulation.modelIdentifier,
        instanceName="x",
    )
    slave.instantiate()
    slave.setupExperiment(startTime=0.0)
    slave.enterInitializationMode()
    slave.setReal([refs[f"armature.{block.states[0]}"]], [1.5])
    slave.exitInitializationMode()
    slave.setReal([refs[n] for n in block.inputs], [0.0] * len(block.inputs))
    slave.doStep(0.0, 1e-6)
    stepper = Stepper(block, 1e-6, x0=[1.5])
    expected = stepper.step(np.zeros(len(block.inputs)))
    got = slave.getReal([refs[n] for n in block.outputs])
    np.testing.assert_allclose(got, expected, rtol=1e-12)
    slave.terminate()
    slave.freeInstance()
