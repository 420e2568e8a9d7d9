"""What an exported FMU says about itself, checked against what it does.

Sources: FMI 2.0.1 (2019): sec. 2.2.2 (UnitDefinitions, BaseUnit
exponents of the SI base units), sec. 2.2.7 (causality, variability, start), sec. 4.3.1
(co-simulation capability flags); the SI Brochure (BIPM, 9th edition, 2019), table 4, for
the derived units in base units; mpmath's arbitrary-precision ``expm`` for the matrix
exponential behind the zero-order hold (Van Loan 1978).
"""

from __future__ import annotations

import os
import re
import subprocess
import sys
import textwrap
import xml.etree.ElementTree as ET
import zipfile
from pathlib import Path

import numpy as np
import pytest

from tests.export.conftest import CIRCUITS, MODELS, SYSTEM, Slave, needs_compiler
from wirestate.cli import main
from wirestate.errors import WirestateError
from wirestate.export import export_fmu, load_model
from wirestate.export.build import find_compiler

fmpy = pytest.importorskip("fmpy", reason="fmpy (test extra) is needed to import the FMUs")

#: SI Brochure (BIPM 2019), table 4 and sec. 2.3.3: coherent derived units as products of
#: powers of base units (the radian kept as its own dimension, as FMI 2.0.1 allows)
SI_BASE = {
    "V": {"kg": 1, "m": 2, "s": -3, "A": -1},
    "A": {"A": 1},
    "N": {"kg": 1, "m": 1, "s": -2},
    "N*m": {"kg": 1, "m": 2, "s": -2},
    "m/s": {"m": 1, "s": -1},
    "rad": {"rad": 1},
    "rad/s": {"rad": 1, "s": -1},
}

PRECHARGED = """
    [circuit]
    name = "precharged_link"
    description = "a DC link whose capacitor is precharged and whose choke carries current"
    [parts.Vsrc]
    kind = "voltage_source"
    nodes = ["a", "gnd"]
    value = "48V"
    description = "supply"
    [parts.Iload]
    kind = "current_source"
    nodes = ["bus", "gnd"]
    value = "2.5A"
    [parts.R1]
    kind = "resistor"
    nodes = ["a", "b"]
    value = "50mohm"
    [parts.L1]
    kind = "inductor"
    nodes = ["b", "bus"]
    value = "10uH"
    initial = "1.5A"
    [parts.C1]
    kind = "capacitor"
    nodes = ["bus", "gnd"]
    value = "220uF"
    initial = "42V"
    [outputs.v_bus]
    voltage = "bus"
    [outputs.i_choke]
    current = "L1"
"""


def description_of(fmu: Path) -> ET.Element:
    with zipfile.ZipFile(fmu) as archive:
        return ET.fromstring(archive.read("modelDescription.xml"))


def scalars(root: ET.Element) -> list[ET.Element]:
    return root.findall("ModelVariables/ScalarVariable")


@needs_compiler
@pytest.mark.parametrize("model", [*CIRCUITS, SYSTEM])
def test_every_variable_unit_and_name_comes_from_the_file(exported, model):
    found, description = load_model(MODELS / model)
    root = description_of(exported(model))
    assert root.get("fmiVersion") == "2.0" and root.find("CoSimulation") is not None
    assert root.get("modelName") == found.name
    assert root.find("CoSimulation").get("modelIdentifier") == found.name
    if description:
        assert root.get("description") == description
    assert re.fullmatch(r"\{[0-9a-f-]{36}\}", root.get("guid"))
    variables = scalars(root)
    names = [v.get("name") for v in variables]
    inputs = [v.get("name") for v in variables if v.get("causality") == "input"]
    outputs = [v.get("name") for v in variables if v.get("causality") == "output"]
    assert inputs == list(found.inputs) and outputs == list(found.outputs)
    states = [n for n, v in zip(names, variables, strict=True) if v.get("causality") == "local"]
    continuous = [s.split(".", 1)[1] if "." in s else s for s in states]
    for state in getattr(found, "states", []):
        assert state in continuous or state in states  # one variable per state
    # every unit used is declared once, with the SI base-unit exponents of the SI Brochure
    declared = {u.get("name"): u for u in root.findall("UnitDefinitions/Unit")}
    used = {v.find("Real").get("unit") for v in variables} - {None}
    assert used == set(declared)
    for unit in used:
        base = declared[unit].find("BaseUnit")
        exponents = {k: int(v) for k, v in base.attrib.items() if k != "factor"}
        assert exponents == SI_BASE[unit], unit
        assert float(base.get("factor", "1")) == 1.0  # SI units inside: no scaling
    # causality and variability: inputs and outputs continuous unless a sampled block
    # holds them; states local with an exact start; outputs carry no start (sec. 2.2.7)
    for v in variables:
        real = v.find("Real")
        if v.get("causality") == "output":
            assert real.get("start") is None and v.get("initial") is None
        else:
            assert real.get("start") is not None
        if v.get("causality") == "local":
            assert v.get("initial") == "exact"
    structure = [int(u.get("index")) for u in root.findall("ModelStructure/Outputs/Unknown")]
    assert [names[i - 1] for i in structure] == outputs


