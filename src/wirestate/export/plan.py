"""What goes into an FMU: the numbers and signal maps of a circuit block or a system.

The plan is the one place where a circuit block or a composed system is turned into the
flat description the C runtime needs: the continuous linear part (``A, B, C, D`` and its
exact zero-order hold at the default step, computed here with the same function
wirestate's simulator uses, so both step with the same matrices), where each of its inputs
comes from, the sampled controllers with their constants, and the variables with units and
start values. Part values are fixed here; nothing in the FMU can change them.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from types import SimpleNamespace

import control
import numpy as np

from wirestate.blocks import PIDController
from wirestate.compose import MODULATOR, NONLINEAR, SAMPLED, SWITCHED, ComposedSystem
from wirestate.errors import SimulationError, WirestateError
from wirestate.lti import CircuitBlock
from wirestate.simulate.discretize import zoh
from wirestate.simulate.hybrid import _Engine
from wirestate.switching import is_switched

#: where a signal comes from: the FMU inputs, the held sampled outputs, a linear output row
FROM_INPUT, FROM_HELD, FROM_LINEAR = 0, 1, 2
ANTI_WINDUP_CODES = {"none": 0, "back_calculation": 1, "conditional": 2}


class ExportError(WirestateError):
    """A model that cannot be exported, or an FMU that cannot be built or written."""


@dataclass
class Variable:
    """One FMI ScalarVariable (all are Real)."""

    name: str
    causality: str  # "input" | "output" | "local"
    variability: str  # "continuous" | "discrete"
    unit: str = ""
    start: float | None = None
    description: str = ""


@dataclass
class SampledBlock:
    """A sampled block as the C runtime runs it.

    ``kind`` is ``"pid"`` (constants in ``constants``, the operations of
    :meth:`wirestate.blocks.PIDController.sample`) or ``"lti"`` (``x[k+1] = A x + B u``,
    ``y = C x + D u``, matrices in ``matrices``).
    """

    name: str
    kind: str
    sample_time: float
    n_states: int
    n_inputs: int
    n_outputs: int
    feedthrough: bool
    sources: list[tuple[int, int]]
    constants: dict[str, float] = field(default_factory=dict)
    matrices: list[np.ndarray] = field(default_factory=list)


@dataclass
class ExportPlan:
    """Everything the model description and the generated C data need."""

    name: str
    description: str
    step: float
    A: np.ndarray
    B: np.ndarray
    C: np.ndarray
    D: np.ndarray
    Ad: np.ndarray
    Bd: np.ndarray
    linear_sources: list[tuple[int, int]]
    output_sources: list[tuple[int, int]]
    inputs: list[Variable]
    outputs: list[Variable]
    states: list[Variable]
    sampled_states: list[Variable]
    blocks: list[SampledBlock] = field(default_factory=list)
    order: list[int] = field(default_factory=list)

    @property
    def variables(self) -> list[Variable]:
        """Every variable in value-reference order: inputs, outputs, states, sampled states."""
        return [*self.inputs, *self.outputs, *self.states, *self.sampled_states]


def _check_step(step: float) -> float:
    step = float(step)
    if not (math.isfinite(step) and step > 0):
        raise SimulationError("invalid_step", f"the step must be a positive time, got {step!r} s")
    return step


def switching_parts(block: CircuitBlock) -> list[str]:
    """``"Q1 (switch)"`` for every switch and diode of a compiled circuit block, in file
    order; empty for a linear circuit."""
    spec = getattr(block, "spec", None)
    if spec is None or not is_switched(spec):
        return []
    return [f"{n} ({p.kind})" for n, p in spec.parts.items() if p.kind in ("switch", "diode")]


def refuse_switched(block: CircuitBlock, where: str, file: str | None = None) -> None:
    """Refuse a circuit with switches or diodes, naming them.

    Why: between two communication points a diode may start or stop conducting at a state-
    dependent instant. Exporting it needs the mode's matrices for every reachable on/off
    combination and the event location of :mod:`wirestate.simulate.switched` in C; that
    event logic is still being extended, and a second hand-written copy in C would drift
    from it. Until it settles, such a circuit is refused rather than exported with every
    device frozen in one mode.
    """
    parts = switching_parts(block)
    if parts:
        raise ExportError(
            "not_exportable",
            f"{where}: circuits with switches or diodes cannot be exported yet (their "
            f"conduction changes inside a step); refused: {', '.join(parts)}",
            file=file,
            location=("parts", parts[0].split(" ")[0]),
        )


def plan_circuit(block: CircuitBlock, step: float) -> ExportPlan:
    """The plan of a compiled circuit block at the default communication step ``step`` (s).

    Raises
    ------
    ExportError
        ``not_exportable`` for a circuit with switches or diodes (named).
    """
    step = _check_step(step)
    refuse_switched(block, block.name)
    parts = getattr(block.spec, "parts", {}) or {}
    inputs = [
        Variable(
            name, "input", "continuous", block.units.get(name, ""),
            float(block.input_defaults.get(name) or 0.0),
            getattr(parts.get(name), "description", None) or f"input {name}",
        )
        for name in block.inputs
    ]  # fmt: skip
    outputs = [
        Variable(name, "output", "continuous", block.units.get(name, ""), None, f"output {name}")
        for name in block.outputs
    ]
    states = [
        Variable(
            f"{block.name}.{s}", "local", "continuous", block.units.get(s, ""),
            float(x), f"state {s} of {block.name}",
        )
        for s, x in zip(block.states, block.x0, strict=True)
    ]  # fmt: skip
    Ad, Bd = zoh(block.A, block.B, step)
    description = getattr(block.spec, "description", None) or f"circuit block {block.name}"
    return ExportPlan(
        block.name, description, step, block.A, block.B, block.C, block.D, Ad, Bd,
        [(FROM_INPUT, j) for j in range(len(block.inputs))],
        [(FROM_LINEAR, i) for i in range(len(block.outputs))],
        inputs, outputs, states, [],
    )  # fmt: skip


def _refuse(cs: ComposedSystem) -> None:
    bad = []
    for b in cs.blocks.values():
        if b.category == NONLINEAR:
            what = (
                "a continuous controller with output limits"
                if isinstance(b.source, PIDController)
                else "a non-linear block"
            )
            bad.append(f"{b.name} ({what})")
        elif b.category == SAMPLED and not isinstance(b.source, PIDController | control.StateSpace):
            bad.append(f"{b.name} (a sampled block of type {type(b.source).__name__})")
        elif b.category == SWITCHED:  # issue 12: no switching in the FMU yet
            devices = ", ".join(switching_parts(b.source))
            bad.append(f"{b.name} (a switched circuit: switches or diodes {devices})")
        elif b.category == MODULATOR:
            bad.append(f"{b.name} (a modulator)")
    if bad:
        raise ExportError(
            "not_exportable",
            f"{cs.name}: only linear blocks and sampled controllers can be exported; "
            f"refused: {', '.join(bad)}",
            file=cs.file,
            location=("blocks", bad[0].split(" ")[0]),
        )


def _pid_constants(pid: PIDController) -> dict[str, float]:
    # the constants PIDController.sample computes on the way, computed here by the same
    # expressions so the C code rounds exactly as the Python does
    Ts = float(pid.sample_time)  # type: ignore[arg-type]
    low, high = pid.limits
    has_d = pid.kd != 0.0
    Tf = float(pid.derivative_filter) if has_d else 1.0
    return {
        "kp": pid.kp,
        "ki_ts": pid.ki * Ts,
        "a": Tf / (Tf + Ts) if has_d else 0.0,
        "b": pid.kd / (Tf + Ts) if has_d else 0.0,
        "low": low,
        "high": high,
        "track": Ts / pid.tracking,
        "has_derivative": float(has_d),
        "limited": float(pid.is_limited),
        "anti_windup": float(ANTI_WINDUP_CODES[pid.anti_windup]),
        "delay": float(pid.delay),
    }


def _sampled_block(b, sources: list[tuple[int, int]]) -> SampledBlock:
    common = dict(
        name=b.name, sample_time=float(b.sample_time), n_states=len(b.states),
        n_inputs=len(b.inputs), n_outputs=len(b.outputs), feedthrough=bool(b.feedthrough()),
        sources=sources,
    )  # fmt: skip
    if isinstance(b.source, PIDController):
        return SampledBlock(kind="pid", constants=_pid_constants(b.source), **common)
    src = b.source
    n, m, p = len(b.states), len(b.inputs), len(b.outputs)
    matrices = [
        np.asarray(src.A, dtype=float).reshape(n, n),
        np.asarray(src.B, dtype=float).reshape(n, m),
        np.asarray(src.C, dtype=float).reshape(p, n),
        np.asarray(src.D, dtype=float).reshape(p, m),
    ]
    return SampledBlock(kind="lti", matrices=matrices, **common)


def _sampled_state_unit(cs: ComposedSystem, b, state: str) -> str:
    unit = cs.units.get(f"{b.name}.{state}", "")
    if not unit and isinstance(b.source, PIDController):
        # the sampled PI/PID states: the last measurement in the measurement's unit; the
        # others (integral, derivative term, delayed command) are added to or held as the
        # command, so they carry the command's unit
        signal = "measurement" if state == "last_measurement" else b.outputs[0]
        unit = b.units.get(signal, "")
    return unit


def plan_system(cs: ComposedSystem, step: float, description: str | None = None) -> ExportPlan:
    """The plan of a composed system whose blocks are linear or sampled controllers.

    The sample-instant order and the source of every sampled block's inputs are taken from
    wirestate's hybrid simulator itself (its ordering and source lookup run on this
    system), so the FMU samples in the same order as ``wirestate simulate``.

    Raises
    ------
    ExportError
        ``not_exportable`` naming the non-linear blocks.
    """
    step = _check_step(step)
    _refuse(cs)
    part = cs.linear_part()
    sys = part.system
    n, m, p = len(part.states), len(part.inputs), len(part.outputs)
    A = np.asarray(sys.A, dtype=float).reshape(n, n)
    B = np.asarray(sys.B, dtype=float).reshape(n, m)
    C = np.asarray(sys.C, dtype=float).reshape(p, n)
    D = np.asarray(sys.D, dtype=float).reshape(p, m)
    sampled = [b for b in cs.blocks.values() if b.category == SAMPLED]
    held_offset, offset = {}, 0
    for b in sampled:
        held_offset[b.name] = offset
        offset += len(b.outputs)
    # the simulator's own ordering and source lookup, run on this system (they read only
    # the system, its sampled blocks and its input names)
    engine = SimpleNamespace(cs=cs, sampled=sampled, ext_names=cs.inputs)
    ordered = _Engine._sample_order(engine)  # type: ignore[arg-type]
    index = {b.name: i for i, b in enumerate(sampled)}
    blocks = []
    for b in sampled:
        sources = []
        for name in b.inputs:
            kind = _Engine.source_kind(engine, f"{b.name}.{name}")  # type: ignore[arg-type]
            if kind[0] == "ext":
                sources.append((FROM_INPUT, kind[1]))
            elif kind[0] == "sampled":
                sources.append((FROM_HELD, held_offset[kind[1]] + kind[2]))
            else:
                sources.append((FROM_LINEAR, part.outputs.index(kind[1])))
        blocks.append(_sampled_block(b, sources))
    linear_sources = []
    for name in part.inputs:
        if name in cs.external_inputs:
            linear_sources.append((FROM_INPUT, cs.inputs.index(name)))
        else:
            block, sig = name.split(".")
            linear_sources.append(
                (FROM_HELD, held_offset[block] + cs.blocks[block].outputs.index(sig))
            )
    output_sources, outputs = [], []
    for out, src in cs.external_outputs.items():
        block, sig = src.split(".")
        if cs.blocks[block].category == SAMPLED:
            output_sources.append(
                (FROM_HELD, held_offset[block] + cs.blocks[block].outputs.index(sig))
            )
            variability = "discrete"
        else:
            output_sources.append((FROM_LINEAR, part.outputs.index(src)))
            variability = "continuous"
        outputs.append(Variable(out, "output", variability, cs.units.get(out, ""), None, src))
    inputs = [
        Variable(
            name, "input", "continuous", cs.units.get(name, ""),
            float(cs.input_defaults.get(name, 0.0)),
            "drives " + ", ".join(cs.external_inputs[name]),
        )
        for name in cs.inputs
    ]  # fmt: skip
    x0 = np.concatenate([cs.blocks[b].x0 for b in part.blocks] or [np.zeros(0)])
    states = [
        Variable(s, "local", "continuous", cs.units.get(s, ""), float(x), f"state {s}")
        for s, x in zip(part.states, x0, strict=True)
    ]
    sampled_states = [
        Variable(f"{b.name}.{s}", "local", "discrete", _sampled_state_unit(cs, b, s),
                 float(x), f"state {s} of the sampled block {b.name}")
        for b in sampled
        for s, x in zip(b.states, b.x0, strict=True)
    ]  # fmt: skip
    Ad, Bd = zoh(A, B, step)
    return ExportPlan(
        cs.name, description or f"system {cs.name}", step, A, B, C, D, Ad, Bd,
        linear_sources, output_sources, inputs, outputs, states, sampled_states, blocks,
        [index[b.name] for b in ordered],
    )  # fmt: skip


def check_names(plan: ExportPlan) -> None:
    """Refuse a plan whose variable names are not unique (FMI requires unique names)."""
    seen: dict[str, str] = {}
    for v in plan.variables:
        if v.name in seen:
            raise ExportError(
                "not_exportable",
                f"{plan.name}: two FMU variables would be named {v.name!r} "
                f"(a {seen[v.name]} and a {v.causality}); rename one",
            )
        seen[v.name] = v.causality
