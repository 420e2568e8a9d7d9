"""The C runtime's promises checked from outside: no heap allocation in ``fmi2DoStep``,
hold matrices computed once per step size and cached, ``fmi2Reset`` back to the start
values, a sampled PID with its derivative filter, and every bundled model accepted by
fmpy's validator.

Source: FMI 2.0.1 (2019) sec. 2.1.5 (memory callbacks), 2.1.6
(``fmi2Reset``), 4.2 (co-simulation); fmpy as the independent importer.
"""

from __future__ import annotations

import re
import textwrap

import numpy as np
import pytest

from tests.export.conftest import MODELS, needs_compiler
from tests.export.test_two_fmus import LOOP
from wirestate.export import export_fmu, load_model
from wirestate.simulate import simulate

fmpy = pytest.importorskip("fmpy", reason="fmpy (test extra) is needed to import the FMUs")

pytestmark = needs_compiler


def counting_slave(fmu, counts: dict[str, int]):
    """An fmpy slave whose memory callbacks count the runtime's calls, logging on."""
    from fmpy import calloc, extract, free, read_model_description
    from fmpy.fmi2 import (
        FMU2Slave,
        defaultCallbacks,
        fmi2CallbackAllocateMemoryTYPE,
        fmi2CallbackFreeMemoryTYPE,
        fmi2CallbackFunctions,
    )

    def allocate(n, size):
        counts["allocate"] += 1
        return calloc(n, size)

    def release(pointer):
        counts["free"] += 1
        free(pointer)

    callbacks = fmi2CallbackFunctions()
    callbacks.logger = defaultCallbacks.logger
    callbacks.allocateMemory = fmi2CallbackAllocateMemoryTYPE(allocate)
    callbacks.freeMemory = fmi2CallbackFreeMemoryTYPE(release)
    md = read_model_description(str(fmu))
    identifier = md.coSimulation.modelIdentifier
    slave = FMU2Slave(guid=md.guid, unzipDirectory=extract(str(fmu)),
                      modelIdentifier=identifier, instanceName="count")  # fmt: skip
    slave.keep = (callbacks, allocate, release)  # the C side holds pointers to these
    slave.instantiate(callbacks=callbacks, loggingOn=True)
    slave.refs = {v.name: v.valueReference for v in md.modelVariables}
    return slave


def test_do_step_allocates_nothing_and_caches_each_step_size(exported, capsys):
    counts = {"allocate": 0, "free": 0}
    slave = counting_slave(exported("drive_bus_filter.toml"), counts)
    slave.setupExperiment(startTime=0.0)
    slave.enterInitializationMode()
    slave.exitInitializationMode()
    slave.setReal([slave.refs["Vbat"], slave.refs["Iinv"]], [48.0, 3.0])
    after_start = dict(counts)
    capsys.readouterr()
    t = 0.0
    steps = [1e-6, 2e-6, 0.5e-6, 3e-6] * 50  # the default step and three computed in C
    for h in steps:
        slave.doStep(t, h)
        t += h
    assert counts == after_start  # no allocation and no release while stepping
    log = capsys.readouterr().out
    computed = re.findall(r"computed for a step of ([0-9.e+-]+) s", log)
    # each new step size once (the default's matrices come from the export), then cached
    # (the logged step is the end time less the start: equal to 1e-9, as the cache keys)
    assert sorted(float(h) for h in computed) == pytest.approx([5e-7, 2e-6, 3e-6], rel=1e-9)
    slave.terminate()
    slave.freeInstance()
    assert counts["free"] == counts["allocate"]  # everything given back


def test_reset_returns_to_the_start_values(exported):
    from tests.export.conftest import Slave

    block, _ = load_model(MODELS / "servo_armature.toml")
    slave = Slave(exported("servo_armature.toml"))
    first = []
    for _ in range(2):
        slave.set(Va=24.0, w_shaft=10.0)
        for k in range(100):
            slave.fmu.doStep(k * 1e-6, 1e-6)
        first.append(slave.get(block.outputs))
        slave.fmu.reset()
        # after fmi2Reset the instance is as instantiated: set up and initialise again
        assert slave.get([f"armature.{block.states[0]}", "Va"]) == [0.0, 24.0]
        slave.fmu.setupExperiment(startTime=0.0)
        slave.fmu.enterInitializationMode()
        slave.fmu.exitInitializationMode()
    assert first[0] == first[1]  # the same run again, bit for bit
    slave.close()


def test_sampled_pid_with_derivative_filter_matches_wirestate(tmp_path):
    # the current loop of test_two_fmus with a PID: derivative on the measurement through
    # a first-order filter (Astrom and Wittenmark, Computer-Controlled Systems, sec. 8.5)
    pid = 'kind = "pid"\n    kd = 2e-5\n    derivative_filter = "20us"'
    text = textwrap.dedent(LOOP.replace('kind = "pi"', pid))
    path = tmp_path / "pid_loop.toml"
    path.write_text(text, encoding="utf-8")
    system, _ = load_model(path)
    step, steps = 10e-6, 1500
    drives = {"current_ref": "step:70A,at=6ms,from=20A", "Vbat": 48.0, "Iport": 0.0,
              "Eb": 20.0}  # fmt: skip
    ours = simulate(system, steps * step, step, drives)
    fmu = export_fmu(path, tmp_path / "pid.fmu", step=step).path
    assert fmpy.validation.validate_fmu(str(fmu)) == []
    result = fmpy.simulate_fmu(
        str(fmu), stop_time=steps * step, output_interval=step, output=system.outputs,
        input=np.array([tuple([t, *u]) for t, u in zip(ours.time, ours.inputs.T, strict=True)],
                       dtype=[("time", float)] + [(n, float) for n in system.inputs]),
    )  # fmt: skip
    got = np.vstack([result[n] for n in system.outputs])
    # 1e-12 relative to each output's largest magnitude, as for the PI (test_fmu.py)
    scale = np.abs(ours.outputs).max(axis=1)
    assert (np.abs(got - ours.outputs).max(axis=1) / scale).max() <= 1e-12


@pytest.mark.parametrize("model", ["tuning/drive_bus.toml", "tuning/drive_bus_loop.toml"])
def test_the_other_bundled_models_pass_validation(exported, model):
    assert fmpy.validation.validate_fmu(str(exported(model))) == []
