"""Tuning a circuit block inside a composed system file (``system = ...``, ``block = ...``).

The closed loop of :mod:`wirestate.tune.wiring` is checked three ways: against
python-control's ``interconnect`` (continuous loop matrices), against the tuning path
with a ``[controller]`` table that closes the same PI loop by its own formula (trajectories
and the optimum), and against the hybrid simulator (a sampled PI with a computation
delay and a sensor filter).
"""

from __future__ import annotations

import json
import tomllib
from pathlib import Path

import numpy as np
import pytest

from tests.conftest import MODELS
from wirestate.cli import main
from wirestate.compose import load_system
from wirestate.errors import TuningError, WirestateError
from wirestate.simulate import simulate_system
from wirestate.spec.tuning import load_tuning
from wirestate.tune.optimise import solve_nlp
from wirestate.tune.problem import Problem
from wirestate.tune.solve import solve

BUS = (MODELS / "tuning" / "drive_bus.toml").as_posix()

SYSTEM = """
    [system]
    name = "bus_loop"
    [blocks.bus]
    kind = "circuit"
    file = "{bus}"
    {sensor}
    [blocks.current_loop]
    kind = "pi"
    kp = 0.63
    ki = 157.0
    unit = "V"
    {sampling}
    [wiring]
    "bus.Vm" = "current_loop.command"
    "current_loop.measurement" = "{measured}"
    {sensor_wiring}
    [inputs]
    current_ref = "{reference_target}"
    Vbat = "bus.Vbat"
    Iport = "bus.Iport"
    Eb = "bus.Eb"
    [outputs]
    v_bus = "bus.v_bus"
    i_motor = "bus.i_motor"
    v_inverter = "current_loop.command"
    {extra_outputs}
"""

SENSOR = """
    [blocks.current_sensor]
    kind = "sensor_filter"
    time_constant = "5us"
    unit = "A"
"""

TUNING = """
    [tuning]
    name = "bus_leg"
    {model}
    [variables.Rd]
    min = "50mohm"
    max = "5ohm"
    start = "0.5ohm"
    [variables.Cd]
    min = "47uF"
    max = "4.7mF"
    start = "1mF"
    {controller}
    [scenario]
    until = "6ms"
    step = "{step}"
    initial = "{initial}"
    {inputs}
    [[scenario.steps]]
    input = "{reference}"
    at = "1.02ms"
    to = "40A"
    [[limits]]
    name = "bus_deviation"
    kind = "overshoot"
    output = "v_bus"
    after = "1.02ms"
    percent_of = "final"
    max = "3%"
    [[limits]]
    name = "damping_current"
    kind = "peak_current"
    part = "Rd"
    max = "4A"
    [objective]
    capacitance = 1.0
    parts = ["Cd"]
"""


SCALE = """
    [blocks.reference_scale]
    kind = "gain"
    gain = 2.0
    unit = "A"
    [blocks.command_probe]
    kind = "gain"
    gain = 0.5
    unit = "V"
"""


def _system(write, *, sample_time=None, delay=False, sensor=False, scale=False):
    # scale: the reference passes through a gain block (a continuous block with direct
    # feedthrough from an external input into the sampled controller), and a second gain
    # reads the held command (a continuous output fed through from a sampled one)
    sampling = ""
    if sample_time:
        sampling = f'sample_time = "{sample_time}"' + ("\ndelay = true" if delay else "")
    return write(
        "bus_loop.toml",
        SYSTEM.format(
            bus=BUS,
            sensor=(SENSOR if sensor else "") + (SCALE if scale else ""),
            sampling=sampling,
            measured="current_sensor.measured" if sensor else "bus.i_motor",
            sensor_wiring=('"current_sensor.signal" = "bus.i_motor"\n' if sensor else "")
            + (
                '"current_loop.reference" = "reference_scale.output"\n'
                '"command_probe.input" = "current_loop.command"'
                if scale
                else ""
            ),
            extra_outputs='probe = "command_probe.output"' if scale else "",
            reference_target="reference_scale.input" if scale else "current_loop.reference",
        ),
    )


def _system_case(write, *, step="10us", initial="steady_state", ref=("30A", "40A"), **system):
    _system(write, **system)
    path = write(
        "system_tuning.toml",
        TUNING.format(
            model='system = "bus_loop.toml"\nblock = "bus"',
            controller="",
            step=step,
            initial=initial,
            inputs=f'[scenario.inputs]\ncurrent_ref = "{ref[0]}"',
            reference="current_ref",
        ).replace('to = "40A"', f'to = "{ref[1]}"'),
    )
    return Problem(load_tuning(path), file=str(path))