@needs_compiler
def test_sampled_outputs_and_states_are_discrete_with_the_controller_units(exported):
    root = description_of(exported(SYSTEM, 20e-6))
    by_name = {v.get("name"): v for v in scalars(root)}
    # battery_drive: the PI's command is held between samples; its states are V (command)
    assert by_name["command"].get("variability") == "discrete"
    assert by_name["speed"].get("variability") == "continuous"
    for state in ("speed_loop.integral", "speed_loop.delayed_command"):
        assert by_name[state].get("variability") == "discrete"
        assert by_name[state].find("Real").get("unit") == "V"


@needs_compiler
def test_start_values_come_from_the_file_initial_and_value(tmp_path):
    path = tmp_path / "precharged.toml"
    path.write_text(textwrap.dedent(PRECHARGED), encoding="utf-8")
    fmu = export_fmu(path, tmp_path / "p.fmu").path
    root = description_of(fmu)
    start = {v.get("name"): float(v.find("Real").get("start"))
             for v in scalars(root) if v.find("Real").get("start") is not None}  # fmt: skip
    assert start == {"Vsrc": 48.0, "Iload": 2.5, "precharged_link.i_L1": 1.5,
                     "precharged_link.v_C1": 42.0}  # fmt: skip
    by_name = {v.get("name"): v for v in scalars(root)}
    assert by_name["Vsrc"].get("description") == "supply"  # the part's description
    # and the FMU starts there: v_bus = v_C1 and i_choke = i_L1 before any step
    slave = Slave(fmu)
    assert slave.get(["v_bus", "i_choke"]) == [42.0, 1.5]
    slave.close()


@needs_compiler
def test_capability_flags_say_what_the_runtime_does(exported):
    fmu = exported("drive_bus_filter.toml")
    flags = description_of(fmu).find("CoSimulation").attrib
    assert flags["canHandleVariableCommunicationStepSize"] == "true"  # see test_fmu.py
    assert flags["canGetAndSetFMUstate"] == "true" and flags["canSerializeFMUstate"] == "true"
    assert flags["needsExecutionTool"] == "false"
    assert flags["canBeInstantiatedOnlyOncePerProcess"] == "false"
    assert flags["canInterpolateInputs"] == "false"
    assert flags["maxOutputDerivativeOrder"] == "0"
    assert flags["providesDirectionalDerivative"] == "false"
    block, _ = load_model(MODELS / "drive_bus_filter.toml")
    one, two = Slave(fmu, "one"), Slave(fmu, "two")
    # two instances in one process keep their own states
    one.set(Vbat=48.0, Iinv=0.0)
    two.set(Vbat=12.0, Iinv=5.0)
    for k in range(50):
        one.fmu.doStep(k * 1e-6, 1e-6)
        two.fmu.doStep(k * 1e-6, 1e-6)
    a, b = one.get(block.outputs), two.get(block.outputs)
    assert a != b
    solo = Slave(fmu, "solo")
    solo.set(Vbat=48.0, Iinv=0.0)
    for k in range(50):
        solo.fmu.doStep(k * 1e-6, 1e-6)
    assert solo.get(block.outputs) == a  # bit for bit, unaffected by the other instance
    # what the flags deny is refused with an error
    ref = one.refs[block.inputs[0]]
    out = one.refs[block.outputs[0]]
    with pytest.raises(fmpy.fmi1.FMICallException):
        one.fmu.setRealInputDerivatives([ref], [1], [1.0])
    with pytest.raises(fmpy.fmi1.FMICallException):
        one.fmu.getRealOutputDerivatives([out], [1])
    with pytest.raises(fmpy.fmi1.FMICallException):
        one.fmu.getDirectionalDerivative([out], [ref], [1.0])
    for slave in (one, two, solo):
        slave.close()


