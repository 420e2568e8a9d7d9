"""What ``wirestate inspect`` shows for each file kind: circuits, systems and tuning files.

A circuit is described by :func:`wirestate.report.tables.block_summary`. A system file gets
its blocks (kind, how each runs, states), every block signal with its unit and where it
comes from or goes to, the external inputs and outputs, and the poles of its loop. A tuning
file gets the circuit or system being tuned, the design variables, the controller, the
scenario, the limits and the objective, and the poles of the loop at the starting values.

The loop of a system with sampled blocks is the discrete loop over one sample period that
the tuning optimiser forms (:class:`wirestate.tune.wiring.SystemLoop`, the sample-instant
order of the hybrid simulator), shown through ``s = ln(z) / T``; controllers with output
limits enter with their unsaturated dynamics (the small-signal loop inside the limits).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from wirestate.report.tables import (
    block_json,
    block_summary,
    listed_poles,
    pole_entries,
    pole_table,
    table,
)
from wirestate.units import format_count as count
from wirestate.units import format_quantity


@dataclass
class Inspection:
    """One inspected file: the text, the JSON object and what its figure draws.

    ``poles`` are in rad/s (a sampled loop's through ``s = ln(z) / T``); ``linear`` is a
    continuous model with ``A, B, C, D`` and signal names for the Bode plot, or ``None``.
    """

    kind: str
    name: str
    summary: str
    data: dict[str, Any]
    poles: np.ndarray
    linear: Any = None
    units: dict[str, str] = field(default_factory=dict)
    sample_time: float | None = None


# -- file kinds ---------------------------------------------------------------------------


def file_kind(data: dict[str, Any]) -> str:
    """``"circuit"``, ``"system"`` or ``"tuning"`` from a parsed file's top-level table.

    A file with none of these tables is read as a circuit, so its message names what a
    circuit file lacks.
    """
    for kind in INSPECTORS:
        if isinstance(data.get(kind), dict):
            return kind
    return "circuit"


def inspect_file(path: str | Path) -> Inspection:
    """Read, validate and describe a circuit, system or tuning file.

    Raises
    ------
    WirestateError
        Whatever loading the file raises (one message naming the file and field).
    """
    from wirestate.errors import WirestateError
    from wirestate.spec.load import read_toml

    data = read_toml(path)
    try:
        return INSPECTORS[file_kind(data)](Path(path), data)
    except WirestateError as exc:
        raise exc.with_file(str(path)) from None


def _circuit(path: Path, data: dict[str, Any]) -> Inspection:
    from wirestate.reduce import compile_circuit
    from wirestate.spec import parse_circuit

    block = compile_circuit(parse_circuit(data, file=str(path)))
    return circuit_inspection(block)


def circuit_inspection(block: Any) -> Inspection:
    """The inspection of a compiled :class:`~wirestate.lti.CircuitBlock`."""
    return Inspection(
        "circuit",
        block.name,
        block_summary(block),
        {"kind": "circuit", **block_json(block)},
        listed_poles(block)[0],
        linear=block,
        units=dict(block.units),
    )


# -- systems ------------------------------------------------------------------------------


def _system(path: Path, data: dict[str, Any]) -> Inspection:
    from wirestate.compose import system_from_spec
    from wirestate.spec.system import parse_system

    system = system_from_spec(parse_system(data, file=str(path)), file=path)
    return system_inspection(system, kinds=_block_kinds(data))


def _block_kinds(data: dict[str, Any]) -> dict[str, str]:
    blocks = data.get("blocks", {})
    return {name: str(table.get("kind", "")) for name, table in blocks.items()}


@dataclass
class LoopPoles:
    """Poles of a system's loop: continuous (rad/s), or a sampled loop's ``z`` with
    ``s = ln(z) / T``."""

    poles: np.ndarray
    sample_time: float | None = None
    z: np.ndarray | None = None
    linear: Any = None
    note: str = ""


def system_loop_poles(system: Any) -> LoopPoles:
    """The poles of a composed system's loop (see the module docstring).

    A system of continuous linear blocks gives the poles of its state space. With
    sampled blocks (one common period) the loop is discrete; without a circuit block
    the discrete loop is not formed and the poles are left out with a note.
    """
    from wirestate.compose import SAMPLED

    if system.is_linear:
        sys = system.state_space()
        return LoopPoles(np.asarray(sys.poles(), dtype=complex), linear=system)
    if not any(b.category == SAMPLED for b in system.blocks.values()):
        linear = _unsaturated(system)
        return LoopPoles(
            np.asarray(linear.state_space().poles(), dtype=complex),
            linear=linear,
            note="controllers with output limits taken unsaturated: the loop inside the limits",
        )
    return _sampled_loop(system)


def _unsaturated(system: Any) -> Any:
    """The same system with every limited continuous controller unsaturated (linear)."""
    import dataclasses

    from wirestate.blocks import PIDController
    from wirestate.compose import ComposedSystem, view

    blocks = {}
    for name, b in system.blocks.items():
        if isinstance(b.source, PIDController) and b.source.is_limited:
            free = dataclasses.replace(b.source, output_limits=None)
            b = dataclasses.replace(view(free, name), units=dict(b.units))
        blocks[name] = b
    return ComposedSystem(
        system.name, blocks, system.wiring, system.external_inputs, system.external_outputs,
        system.units, system.input_defaults, system.file,
    )  # fmt: skip


def _sampled_loop(system: Any) -> LoopPoles:
    from wirestate.lti import CircuitBlock
    from wirestate.simulate.discretize import zoh
    from wirestate.tune.wiring import SystemLoop

    circuits = [n for n, b in system.blocks.items() if isinstance(b.source, CircuitBlock)]
    periods = system.sample_times
    if not circuits or len(periods) != 1:
        reason = (
            "it has no circuit block" if not circuits else "its blocks sample at several periods"
        )
        return LoopPoles(np.zeros(0, dtype=complex), note=f"loop poles not formed: {reason}")
    design = circuits[0]
    block = system.blocks[design].source
    loop = SystemLoop(system, design, list(block.outputs))
    part = loop.continuous_part(block.A, block.B, block.C, block.D)
    T = float(periods[0])
    hold = zoh(part.A, part.B, T)
    Phi, *_ = loop.discrete(part, hold.Ad, hold.Bd)
    z = np.linalg.eigvals(Phi) if Phi.size else np.zeros(0, dtype=complex)
    return LoopPoles(
        sampled_to_continuous(z, T),
        sample_time=T,
        z=z,
        note=f"sampled loop over T = {format_quantity(T, 's')}: s = ln(z) / T; controllers "
        "with output limits taken unsaturated",
    )


def sampled_to_continuous(z: np.ndarray, T: float) -> np.ndarray:
    """``s = ln(z) / T`` on the principal branch; ``z = 0`` (a pure delay) gives ``-inf``."""
    z = np.asarray(z, dtype=complex)
    out = np.full(z.shape, -np.inf + 0j)
    nonzero = np.abs(z) > 0
    out[nonzero] = np.log(z[nonzero]) / T
    return out


def _signal_units(system: Any) -> dict[str, str]:
    """Unit of every ``block.signal``; an input without a unit of its own takes the unit
    of what drives it (a gain block's input, for example)."""
    units = {}
    for b in system.blocks.values():
        for s in (*b.inputs, *b.outputs):
            units[f"{b.name}.{s}"] = b.units.get(s, "")
    for dest, src in system.wiring.items():
        if not units.get(dest):
            units[dest] = units.get(src, "")
    for ext, dests in system.external_inputs.items():
        for dest in dests:
            if not units.get(dest):
                units[dest] = system.units.get(ext, "")
    return units


def _how_it_runs(b: Any) -> str:
    from wirestate.blocks import PIDController
    from wirestate.compose import LINEAR, SAMPLED

    if b.category == SAMPLED:
        text = f"sampled every {format_quantity(float(b.sample_time), 's')}"
    elif b.category == LINEAR:
        text = "continuous, linear"
    else:
        text = "continuous, nonlinear"
    if isinstance(b.source, PIDController) and b.source.is_limited:
        low, high = b.source.limits
        unit = b.source.unit
        text += (
            f"; command limited to [{format_quantity(low, unit)}, {format_quantity(high, unit)}]"
        )
        if b.source.delay:
            text += "; one-sample delay"
    elif isinstance(b.source, PIDController) and b.source.delay:
        text += "; one-sample delay"
    return text


def _connections(system: Any) -> dict[str, list[str]]:
    """``block.signal`` -> where it comes from (inputs) or goes to (outputs), as text."""
    links: dict[str, list[str]] = {}
    for dest, src in system.wiring.items():
        links.setdefault(dest, []).append(f"from {src}")
        links.setdefault(src, []).append(f"to {dest}")
    for ext, dests in system.external_inputs.items():
        for dest in dests:
            links.setdefault(dest, []).append(f"from external input {ext}")
    for ext, src in system.external_outputs.items():
        links.setdefault(src, []).append(f"external output {ext}")
    return links


def system_inspection(system: Any, *, kinds: dict[str, str] | None = None) -> Inspection:
    """The inspection of a :class:`~wirestate.compose.ComposedSystem`.

    ``kinds`` gives the system file's block kinds (``pi``, ``torsional_shaft``...); blocks
    built in Python are described by their class.
    """
    kinds = kinds or {}
    loop = system_loop_poles(system)
    units = _signal_units(system)
    links = _connections(system)
    n_states = sum(len(b.states) for b in system.blocks.values())
    out = [
        f"system {system.name}: {count(len(system.blocks), 'block')}, "
        f"{count(n_states, 'state')}, {count(len(system.inputs), 'input')}, "
        f"{count(len(system.outputs), 'output')}"
    ]
    out += ["", "blocks"]
    rows = [
        (name, kinds.get(name) or type(b.source).__name__, _how_it_runs(b), len(b.states))
        for name, b in system.blocks.items()
    ]
    out.append(table(("block", "kind", "runs", "states"), rows))
    out += ["", "signals (unit; where each input comes from and each output goes)"]
    rows = []
    for name, b in system.blocks.items():
        for role, signals in (("input", b.inputs), ("output", b.outputs)):
            for s in signals:
                key = f"{name}.{s}"
                rows.append(
                    (name, role, s, units.get(key) or "-", "; ".join(links.get(key, ["unused"])))
                )
        for s in b.states:
            rows.append((name, "state", s, b.units.get(s) or "-", ""))
    out.append(table(("block", "role", "signal", "unit", "connection"), rows))
    out += ["", "external signals"]
    rows = [
        ("input", ext, system.units.get(ext) or "-", ", ".join(dests))
        for ext, dests in system.external_inputs.items()
    ]
    rows += [
        ("output", ext, system.units.get(ext) or "-", src)
        for ext, src in system.external_outputs.items()
    ]
    out.append(table(("role", "name", "unit", "block signal"), rows) if rows else "  (none)")
    out += ["", "loop poles" + (f" ({loop.note})" if loop.note else "")]
    out.append(pole_table(loop.poles, z=loop.z))
    notes = _block_notes(system)
    if notes:
        out += ["", "notes", *(f"  {n}" for n in notes)]
    data = {
        "kind": "system",
        "name": system.name,
        "blocks": [
            {
                "name": name,
                "kind": kinds.get(name) or type(b.source).__name__,
                "category": b.category,
                "sample_time": b.sample_time,
                "states": [{"name": s, "unit": b.units.get(s, "")} for s in b.states],
                "inputs": _signals_json(name, b.inputs, units, links),
                "outputs": _signals_json(name, b.outputs, units, links),
            }
            for name, b in system.blocks.items()
        ],
        "wiring": dict(system.wiring),
        "inputs": {k: list(v) for k, v in system.external_inputs.items()},
        "outputs": dict(system.external_outputs),
        "units": dict(system.units),
        "loop": _loop_json(loop),
        "notes": notes,
    }
    return Inspection(
        "system",
        system.name,
        "\n".join(out),
        data,
        loop.poles,
        linear=loop.linear,
        units=dict(system.units),
        sample_time=loop.sample_time,
    )


def _signals_json(block: str, signals: list[str], units: dict, links: dict) -> list[dict]:
    return [
        {"name": s, "unit": units.get(f"{block}.{s}", ""),
         "connection": links.get(f"{block}.{s}", [])}
        for s in signals
    ]  # fmt: skip


def _loop_json(loop: LoopPoles) -> dict[str, Any]:
    data: dict[str, Any] = {"sample_time": loop.sample_time, "note": loop.note}
    data.update(pole_entries(loop.poles, z=loop.z))
    return data


def _block_notes(system: Any) -> list[str]:
    from wirestate.lti import CircuitBlock

    return [
        f"{name}: {note}"
        for name, b in system.blocks.items()
        if isinstance(b.source, CircuitBlock)
        for note in b.source.notes
    ]


# -- tuning files -------------------------------------------------------------------------

#: the unit a limit's bound is read in, by kind (the output's own unit for maximum/minimum)
_BOUND_UNITS = {
    "peak_current": "A",
    "energy": "J",
    "damping_ratio": "",
    "pole_real_part": "1/s",
    "output_impedance": "ohm",
}


def _tuning(path: Path, data: dict[str, Any]) -> Inspection:
    from wirestate.tune import load_tuning

    return tuning_inspection(load_tuning(path), file=str(path))


def _limit_text(limit: Any, units: dict[str, str]) -> tuple[str, str]:
    """(what the limit watches, its bound as text)."""
    kind = limit.kind
    target = limit.output or (f"part {limit.part}" if limit.part else "every loop pole")
    if kind == "output_impedance":
        target = f"{limit.output} per {limit.input}"
    if kind in ("overshoot", "settling"):
        width = limit.max if kind == "overshoot" else limit.band
        start = limit.after if kind == "overshoot" else limit.by
        word = "after" if kind == "overshoot" else "from"
        bound = (
            f"{100 * width:.3g} % of the {limit.relative_to} {word} {format_quantity(start, 's')}"
        )
        return target, bound
    unit = _BOUND_UNITS.get(kind, units.get(limit.output or "", ""))
    parts = []
    if limit.min is not None:
        parts.append(f">= {format_quantity(limit.min, unit)}")
    if limit.max is not None:
        parts.append(f"<= {format_quantity(limit.max, unit)}")
    text = ", ".join(parts)
    if kind == "output_impedance":
        low, high = limit.band
        text += f" from {format_quantity(low, 'Hz')} to {format_quantity(high, 'Hz')}"
    if getattr(limit, "window", None):
        low, high = limit.window
        text += f" from {format_quantity(low, 's')} to {format_quantity(high, 's')}"
    return target, text


def switched_tuning_inspection(spec: Any, *, file: str | None = None) -> Inspection:
    """The inspection of a tuning over switching transients (issue 12): what it sizes, the
    loop the optimiser found (switch, modulator, sampled PI), the limits and the system."""
    from wirestate.tune.switched_problem import SIZED_KINDS, SwitchedProblem

    problem = SwitchedProblem(spec, file=file)
    start = problem.start_values()
    out = [f"tuning {spec.name}: sizes {', '.join(problem.variables)} of switched block "
           f"{problem.block} of system {problem.system.name} ({spec.system_path})"]  # fmt: skip
    rows = []
    for name in problem.variables:
        part, var = problem.circuit_spec.parts[name], spec.variables[name]
        unit = SIZED_KINDS[part.kind]
        rows.append((name, part.kind, format_quantity(var.min, unit),
                     format_quantity(var.max, unit), format_quantity(start[name], unit),
                     format_quantity(part.value, unit)))  # fmt: skip
    out += [
        "",
        "design variables",
        table(("part", "kind", "min", "max", "start", "in the circuit file"), rows),
    ]
    out += ["", f"switching: {problem.switch} driven by a sawtooth modulator at "
            f"{format_quantity(1 / problem.period, 'Hz')}; the sampled PI "
            f"{problem.controller} holds {problem.measure} x {problem.gain:.6g} on "
            f"{problem.reference:g} (limits judged on one period in steady state)"]  # fmt: skip
    limits = [(lim.label, lim.kind, lim.output or lim.part or lim.input or "",
               "" if (lim.max if lim.max is not None else lim.min) is None
               else f"{(lim.max if lim.max is not None else lim.min):g}")
              for lim in spec.limits]  # fmt: skip
    out += ["", "limits", table(("name", "kind", "on", "bound (SI)"), limits)]
    blocks = [
        (name, view.category, ", ".join(view.inputs), ", ".join(view.outputs))
        for name, view in problem.system.blocks.items()
    ]
    out += ["", f"blocks of system {problem.system.name}",
            table(("block", "category", "inputs", "outputs"), blocks)]  # fmt: skip
    data = {
        "kind": "tuning",
        "name": spec.name,
        "switched": True,
        "variables": list(problem.variables),
        "limits": [{"name": n, "kind": k, "on": o, "bound": b} for n, k, o, b in limits],
    }
    return Inspection("tuning", spec.name, "\n".join(out), data, np.zeros(0, complex))


def tuning_inspection(spec: Any, *, file: str | None = None) -> Inspection:
    """The inspection of a validated tuning file: what it sizes, under which limits, and
    the loop at the starting values of the design variables."""
    from wirestate.reduce import compile_circuit
    from wirestate.spec.load import read_toml
    from wirestate.tune.model import COMMAND_PREFIX, TuningModel
    from wirestate.tune.nlp import start_values
    from wirestate.tune.switched_problem import is_switched_tuning

    if is_switched_tuning(spec):
        return switched_tuning_inspection(spec, file=file)
    model = TuningModel(spec, file=file)
    original, spec = spec, model.spec
    start = start_values(model)
    evaluation = model.numeric(start)
    circuit = model.block
    part_units = {"resistor": "ohm", "capacitor": "F", "inductor": "H"}
    if spec.system_path is not None:
        what = (
            f"circuit block {spec.tuning.block} of system {model.system_loop.system.name} "
            f"({spec.system_path})"
        )
    else:
        what = f"circuit {circuit.name} ({spec.circuit_path})"
    out = [f"tuning {spec.name}: sizes {', '.join(model.variables)} of {what}"]
    out += ["", "design variables"]
    rows = []
    variables = {}
    for name in model.variables:
        part = model.base_circuit.parts[name]
        unit = part_units[part.kind]
        var = spec.variables[name]
        rows.append(
            (name, part.kind, format_quantity(var.min, unit), format_quantity(var.max, unit),
             format_quantity(start[name], unit), format_quantity(part.value, unit))
        )  # fmt: skip
        variables[name] = {
            "kind": part.kind, "unit": unit, "min": float(var.min), "max": float(var.max),
            "start": float(start[name]), "file_value": float(part.value),
        }  # fmt: skip
    out.append(table(("part", "kind", "min", "max", "start", "in the circuit file"), rows))
    ctrl = spec.controller
    if ctrl is not None:
        runs = (
            f"sampled every {format_quantity(ctrl.sample_time, 's')}"
            if ctrl.sample_time
            else "continuous"
        )
        out += [
            "",
            f"controller: PI measuring {ctrl.measure}, driving {ctrl.drive}, "
            f"kp = {ctrl.proportional:g}, ki = {ctrl.integral:g} /s, {runs}",
        ]
    scenario = spec.scenario
    out += [
        "",
        f"scenario: {format_quantity(scenario.horizon, 's')} in steps of "
        f"{format_quantity(scenario.step, 's')}, starting from "
        + ("the steady state" if scenario.initial == "steady_state" else "zero")
        + (
            " with " + ", ".join(scenario.initial_values) + " set"
            if scenario.initial_values
            else ""
        ),
    ]
    for step in scenario.steps:
        unit = model.units.get(step.input, "")
        if not unit and ctrl is not None and step.input == "reference":
            unit = model.units.get(ctrl.measure, "")
        out.append(
            f"  {step.input} steps to {format_quantity(step.to, unit)} at "
            f"{format_quantity(step.at, 's')}"
        )
    for name, text in scenario.waveforms.items():
        out.append(f"  {name} = {text}")
    out += ["", "limits"]
    rows = []
    limits = []
    own = {limit.label for limit in original.limits}
    for limit in spec.limits:
        target, bound = _limit_text(limit, model.units)
        kind = limit.kind
        if limit.label not in own:
            # added by the model: a limited controller's command kept inside its range
            kind += " (added)"
            target = f"command of {target.removeprefix(COMMAND_PREFIX)}"
        rows.append((limit.label, kind, target, bound))
        limits.append({"name": limit.label, "kind": limit.kind, "on": target, "bound": bound})
    out.append(table(("name", "kind", "on", "bound"), rows) if rows else "  (none)")
    objective = spec.objective
    terms = [
        f"{label} (weight {weight:g})"
        for label, weight in (
            (f"capacitance of {', '.join(objective.parts)}", objective.capacitance),
            (f"energy in {', '.join(objective.parts)}", objective.resistor_energy),
            (f"squared error of {objective.output}", objective.ise),
            ("peak output impedance", objective.peak_impedance),
        )
        if weight
    ]
    out += ["", "objective: least " + " + ".join(terms)]
    poles, z, T = _tuning_loop_poles(model, evaluation)
    at = ", ".join(
        f"{n} = {format_quantity(start[n], variables[n]['unit'])}" for n in model.variables
    )
    heading = f"loop poles at the starting values ({at})"
    if T is not None:
        heading += f"; sampled loop over T = {format_quantity(T, 's')}, s = ln(z) / T"
    out += ["", heading, pole_table(poles, z=z)]
    if spec.system_path is not None:
        inner = _system(spec.system_path, read_toml(spec.system_path))
    else:
        inner = circuit_inspection(compile_circuit(model.base_circuit))
    out += ["", "the model being tuned, as its file gives it", _indent(inner.summary)]
    data = {
        "kind": "tuning",
        "name": spec.name,
        "model": inner.data,
        "variables": variables,
        "controller": None if ctrl is None else ctrl.model_dump(by_alias=True),
        "scenario": {
            "until": scenario.horizon,
            "step": scenario.step,
            "initial": scenario.initial,
            "initial_values": {k: float(v) for k, v in scenario.initial_values.items()},
            "steps": [{"input": s.input, "at": s.at, "to": float(s.to)} for s in scenario.steps],
            "waveforms": dict(scenario.waveforms),
        },
        "limits": limits,
        "objective": terms,
        "loop": {"sample_time": T, "at": start, **pole_entries(poles, z=z)},
    }
    return Inspection(
        "tuning",
        spec.name,
        "\n".join(out),
        data,
        poles,
        linear=_loop_model(model, evaluation),
        units=dict(model.units),
        sample_time=T,
    )


def _tuning_loop_poles(model: Any, evaluation: Any) -> tuple[np.ndarray, Any, float | None]:
    if model.sampled:
        T = float(model.step)
        z = np.linalg.eigvals(np.asarray(evaluation.Phi, dtype=float))
        return sampled_to_continuous(z, T), z, T
    A = np.asarray(evaluation.A, dtype=float)
    return (np.linalg.eigvals(A) if A.size else np.zeros(0, dtype=complex)), None, None


def _loop_model(model: Any, evaluation: Any) -> Any:
    """The continuous loop of a tuning case at its starting values, for the Bode plot
    (the file's outputs only, not the ones the tuning adds to watch parts)."""
    from wirestate.simulate.linear import LinearModel

    outputs = list(model.user_outputs)
    rows = [model.outputs.index(o) for o in outputs]
    A = np.asarray(evaluation.A, dtype=float)
    return LinearModel(
        model.spec.name, A, np.asarray(evaluation.B, dtype=float),
        np.asarray(evaluation.extra["Cc"], dtype=float)[rows],
        np.asarray(evaluation.extra["Dc"], dtype=float)[rows],
        list(model.states), list(model.inputs), outputs, np.zeros(A.shape[0]),
        units=dict(model.units),
    )  # fmt: skip


def _indent(text: str, by: str = "  ") -> str:
    return "\n".join(by + line if line else line for line in text.splitlines())


#: file kind -> reader; a new file kind adds its reader here
def _state_space(path: Path, data: dict[str, Any]) -> Inspection:
    """A state-space file (written by ``wirestate reduce`` or by hand) reads like a circuit
    block: its states, modes and DC gains (the block's notes name the reduction and its
    bound); the JSON adds the reduction record when there is one."""
    from wirestate.lti import load_state_space_block

    found = circuit_inspection(load_state_space_block(path))
    found.data["kind"] = "state_space"
    record = data.get("reduction")
    if isinstance(record, dict):
        found.data["reduction"] = {
            k: record[k]
            for k in ("method", "gramians", "error_bound", "relative_error_bound")
            if k in record
        }
    return found


INSPECTORS: dict[str, Callable[[Path, dict[str, Any]], Inspection]] = {
    "tuning": _tuning,
    "system": _system,
    "state_space": _state_space,
    "circuit": _circuit,
}


__all__ = [
    "INSPECTORS",
    "Inspection",
    "LoopPoles",
    "circuit_inspection",
    "file_kind",
    "inspect_file",
    "sampled_to_continuous",
    "system_inspection",
    "system_loop_poles",
    "tuning_inspection",
]