def _controller_case(write, *, step="10us", sample_time=None):
    sampling = f'sample_time = "{sample_time}"' if sample_time else ""
    path = write(
        "controller_tuning.toml",
        TUNING.format(
            model=f'circuit = "{BUS}"',
            controller=(
                '[controller]\nmeasurement = "i_motor"\ncommand = "Vm"\nkp = 0.63\n'
                f'ki = 157.0\nreference = "30A"\n{sampling}'
            ),
            step=step,
            initial="steady_state",
            inputs="",
            reference="reference",
        ),
    )
    return Problem(load_tuning(path), file=str(path))


def test_continuous_loop_matches_python_control_interconnect(write):
    # reference: python-control's interconnect (ComposedSystem.state_space) joins the same
    # blocks numerically; the tuning closure must give the same A and the same B, C, D
    # columns and rows for the external signals (exact algebra: 1e-9 relative)
    model = _system_case(write, sensor=True)
    loop = model.system_loop
    reference = loop.system.state_space()
    part = loop.continuous_part(model.block.A, model.block.B, model.block.C, model.block.D)
    assert loop.states == list(reference.state_labels)
    scale = np.abs(reference.A).max()
    np.testing.assert_allclose(part.A, reference.A, rtol=0, atol=1e-9 * scale)
    rows = [
        loop.continuous_outputs.index(loop.system.external_outputs[o])
        for o in reference.output_labels
    ]
    np.testing.assert_allclose(part.B, reference.B, rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(part.C[rows], reference.C, rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(part.D[rows], reference.D, rtol=1e-9, atol=1e-12)


@pytest.mark.parametrize("sample_time", [None, "20us"])
def test_system_file_reproduces_the_controller_table_loop(write, sample_time):
    # the same PI loop written two ways: as a [controller] table (closed by
    # wirestate.tune.loop's feedback formula) and as a system file (closed by the general
    # wiring algebra); trajectories must agree to rounding (1e-9 of the bus voltage)
    step = sample_time or "10us"
    by_system = _system_case(write, sample_time=sample_time, step=step)
    by_table = _controller_case(write, sample_time=sample_time, step=step)
    values = {"Rd": 0.3, "Cd": 300e-6}
    ev_s, ev_t = by_system.numeric(values), by_table.numeric(values)
    for name in ("v_bus", "i_motor", "i__Rd"):
        ys = ev_s.Y[by_system.outputs.index(name)]
        yt = ev_t.Y[by_table.outputs.index(name)]
        np.testing.assert_allclose(ys, yt, rtol=1e-9, atol=1e-9 * np.abs(yt).max())


def test_system_path_reaches_the_controller_table_optimum(write):
    # one NLP, two closures: the optima must agree to IPOPT's tolerance (1e-6 relative)
    a = solve_nlp(_system_case(write)).values
    b = solve_nlp(_controller_case(write)).values
    for name in a:
        assert a[name] == pytest.approx(b[name], rel=1e-6)


@pytest.mark.parametrize(("delay", "step"), [(True, "20us"), (False, "20us"), (True, "5us")])
def test_sampled_loop_with_delay_and_sensor_matches_the_hybrid_simulator(write, delay, step):
    # reference: wirestate.simulate.hybrid (the piecewise-exact ZOH engine with its own
    # sample-instant ordering) on the same system file; both exact at the samples, so
    # agreement to rounding (1e-8 of the signal's range)
    # (step 5us: four output steps per sample, the outputs between the samples included)
    model = _system_case(write, sample_time="20us", delay=delay, sensor=True, scale=True,
                         step=step, initial="zero", ref=("15A", "20A"))  # fmt: skip
    ev = model.numeric({})
    result = simulate_system(
        model.system_loop.system,
        6e-3,
        model.output_step,
        {"current_ref": "step:20A,at=1.01ms,from=15A"},
    )
    np.testing.assert_allclose(result.time, model.times, rtol=0, atol=1e-15)
    for name in ("v_bus", "i_motor", "v_inverter", "probe"):
        ours = ev.Y[model.outputs.index(name)]
        theirs = result.outputs[result.output_names.index(name)]
        assert theirs.shape == ours.shape
        span = np.ptp(theirs)
        np.testing.assert_allclose(ours, theirs, rtol=0, atol=1e-8 * span)


@pytest.mark.parametrize("path", ["system", "controller"])
def test_symbolic_matrices_equal_the_numeric_ones(write, path):
    # the CasADi path (tuning) against the numpy path (verification) at a perturbed point,
    # with two output steps per sample (the maps between the samples included)
    import casadi

    if path == "system":
        model = _system_case(write, sample_time="20us", delay=True, sensor=True, step="10us")
    else:
        model = _controller_case(write, sample_time="20us", step="10us")
    values = {"Rd": 0.41, "Cd": 530e-6}
    numeric = model.numeric(values)
    symbolic = {k: casadi.DM(v) for k, v in values.items()}
    ev = model.symbolic(symbolic)
    for key in ("Phi", "Gamma", "C", "D"):
        ref = getattr(numeric, key)
        got = np.array(casadi.evalf(getattr(ev, key)), dtype=float)
        np.testing.assert_allclose(got, ref, rtol=1e-10, atol=1e-12 * max(np.abs(ref).max(), 1))
    # the outputs between the samples from the numeric states, through the symbolic maps
    given = model.parametric().symbolic(symbolic, X=casadi.DM(numeric.X))
    Y = np.vstack(
        [np.array(casadi.evalf(given.output(i, slice(None)))).T for i in range(len(model.outputs))]
    )
    assert Y.shape == numeric.Y.shape == (len(model.outputs), 2 * model.n_steps + 1)
    np.testing.assert_allclose(Y, numeric.Y, rtol=1e-10, atol=1e-10 * np.abs(numeric.Y).max())


def test_a_scenario_step_that_does_not_divide_the_period_is_refused(write):
    with pytest.raises(TuningError, match="must divide the sample time"):
        _system_case(write, sample_time="20us", step="15us")
    with pytest.raises(TuningError, match="must divide the sample time"):
        _controller_case(write, sample_time="20us", step="15us")


def test_controller_table_and_system_agree_between_the_samples(write):
    # the two closures' maps between the samples, on the same loop (no delay, no sensor):
    # 1e-9 of the bus voltage at every 5 us output step of a 20 us sampled PI
    values = {"Rd": 0.3, "Cd": 300e-6}
    system = _system_case(write, sample_time="20us", step="5us")
    table = _controller_case(write, sample_time="20us", step="5us")
    by_system, by_table = system.numeric(values), table.numeric(values)
    assert by_table.Y.shape[1] == 4 * table.n_steps + 1
    for name in ("v_bus", "i__Rd"):
        yt = by_table.Y[table.outputs.index(name)]
        ys = by_system.Y[system.outputs.index(name)]
        np.testing.assert_allclose(ys, yt, rtol=1e-9, atol=1e-9 * np.abs(yt).max())


def _limited(write, limits: str, sample_time: str | None = "20us") -> Path:
    # the current loop (sampled, or continuous with None) with command limits, tuned with
    # 10 us output steps
    _system(write, sample_time=sample_time)
    path = write(
        "system_tuning.toml",
        TUNING.format(
            model='system = "bus_loop.toml"\nblock = "bus"', controller="", step="10us",
            initial="steady_state", inputs='[scenario.inputs]\ncurrent_ref = "30A"',
            reference="current_ref",
        ),
    )  # fmt: skip
    loop_file = path.parent / "bus_loop.toml"
    loop_file.write_text(
        loop_file.read_text().replace('unit = "V"', f'unit = "V"\noutput_limits = {limits}', 1)
    )
    return path


def test_limited_controller_commands_become_limits_and_the_result_holds_with_limits(
    write, tmp_path, capsys
):
    # the command of a controller with output limits is kept inside them by two limits,
    # so the linear loop the optimiser uses is exact; checked against the hybrid
    # simulator running the limited controller (saturation and anti-windup included)
    path = _limited(write, '["0V", "45V"]')
    report = tmp_path / "report.json"
    # exit status 1: every limit holds at the preferred values, but the deviation fails at
    # a tolerance corner (this case is not robust), and the verdict says so
    assert main(["tune", str(path), "--json", str(report)]) == 1
    data = json.loads(report.read_text())
    assert data["verdict"]["limits_met"] and data["verdict"]["corners_met"] is False
    names = {row["name"]: row for row in data["limits"]}
    assert {"current_loop_command_max", "current_loop_command_min"} <= set(names)
    assert all(row["margin"] > 0 for row in names.values())
    preferred = {n: v["preferred"] for n, v in data["variables"].items()}
    model = Problem(load_tuning(path), file=str(path))
    ev = model.numeric(preferred)
    system_file = path.parent / "bus_loop.toml"
    values = ", ".join(f'{n} = "{v!r}"' for n, v in preferred.items())
    system_file.write_text(
        system_file.read_text().replace(
            'kind = "circuit"', f'kind = "circuit"\nvalues = {{ {values} }}', 1
        )
    )
    # the hybrid run starts from rest; start the tuning model from rest too
    x0 = np.zeros(ev.X.shape[0])
    ev = model.numeric(preferred, initial=x0)
    result = simulate_system(
        load_system(system_file), 6e-3, 10e-6, {"current_ref": "step:40A,at=1.01ms,from=30A"}
    )
    for name in ("v_bus", "v_inverter"):
        ours = ev.Y[model.outputs.index(name)]
        theirs = result.outputs[result.output_names.index(name)]
        np.testing.assert_allclose(ours, theirs, rtol=0, atol=1e-8 * np.ptp(theirs))
    # the command stays under its ceiling all along (the limits never act)
    command = ev.Y[model.outputs.index("u__current_loop")]
    assert command.max() <= 45.0 + 1e-9


def test_limits_the_command_cannot_meet_end_infeasible_naming_them(write, capsys):
    # a 10 A reference step asks for about 6 V more at once (kp = 0.63 V/A) on top of the
    # 35.5 V operating point: a 40 V ceiling cannot be met by any Rd, Cd
    path = _limited(write, '["0V", "40V"]')
    code = main(["tune", str(path)])
    err = capsys.readouterr().err
    assert code == 2 and "current_loop_command_max" in err and "Traceback" not in err


@pytest.mark.parametrize(
    ("change", "fragment"),
    [
        (('block = "bus"', 'block = "current_loop"'), "not a circuit block"),
        (('block = "bus"', 'block = "bus"\ncircuit = "x.toml"'), "exactly one of"),
        (('block = "bus"\n', ""), "'block' names the circuit block"),
        (('system = "bus_loop.toml"', 'system = "absent.toml"'), "tuning.system"),
    ],
)
def test_header_mistakes_name_the_field(write, change, fragment, capsys):
    _system(write)
    text = TUNING.format(
        model='system = "bus_loop.toml"\nblock = "bus"\n', controller="", step="10us",
        initial="steady_state", inputs='[scenario.inputs]\ncurrent_ref = "30A"',
        reference="current_ref",
    ).replace(*change)  # fmt: skip
    path = write("system_tuning.toml", text)
    code = main(["tune", str(path)])
    err = capsys.readouterr().err
    assert code == 2 and err.startswith("error: ") and fragment in err


def test_an_impedance_limit_on_a_sampled_system_is_refused(write):
    _system(write, sample_time="20us")
    text = TUNING.format(
        model='system = "bus_loop.toml"\nblock = "bus"', controller="", step="20us",
        initial="steady_state", inputs='[scenario.inputs]\ncurrent_ref = "30A"',
        reference="current_ref",
    ) + (
        '\n[[limits]]\nname = "port"\nkind = "output_impedance"\ninput = "Iport"\n'
        'output = "v_bus"\nband = ["100Hz", "10kHz"]\nmax = "1ohm"\n'
    )  # fmt: skip
    path = write("system_tuning.toml", text)
    with pytest.raises(TuningError, match="needs a continuous loop"):
        Problem(load_tuning(path), file=str(path))


def test_a_controller_table_beside_a_system_is_refused(write):
    _system(write)
    text = TUNING.format(
        model='system = "bus_loop.toml"\nblock = "bus"',
        controller=(
            '[controller]\nmeasurement = "i_motor"\ncommand = "Vm"\nkp = 1.0\n'
            "ki = 1.0"
        ),
        step="10us", initial="steady_state", inputs="", reference="current_ref",
    )  # fmt: skip
    path = write("system_tuning.toml", text)
    with pytest.raises(WirestateError, match="remove the"):
        load_tuning(path)


def _evaluation(Phi, symbolic: bool):
    import casadi

    from wirestate.tune.evaluation import Evaluation

    P = casadi.DM(Phi) if symbolic else Phi
    return Evaluation(P, None, None, None, None, None, None, None, {}, symbolic)


@pytest.mark.parametrize("seed", range(12))
def test_sampled_pole_tests_agree_with_the_eigenvalues(seed):
    # reference: numpy's eigenvalues. A real-part limit on a sampled loop must hold
    # exactly when every s = ln(z) / T has Re s <= sigma (the disc test is exact); a
    # damping-ratio limit when every s = ln(z) / T has a damping ratio -Re s / |s| >=
    # zeta (the verification's definition, issue 9.1). Random loops, cases within 1e-6 of
    # the bound skipped.
    from types import SimpleNamespace

    import casadi

    from wirestate.spec.tuning import Limit
    from wirestate.tune import limits

    rng = np.random.default_rng(seed)
    n, T = int(rng.integers(2, 7)), 50e-6
    Phi = rng.normal(size=(n, n))
    Phi *= rng.uniform(0.6, 1.1) / np.max(np.abs(np.linalg.eigvals(Phi)))
    model = SimpleNamespace(sampled=True, step=T)
    z = np.linalg.eigvals(Phi)
    s = np.log(z.astype(complex)) / T
    sigma = float(np.max(s.real)) + rng.uniform(-2000.0, 2000.0)
    zeta = float(rng.uniform(0.05, 0.6))
    damping = -s.real / np.abs(s)
    cases = [
        (Limit(kind="pole_real_part", max=sigma), float(np.max(s.real)) < sigma,
         abs(np.max(s.real) - sigma) / abs(sigma)),
        (Limit(kind="damping_ratio", min=zeta), bool(np.all(damping >= zeta)),
         float(np.min(np.abs(damping - zeta)))),
    ]  # fmt: skip
    for limit, holds, distance in cases:
        if distance < 1e-6:
            continue
        excess = limits.pole_excess(limit, _evaluation(Phi, True), _evaluation(Phi, False), model)
        entries = np.array(casadi.evalf(excess)).ravel()
        assert bool(np.all(entries < 0)) == holds, (limit.kind, entries)


def test_a_sampled_pole_limit_is_imposed_and_verified(write, capsys):
    # the loop's slowest pole, about -250 1/s (the PI zero at Ra/La, which Rd and Cd do
    # not move), lies past a -230 1/s limit: feasible (exit status 1: not robust, the
    # deviation fails at a tolerance corner); a -300 1/s limit cannot be met (status 2)
    _system(write, sample_time="20us")
    for sigma, code in (("-230", 1), ("-300", 2)):
        text = TUNING.format(
            model='system = "bus_loop.toml"\nblock = "bus"', controller="", step="10us",
            initial="steady_state", inputs='[scenario.inputs]\ncurrent_ref = "30A"',
            reference="current_ref",
        ) + f'\n[[limits]]\nname = "poles"\nkind = "pole_real_part"\nmax = "{sigma}"\n'  # fmt: skip
        path = write("system_tuning.toml", text)
        assert main(["tune", str(path)]) == code
        captured = capsys.readouterr()
        if code == 2:
            assert "poles" in captured.err
        else:
            assert "sampled loop poles" in captured.out


def test_a_system_composed_in_python_tunes_like_its_file(write):
    # the same loop as the file case (sampled PI, sensor filter), built with compose():
    # the sensor is a plain python-control StateSpace; both optima agree to IPOPT's
    # tolerance (1e-6 relative)
    import control

    from wirestate.blocks import PIDController
    from wirestate.compose import compose
    from wirestate.reduce import load_block
    from wirestate.spec.tuning import parse_tuning

    sensor = control.ss(
        [[-1 / 5e-6]], [[1 / 5e-6]], [[1.0]], [[0.0]], name="current_sensor",
        inputs=["signal"], outputs=["measured"], states=["measured"],
    )  # fmt: skip
    system = compose(
        {
            "bus": load_block(BUS),
            "current_sensor": sensor,
            "current_loop": PIDController(
                name="current_loop", kp=0.63, ki=157.0, sample_time=20e-6, unit="V"
            ),
        },
        {
            "bus.Vm": "current_loop.command",
            "current_sensor.signal": "bus.i_motor",
            "current_loop.measurement": "current_sensor.measured",
        },
        {
            "current_ref": "current_loop.reference",
            "Vbat": "bus.Vbat",
            "Iport": "bus.Iport",
            "Eb": "bus.Eb",
        },  # fmt: skip
        {"v_bus": "bus.v_bus", "i_motor": "bus.i_motor", "v_inverter": "current_loop.command"},
        name="bus_loop",
    )
    file_model = _system_case(write, sample_time="20us", sensor=True, step="10us")
    data = tomllib.loads(Path(file_model.file).read_text())
    del data["tuning"]["system"]
    in_python = solve(parse_tuning(data), system=system)
    from_file = solve(load_tuning(file_model.file))
    for name, entry in in_python.variables.items():
        assert entry["optimum"] == pytest.approx(from_file.variables[name]["optimum"], rel=1e-6)


def test_a_continuous_controller_with_limits_is_tuned_with_its_command_kept_inside(write):
    # a continuous PI with output limits is a nonlinear block for the simulator; the tuning
    # takes its unsaturated dynamics and keeps its command inside the limits
    path = _limited(write, '["0V", "45V"]', sample_time=None)
    model = Problem(load_tuning(path), file=str(path))
    assert not model.sampled and "u__current_loop" in model.outputs
    result = solve(load_tuning(path))
    rows = {row["name"]: row for row in result.limits}
    assert rows["current_loop_command_max"]["margin"] > 0
    assert result.feasible