def column_responses(fmu: Path, model, step: float, capsys) -> tuple[np.ndarray, float]:
    """[Ad Bd] of the FMU for ``step`` read column by column (a state or an input set to 1,
    every other to 0, one step), and the error bound the FMU logs for that step."""
    from fmpy import extract, read_model_description
    from fmpy.fmi2 import FMU2Slave

    md = read_model_description(str(fmu))
    refs = {v.name: v.valueReference for v in md.modelVariables}
    states = [f"{model.name}.{s}" for s in model.states]
    folder = extract(str(fmu))
    columns, logs = [], ""
    for j in range(len(states) + len(model.inputs)):
        identifier = md.coSimulation.modelIdentifier
        slave = FMU2Slave(guid=md.guid, unzipDirectory=folder, modelIdentifier=identifier,
                          instanceName=f"c{j}")  # fmt: skip
        slave.instantiate(loggingOn=True)
        slave.setupExperiment(startTime=0.0)
        slave.enterInitializationMode()
        x = np.zeros(len(states))
        u = np.zeros(len(model.inputs))
        if j < len(states):
            x[j] = 1.0
        else:
            u[j - len(states)] = 1.0
        slave.setReal([refs[s] for s in states], list(x))
        slave.exitInitializationMode()
        slave.setReal([refs[n] for n in model.inputs], list(u))
        slave.doStep(0.0, step)
        columns.append(slave.getReal([refs[s] for s in states]))
        slave.terminate()
        slave.freeInstance()
        logs += capsys.readouterr().out
    bounds = re.findall(r"error bound ([0-9.e+-]+) \(1-norm, relative\)", logs)
    assert bounds, logs
    return np.array(columns).T, float(bounds[0])


@needs_compiler
@pytest.mark.parametrize("model", ["drive_bus_filter.toml", "feeder_cable.toml"])
@pytest.mark.parametrize("step", [3e-9, 7.3e-7, 4e-5, 2e-3])
def test_steps_computed_in_c_are_within_their_stated_error_bound(exported, model, step, capsys):
    import mpmath

    block, _ = load_model(MODELS / model)
    got, bound = column_responses(exported(model), block, step, capsys)
    n, m = block.A.shape[0], block.B.shape[1]
    # reference: exp([[A, B], [0, 0]] h) at 40 significant digits (mpmath), Van Loan 1978
    M = np.zeros((n + m, n + m))
    M[:n, :n], M[:n, n:] = block.A * step, block.B * step
    with mpmath.workdps(40):
        E = mpmath.expm(mpmath.matrix(M.tolist()))
        exact = np.array([[float(E[i, j]) for j in range(n + m)] for i in range(n)])
    full = np.eye(n + m)
    full[:n] = exact
    error = np.abs(got - exact).sum(axis=0).max() / np.abs(full).sum(axis=0).max()
    # the bound the FMU states (logged with the matrices) holds
    assert error <= bound, (error, bound)
    # it is tight up to the fastest time constant; beyond, it grows like 2^s (s squarings)
    # and is pessimistic, so there the stated figure is the measured one (README)
    if step * np.abs(np.linalg.eigvals(block.A)).max() <= 1.0:
        assert bound < 1e-12, bound
    assert error < 1e-11


@needs_compiler
def test_sources_only_fmu_builds_elsewhere_from_its_sources(tmp_path, capsys):
    fmu = tmp_path / "armature.fmu"
    assert main(["export", str(MODELS / "servo_armature.toml"), "--fmu", str(fmu),
                 "--sources-only"]) == 0  # fmt: skip
    assert "sources/ only (no binary)" in capsys.readouterr().out
    with zipfile.ZipFile(fmu) as archive:
        names = archive.namelist()
        assert not any(n.startswith("binaries/") for n in names)
        archive.extractall(tmp_path / "unpacked")
    assert fmpy.validation.validate_fmu(str(fmu)) == []
    # another platform's user: the C files in sources/ build the binary on their own
    folder = tmp_path / "unpacked"
    binary = folder / "binaries" / "linux64" / "armature.so"
    binary.parent.mkdir(parents=True)
    sources = folder / "sources"
    subprocess.run([*find_compiler(), "-std=c99", "-O2", "-fPIC", "-shared", "-ffp-contract=off",
                    f"-I{sources}", str(sources / "wirestate_fmu.c"), "-o", str(binary), "-lm"],
                   check=True)  # fmt: skip
    rebuilt = tmp_path / "rebuilt.fmu"
    with zipfile.ZipFile(rebuilt, "w") as archive:
        for path in folder.rglob("*"):
            if path.is_file():
                archive.write(path, path.relative_to(folder).as_posix())
    block, _ = load_model(MODELS / "servo_armature.toml")
    values = {"Va": 24.0, "w_shaft": 30.0}
    kwargs = dict(stop_time=2e-3, output_interval=1e-6, start_values=values,
                  output=list(block.outputs))  # fmt: skip
    built = export_fmu(MODELS / "servo_armature.toml", tmp_path / "built.fmu").path
    a = fmpy.simulate_fmu(str(rebuilt), **kwargs)
    b = fmpy.simulate_fmu(str(built), **kwargs)
    for name in block.outputs:
        np.testing.assert_array_equal(a[name], b[name])  # same C, same compiler flags


@pytest.mark.parametrize("cc", [None, "no-such-compiler"])
def test_no_compiler_is_one_line_exit_two_and_no_file(tmp_path, cc):
    # a PATH with no cc on it, and CC unset or naming a missing program
    empty = tmp_path / "bin"
    empty.mkdir()
    env = {k: v for k, v in os.environ.items() if k != "CC"}
    env["PATH"] = str(empty)
    if cc:
        env["CC"] = cc
    target = tmp_path / "a.fmu"
    done = subprocess.run(
        [sys.executable, "-c", "import sys; from wirestate.cli import main; sys.exit(main())",
         "export", str(MODELS / "servo_armature.toml"), "--fmu", str(target)],
        env=env, capture_output=True, text=True, timeout=120,
    )  # fmt: skip
    assert done.returncode == 2, done.stderr
    assert done.stderr.startswith("error: ") and done.stderr.count("\n") == 1
    assert "C compiler" in done.stderr and "--sources-only" in done.stderr
    if cc:
        assert cc in done.stderr
    assert not target.exists() and list(tmp_path.iterdir()) == [empty]


BUCK = """
    [circuit]
    name = "buck_stage"
    [parts.Vin]
    kind = "voltage_source"
    nodes = ["in", "gnd"]
    value = "24V"
    [parts.Q1]
    kind = "switch"
    nodes = ["in", "sw"]
    on_resistance = "10mohm"
    [parts.D1]
    kind = "diode"
    nodes = ["gnd", "sw"]
    forward_voltage = "0.7V"
    [parts.L1]
    kind = "inductor"
    nodes = ["sw", "out"]
    value = "100uH"
    [parts.C1]
    kind = "capacitor"
    nodes = ["out", "gnd"]
    value = "100uF"
    [parts.Rload]
    kind = "resistor"
    nodes = ["out", "gnd"]
    value = "5ohm"
    [outputs.v_out]
    voltage = "out"
"""

BUCK_SYSTEM = """
    [system]
    name = "buck_with_sensor"
    [blocks.stage]
    kind = "circuit"
    file = "buck.toml"
    [blocks.sensor]
    kind = "sensor_filter"
    time_constant = "5us"
    unit = "V"
    [wiring]
    "sensor.signal" = "stage.v_out"
    [inputs]
    Vin = "stage.Vin"
    Q1 = "stage.Q1"
    [outputs]
    v_measured = "sensor.measured"
"""


@pytest.mark.parametrize("which", ["circuit", "system"])
def test_switched_circuits_are_refused_naming_their_switches_and_diodes(tmp_path, capsys, which):
    (tmp_path / "buck.toml").write_text(textwrap.dedent(BUCK), encoding="utf-8")
    (tmp_path / "system.toml").write_text(textwrap.dedent(BUCK_SYSTEM), encoding="utf-8")
    model = tmp_path / ("buck.toml" if which == "circuit" else "system.toml")
    target = tmp_path / "old.fmu"
    target.write_bytes(b"kept")
    assert main(["export", str(model), "--fmu", str(target), "--sources-only"]) == 2
    err = capsys.readouterr().err
    assert err.startswith("error: ") and err.count("\n") == 1
    assert "Q1 (switch)" in err and "D1 (diode)" in err and "switches or diodes" in err
    assert target.read_bytes() == b"kept"
    with pytest.raises(WirestateError) as info:
        export_fmu(model, tmp_path / "new.fmu", sources_only=True)
    # a circuit file names the first device; a system file the block that holds them
    where = ("parts", "Q1") if which == "circuit" else ("blocks", "stage")
    assert info.value.code == "not_exportable" and info.value.location == where
