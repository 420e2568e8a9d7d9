"""One tuning case, evaluated numerically or symbolically: a circuit with an optional PI
loop, or a circuit block inside a composed system file (its other blocks closing the loop,
:mod:`wirestate.tune.wiring`), and a scenario.

:class:`TuningModel` reads the circuit named by a tuning file, adds the outputs the limits
and the stress report need (currents through parts, voltages across capacitors), checks
every name, and builds the input schedule of the scenario. :meth:`TuningModel.numeric`
returns an :class:`Evaluation` at given part values through the numeric compile
(:func:`wirestate.reduce.compile_circuit`) and the numeric zero-order hold
(:func:`wirestate.simulate.discretize.zoh`, scipy's Pade scaling and squaring);
:meth:`TuningModel.symbolic` returns the same quantities as CasADi expressions through
:func:`wirestate.reduce.symbolic_state_space` and the CasADi exponential of
:mod:`wirestate.tune.expm`. The limit measures in :mod:`wirestate.tune.limits` run
unchanged on both.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from wirestate.compose import ComposedSystem, system_from_spec
from wirestate.errors import TuningError, WirestateError
from wirestate.lti import CircuitBlock
from wirestate.reduce import compile_circuit, symbolic_state_space
from wirestate.simulate.discretize import zoh as numeric_zoh
from wirestate.simulate.inputs import parse_waveform
from wirestate.simulate.linear import propagate
from wirestate.spec import CircuitSpec, load_circuit
from wirestate.spec.system import load_system_spec
from wirestate.spec.tuning import TuningSpec, check_units
from wirestate.tune import expm as cexpm
from wirestate.tune.loop import (
    REFERENCE,
    Loop,
    close_pi,
    held_output_maps,
    hold_powers,
    open_loop,
)
from wirestate.tune.wiring import SystemLoop, not_a_circuit_block

CURRENT_PREFIX = "i__"
VOLTAGE_PREFIX = "v__"
#: outputs added for a limited controller's command (its output range as two limits)
COMMAND_PREFIX = "u__"
_WATCH = (CURRENT_PREFIX, VOLTAGE_PREFIX)

#: at most this many toleranced parts span the corners (2**8 = 256 corners)
MAX_CORNER_PARTS = 8


@dataclass
class Evaluation:
    """Matrices and trajectory of one tuning case at one point (numpy or CasADi).

    ``Phi, Gamma`` step the (closed-loop) state over one sample, ``C, D`` give the outputs;
    ``A, B`` are the continuous-time closed loop (a sampled PI is replaced by its continuous
    counterpart there, for poles and impedances); ``X`` is states x samples, ``Y`` outputs x
    samples; ``values`` the part values (floats or CasADi expressions).
    """

    Phi: Any
    Gamma: Any
    C: Any
    D: Any
    A: Any
    B: Any
    X: Any
    Y: Any
    values: dict[str, Any]
    symbolic: bool
    extra: dict[str, Any] = field(default_factory=dict)


class TuningModel:
    """A tuning file resolved against its circuit; see the module docstring."""

    def __init__(
        self,
        spec: TuningSpec,
        *,
        file: str | None = None,
        system: ComposedSystem | None = None,
    ) -> None:
        """``system``: a composed system built in Python (:func:`wirestate.compose.compose`),
        used instead of a system file; ``spec.tuning.block`` names its circuit block."""
        self.spec = spec
        self.file = file
        self.system_loop: SystemLoop | None = None
        if system is not None:
            circuit, self.circuit_file = self._given_system(system)
        elif spec.system_path is not None:
            circuit, self.circuit_file, system = self._load_system()
        elif spec.tuning.circuit is None:
            raise TuningError(
                "missing_field",
                "the tuning names no circuit or system file; give 'circuit', 'system', or "
                "a composed system in Python",
                file=file,
                location=("tuning",),
            )
        else:
            self.circuit_file = spec.circuit_path
            self._check_exists(spec.circuit_path, "circuit")
            try:
                circuit = load_circuit(spec.circuit_path)
            except WirestateError as exc:
                raise exc.with_file(str(spec.circuit_path)) from None
        self.base_circuit = circuit
        self.variables = list(spec.variables)
        if spec.solver.robust and not spec.stress.tolerance_corners:
            raise TuningError(
                "invalid_field",
                "robust = true imposes every limit at the tolerance corners; it needs "
                "stress.tolerance_corners = true",
                file=file,
                location=("solver", "robust"),
            )
        for name in self.variables:
            part = circuit.parts.get(name)
            if (
                part is None
                or not hasattr(part, "value")
                or part.kind
                not in (
                    "resistor",
                    "capacitor",
                    "inductor",
                )
            ):
                raise TuningError(
                    "unknown_variable",
                    f"design variable {name!r} names no resistor, capacitor or inductor of "
                    f"circuit {circuit.name!r}",
                    file=file,
                    location=("variables", name),
                )
            expected = {"resistor": "ohm", "capacitor": "F", "inductor": "H"}[part.kind]
            for field_name, unit in spec.variables[name].written_units.items():
                if unit not in (expected, "1"):
                    raise TuningError(
                        "wrong_unit",
                        f"{name} is a {part.kind}; its {field_name} must be in {expected}, "
                        f"got a value in {unit}",
                        file=file,
                        location=("variables", name, field_name),
                    )
        self.watched = self._watched_parts(circuit)
        self.circuit = self._with_watch_outputs(circuit)
        self.nominal = {n: float(p.value) for n, p in circuit.parts.items() if _has_value(p)}
        self.block = self._compile(self.nominal)
        ctrl = spec.controller
        if system is not None:
            self.system_loop = SystemLoop(
                system, spec.tuning.block, list(self.block.outputs), file=file
            )
            self.spec = spec = self._with_range_limits(spec)
            period = self.system_loop.sample_time
            self.sampled = period is not None
            self.step = float(period) if self.sampled else float(spec.scenario.step)
            self._check_system_limits()
        else:
            self.sampled = ctrl is not None and ctrl.sample_time is not None
            self.step = float(ctrl.sample_time) if self.sampled else float(spec.scenario.step)
        self.substeps = self._substeps() if self.sampled else 1
        self.n_steps = max(1, int(round(spec.scenario.horizon / self.step)))
        #: output step: the scenario step between the samples of a sampled system (the
        #: continuous part advanced exactly within each period), else the stepping step
        self.output_step = self.step / self.substeps
        #: times of the output samples (``Evaluation.Y`` columns), every ``output_step``
        self.times = np.arange(self.n_steps * self.substeps + 1) * self.output_step
        loop = self._loop_numeric(self.block)
        self.states = loop.states
        self.inputs = loop.inputs
        self.outputs = loop.outputs
        self._check_names()
        check_units(self.spec, self.units, file=self.file)
        self._initial_rows = self._initial_value_rows()
        self.schedule = self._schedule()
        self.reference = None

    # -- set-up ---------------------------------------------------------------------------

    def _load_system(self) -> tuple[CircuitSpec, Path, ComposedSystem]:
        """The system file: its design block's circuit, that circuit's file, the system."""
        path = self.spec.system_path
        self._check_exists(path, "system")
        try:
            system_spec = load_system_spec(path)
            system = system_from_spec(system_spec, file=path)
        except WirestateError as exc:
            raise exc.with_file(str(path)) from None
        circuit, _ = self._given_system(system)
        # the design block's own file, for messages (the circuit has its values applied)
        circuit_file = Path(system_spec.blocks[self.spec.tuning.block].file)
        if not circuit_file.is_absolute():
            circuit_file = Path(path).parent / circuit_file
        return circuit, circuit_file, system

    def _given_system(self, system: ComposedSystem) -> tuple[CircuitSpec, str]:
        design = self.spec.tuning.block
        view = system.blocks.get(design) if design else None
        source = getattr(view, "source", None)
        if not isinstance(source, CircuitBlock) or not isinstance(source.spec, CircuitSpec):
            raise not_a_circuit_block(system, design, self.file)
        return source.spec, f"circuit block {design!r} of system {system.name!r}"

    def _check_exists(self, path: Path, field_name: str) -> None:
        if not Path(path).is_file():
            raise TuningError(
                "file_not_found",
                f"{field_name} = {getattr(self.spec.tuning, field_name)!r}: no file {path}",
                file=self.file,
                location=("tuning", field_name),
            )

    def _with_range_limits(self, spec: TuningSpec) -> TuningSpec:
        """The spec with two more limits per controller with output limits: its command
        (output ``u__<block>``) at most ``high`` and at least ``low``, so the loop's
        unsaturated dynamics stay exact."""
        from wirestate.spec.tuning import Limit

        extra = []
        for signal, (low, high) in self.system_loop.output_ranges.items():
            block = signal.split(".")[0]
            output = COMMAND_PREFIX + block
            if math.isfinite(high):
                extra.append(Limit(name=f"{block}_command_max", kind="maximum", output=output,
                                   max=high))  # fmt: skip
            if math.isfinite(low):
                extra.append(Limit(name=f"{block}_command_min", kind="minimum", output=output,
                                   min=low))  # fmt: skip
        taken = {limit.label for limit in spec.limits} & {limit.label for limit in extra}
        if taken:
            raise TuningError(
                "invalid_limit",
                f"limit name {sorted(taken)[0]!r} is taken by a controller's output range",
                file=self.file,
                location=("limits",),
            )
        return spec.model_copy(update={"limits": [*spec.limits, *extra]}) if extra else spec

    def _substeps(self) -> int:
        """Output steps per sample period of a sampled system: the period over the
        scenario step, which must divide it."""
        ratio = self.step / float(self.spec.scenario.step)
        m = round(ratio)
        if m < 1 or abs(ratio - m) > 1e-9 * max(ratio, 1.0):
            what = (
                f"of system {self.system_loop.system.name!r}"
                if self.system_loop is not None
                else "of the controller"
            )
            raise TuningError(
                "invalid_step",
                f"scenario.step {self.spec.scenario.step:g} s must divide the sample time "
                f"{self.step:g} s {what}",
                file=self.file,
                location=("scenario", "step"),
            )
        return m

    def _check_system_limits(self) -> None:
        if not self.sampled:
            return
        for limit in self.spec.limits:
            if limit.kind == "output_impedance":
                raise TuningError(
                    "invalid_limit",
                    f"limit {limit.label!r} ({limit.kind}) needs a continuous loop; system "
                    f"{self.system_loop.system.name!r} has sampled blocks "
                    f"({', '.join(self.system_loop.sampled)})",
                    file=self.file,
                    location=("limits", limit.label, "kind"),
                )

    def _watched_parts(self, circuit: CircuitSpec) -> list[str]:
        names: list[str] = []
        for limit in self.spec.limits:
            if limit.part is not None:
                if limit.part not in circuit.parts:
                    raise TuningError(
                        "unknown_part",
                        f"limit {limit.label!r} names part {limit.part!r}, which circuit "
                        f"{circuit.name!r} does not have",
                        file=self.file,
                        location=("limits", limit.label, "part"),
                    )
                if limit.kind == "energy" and circuit.parts[limit.part].kind != "resistor":
                    raise TuningError(
                        "invalid_limit",
                        f"an energy limit needs a resistor; {limit.part!r} is a "
                        f"{circuit.parts[limit.part].kind}",
                        file=self.file,
                        location=("limits", limit.label, "part"),
                    )
                names.append(limit.part)
        for name in self.spec.objective.parts:
            if name not in circuit.parts:
                raise TuningError(
                    "unknown_part",
                    f"the objective names part {name!r}, which the circuit does not have",
                    file=self.file,
                    location=("objective", "parts"),
                )
            names.append(name)
        names += self.variables
        for name, part in circuit.parts.items():
            if part.kind in ("resistor", "capacitor", "inductor") and any(
                getattr(part, r, None) is not None
                for r in ("rated_voltage", "rated_current", "rated_power")
            ):
                names.append(name)
        return list(dict.fromkeys(names))

    def _with_watch_outputs(self, circuit: CircuitSpec) -> CircuitSpec:
        data = circuit.model_dump(mode="python")
        for name in self.watched:
            part = circuit.parts[name]
            data["outputs"][CURRENT_PREFIX + name] = {"current": name, "unit": "A"}
            if hasattr(part, "nodes"):
                data["outputs"][VOLTAGE_PREFIX + name] = {"voltage": list(part.nodes), "unit": "V"}
        try:
            return CircuitSpec.model_validate(data)
        except Exception as exc:  # the circuit validated before; this is an internal error
            raise RuntimeError(f"internal: cannot add watch outputs: {exc}") from exc

    def _compile(self, values: dict[str, float]):
        try:
            return compile_circuit(self.circuit.with_values(values))
        except WirestateError as exc:
            raise exc.with_file(str(self.circuit_file)) from None

    @property
    def units(self) -> dict[str, str]:
        """Unit of every output (and input) the limits can name."""
        if self.system_loop is None:
            return dict(self.block.units)
        blocks = self.system_loop.system.blocks
        units = dict(self.system_loop.system.units)
        for output, signal in self._system_signals():
            block, sig = signal.split(".")
            # the design block as compiled here carries the watch outputs' units
            own = self.block.units if block == self.system_loop.design else blocks[block].units
            units.setdefault(output, own.get(sig, ""))
        return units

    def _system_signals(self) -> list[tuple[str, str]]:
        """``(output, block.signal)`` of a system case: the system's external outputs, the
        design block's watch outputs, then the commands of limited controllers."""
        loop = self.system_loop
        pairs = list(loop.system.external_outputs.items())
        pairs += [(o, f"{loop.design}.{o}") for o in self.block.outputs if o.startswith(_WATCH)]
        pairs += [(COMMAND_PREFIX + s.split(".")[0], s) for s in loop.output_ranges]
        return pairs

    def _system_outputs(self) -> list[str]:
        """The outputs of a system case (see :meth:`_system_signals`)."""
        return [output for output, _ in self._system_signals()]

    def _system_rows(self, signals: list[str]) -> np.ndarray:
        """0/1 matrix picking :meth:`_system_outputs` out of ``signals`` (a missing one,
        such as a sampled output in the continuous part, gives a zero row)."""
        pairs = self._system_signals()
        S = np.zeros((len(pairs), len(signals)))
        for row, (_, name) in enumerate(pairs):
            if name in signals:
                S[row, signals.index(name)] = 1.0
        return S

    def _system_matrices(self, A1: Any, B1: Any, C1: Any, D1: Any, zoh: Any) -> dict[str, Any]:
        """A system case's loop around the design block's matrices (numpy or CasADi):
        ``Phi, Gamma, C, D`` over one step and the continuous ``A, B, Cc, Dc`` (with a
        sampled block's outputs frozen: the ripple response); ``zoh(A, B)`` discretises."""
        import casadi

        loop = self.system_loop
        part = loop.continuous_part(A1, B1, C1, D1)
        numeric = isinstance(part.A, np.ndarray)
        nw = len(loop.inputs)

        def pick(S: np.ndarray, M: Any) -> Any:
            return S @ M if numeric else casadi.mtimes(casadi.DM(S), M)

        Sc = self._system_rows(loop.continuous_outputs)
        Cc, Dc = pick(Sc, part.C), pick(Sc, part.D[:, :nw])
        if not self.sampled:
            Phi, Gamma = zoh(part.A, part.B)
            C, D = Cc, Dc
            outputs = [(C, D)]
        else:
            # zoh is taken over the output step; the period is made of substeps of it
            Phi_h, Gamma_h = zoh(part.A, part.B)
            Phi, Gamma, maps = loop.discrete(part, Phi_h, Gamma_h, self.substeps)
            S = self._system_rows(loop.signals)
            outputs = [(pick(S, Cj), pick(S, Dj)) for Cj, Dj in maps]
            C, D = outputs[0]
        return {
            "Phi": Phi, "Gamma": Gamma, "C": C, "D": D, "outputs": outputs,
            "A": part.A, "B": part.B[:, :nw], "Cc": Cc, "Dc": Dc, "part": part,
        }  # fmt: skip

    def _close_pi(
        self, A: Any, B: Any, C: Any, D: Any, names: dict, sample_time: float | None = None
    ) -> Loop:
        """The spec's PI loop around ``(A, B, C, D)`` (numbers or CasADi; continuous, or
        discrete with ``sample_time`` when ``A, B`` are already the ZOH pair)."""
        ctrl = self.spec.controller
        return close_pi(
            A,
            B,
            C,
            D,
            **names,
            measure=ctrl.measure,
            drive=ctrl.drive,
            kp=ctrl.proportional,
            ki=ctrl.integral,
            sample_time=sample_time,
        )

    def _loop_numeric(self, block) -> Loop:
        ctrl = self.spec.controller
        if self.system_loop is not None:
            loop = self.system_loop
            part = loop.continuous_part(block.A, block.B, block.C, block.D)
            states = loop.all_states if self.sampled else loop.states
            S = self._system_rows(loop.continuous_outputs)
            nw = len(loop.inputs)
            return Loop(
                part.A, part.B[:, :nw], S @ part.C, S @ part.D[:, :nw], states,
                list(loop.inputs), self._system_outputs(),
            )  # fmt: skip
        if ctrl is None:
            return open_loop(
                block.A, block.B, block.C, block.D, block.states, block.inputs, block.outputs
            )
        try:
            return self._close_pi(block.A, block.B, block.C, block.D, _names(block))
        except WirestateError as exc:
            raise exc.with_file(self.file or "") from None

    def _initial_value_rows(self) -> list[tuple[int, float]]:
        """``(state index, value)`` of ``scenario.initial_values``."""
        rows = []
        for name, value in self.spec.scenario.initial_values.items():
            if name not in self.states:
                hint = ""
                if any(s.split(".")[-1] == f"{name.split('.')[-1]}_shifted" for s in self.states):
                    hint = (
                        f"; {name} is a shifted state (physical value = state + offset x "
                        "inputs): set the shifted state"
                    )
                raise TuningError(
                    "unknown_signal",
                    f"initial value for {name!r}, which is not a state (states: "
                    f"{', '.join(self.states)}){hint}",
                    file=self.file,
                    location=("scenario", "initial_values", name),
                )
            rows.append((self.states.index(name), float(value)))
        return rows

    @property
    def user_outputs(self) -> list[str]:
        """The outputs a tuning file can name (without the ones the model adds)."""
        return [o for o in self.outputs if not o.startswith((*_WATCH, COMMAND_PREFIX))]

    def _check_names(self) -> None:
        horizon = self.times[-1]
        for limit in self.spec.limits:
            times = {"after": limit.after, "by": limit.by}
            if limit.window is not None:
                times["window"] = limit.window[0]
            for field_name, t in times.items():
                if t is not None and t > horizon - self.step * 0.5:
                    raise TuningError(
                        "invalid_limit",
                        f"limit {limit.label!r}: {field_name} at {t:g} s leaves no sample "
                        f"inside the horizon ({horizon:g} s)",
                        file=self.file,
                        location=("limits", limit.label, field_name),
                    )
            if limit.output is not None and limit.output not in self.outputs:
                raise TuningError(
                    "invalid_limit",
                    f"limit {limit.label!r} names output {limit.output!r}; outputs: "
                    f"{', '.join(self.user_outputs)}",
                    file=self.file,
                    location=("limits", limit.label, "output"),
                )
            if limit.input is not None and limit.input not in self.inputs:
                raise TuningError(
                    "invalid_limit",
                    f"limit {limit.label!r} injects at input {limit.input!r}; inputs: "
                    f"{', '.join(self.inputs)}",
                    file=self.file,
                    location=("limits", limit.label, "input"),
                )
        objective = self.spec.objective
        if objective.output is not None and objective.output not in self.outputs:
            raise TuningError(
                "invalid_limit",
                f"the objective names output {objective.output!r}, which is not an output",
                file=self.file,
                location=("objective", "output"),
            )
        ripple = self.spec.stress.ripple
        if ripple is not None and ripple.input not in self.inputs:
            raise TuningError(
                "unknown_signal",
                f"the ripple drives input {ripple.input!r}; inputs: {', '.join(self.inputs)}",
                file=self.file,
                location=("stress", "ripple", "input"),
            )

    def _schedule(self) -> np.ndarray:
        """Loop inputs x samples: the operating point, then the steps (held, ZOH-exact)."""
        scenario = self.spec.scenario
        ctrl = self.spec.controller
        circuit_inputs = list(self.block.inputs)
        defaults = self.block.input_defaults
        if self.system_loop is not None:
            circuit_inputs = list(self.system_loop.inputs)
            defaults = self.system_loop.system.input_defaults
        level = {name: float(defaults.get(name) or 0.0) for name in circuit_inputs}
        where = "circuit" if self.system_loop is None else "system"
        for name, value in scenario.inputs.items():
            if name not in circuit_inputs or (ctrl is not None and name == ctrl.drive):
                raise TuningError(
                    "unknown_signal",
                    f"scenario input {name!r} is not a free {where} input (inputs: "
                    f"{', '.join(i for i in self.inputs if i != REFERENCE)})",
                    file=self.file,
                    location=("scenario", "inputs", name),
                )
            level[name] = float(value)
        if ctrl is not None:
            if ctrl.reference is not None:
                level[REFERENCE] = float(ctrl.reference)
            else:
                level[REFERENCE] = self._open_loop_operating_output(level)
        rows = np.array([[level[name]] * (self.n_steps + 1) for name in self.inputs], dtype=float)
        for step in sorted(scenario.steps, key=lambda s: s.at):
            if step.input not in self.inputs or step.input == REFERENCE and ctrl is None:
                raise TuningError(
                    "unknown_signal",
                    f"the step drives {step.input!r}, which is not a free input (inputs: "
                    f"{', '.join(self.inputs)})",
                    file=self.file,
                    location=("scenario", "steps", step.input),
                )
            k = int(round(step.at / self.step))
            rows[self.inputs.index(step.input), k:] = float(step.to)
        self._apply_waveforms(rows)
        return rows

    def _apply_waveforms(self, rows: np.ndarray) -> None:
        """``scenario.waveforms``: each input's row sampled from its waveform at the step
        times (held over each step, as every input of the scenario)."""
        scenario = self.spec.scenario
        stepped = {step.input for step in scenario.steps}
        times = np.arange(self.n_steps + 1) * self.step
        for name, text in scenario.waveforms.items():
            where = ("scenario", "waveforms", name)
            if name not in self.inputs:
                raise TuningError(
                    "unknown_signal",
                    f"the waveform drives {name!r}, which is not a free input (inputs: "
                    f"{', '.join(self.inputs)})",
                    file=self.file,
                    location=where,
                )
            if name in stepped:
                raise TuningError(
                    "invalid_field",
                    f"input {name!r} has both a step and a waveform; put the step into the "
                    "waveform (points:... or step:...,at=TIME)",
                    file=self.file,
                    location=where,
                )
            try:
                waveform = parse_waveform(
                    text, self.units.get(name), name=name, base=Path(self.spec.base_dir)
                )
            except WirestateError as exc:
                raise TuningError(exc.code, exc.message, file=self.file, location=where) from None
            rows[self.inputs.index(name)] = waveform.values(times)

    def _open_loop_operating_output(self, level: dict[str, float]) -> float:
        # the reference defaults to the measured output at the circuit's own operating point
        block = self.block
        ctrl = self.spec.controller
        u = np.array([level[name] for name in block.inputs])
        try:
            x = np.linalg.solve(block.A, -block.B @ u)
        except np.linalg.LinAlgError:
            raise TuningError(
                "invalid_field",
                "the circuit has no unique operating point; give controller.reference",
                file=self.file,
                location=("controller", "reference"),
            ) from None
        y = block.C @ x + block.D @ u
        return float(y[block.outputs.index(ctrl.measure)])

    # -- tolerance corners ----------------------------------------------------------------

    def tolerance_corners(self) -> tuple[list[str], list[dict[str, float]]]:
        """The toleranced parts and the factor each corner applies to their values.

        Every resistor, capacitor and inductor with a tolerance ``t`` is taken at
        ``value * (1 - t)`` or ``value * (1 + t)``; the corners are all ``2**m``
        combinations (a worst-case vertex analysis; the extremes of a response that is
        monotonic in each part lie on these vertices). Design variables come first, so
        that a cap of :data:`MAX_CORNER_PARTS` parts keeps the parts being sized.

        Returns
        -------
        (parts, corners)
            ``corners[i][part]`` is the factor ``1 +- t`` (dimensionless) by which corner
            ``i`` scales the part's value (the design variable's current value, or the
            nominal value of any other part).
        """
        parts = self.base_circuit.parts
        toleranced = [
            n
            for n, p in parts.items()
            if getattr(p, "tolerance", None) and p.kind in ("resistor", "capacitor", "inductor")
        ]
        design = set(self.variables)
        toleranced.sort(key=lambda n: (n not in design, n))
        toleranced = toleranced[:MAX_CORNER_PARTS]
        corners = [
            {
                name: 1.0 + sign * float(parts[name].tolerance)
                for sign, name in zip(signs, toleranced, strict=True)
            }
            for signs in itertools.product((-1.0, 1.0), repeat=len(toleranced))
        ]
        return toleranced, corners

    def corner_values(self, values: dict[str, Any], factors: dict[str, float]) -> dict[str, Any]:
        """Part values at one corner: each part in ``factors`` scaled by its factor, from
        ``values`` where given (design variables; floats or CasADi expressions), else from
        its nominal value; the design variables not in ``factors`` as given."""
        out = dict(values)
        for name, factor in factors.items():
            out[name] = (values[name] if name in values else self.nominal[name]) * factor
        return out

    # -- evaluations ----------------------------------------------------------------------

    def step_norm(self, values: dict[str, float]) -> float:
        """``||[[A, B], [0, 0]] h||_1`` of the matrix exponentiated at ``values``."""
        block = self._compile({**self.nominal, **values})
        A, B = self._continuous_for_zoh(block)
        M = np.block([[A, B], [np.zeros((B.shape[1], A.shape[0] + B.shape[1]))]])
        # the exponential is taken over the output step (a sampled loop's period is made
        # of powers of that hold)
        return float(np.abs(M * self.output_step).sum(axis=0).max())

    def _continuous_for_zoh(self, block) -> tuple[np.ndarray, np.ndarray]:
        if self.system_loop is not None:
            part = self.system_loop.continuous_part(block.A, block.B, block.C, block.D)
            return part.A, part.B
        if self.sampled:
            return block.A, block.B
        loop = self._loop_numeric(block)
        return loop.A, loop.B

    def norm_points(self, bounds: dict[str, tuple[float, float]]) -> list[dict[str, float]]:
        """Points of the variable box at which :meth:`squarings` bounds the step norm: every
        corner (up to 6 variables), otherwise 64 random points (log-uniform, fixed seed)."""
        names = list(bounds)
        if len(names) <= 6:
            return [
                dict(zip(names, c, strict=True))
                for c in itertools.product(*[bounds[n] for n in names])
            ]
        rng = np.random.default_rng(0)
        return [
            {n: math.exp(rng.uniform(math.log(lo), math.log(hi))) for n, (lo, hi) in bounds.items()}
            for _ in range(64)
        ]

    def squarings(self, bounds: dict[str, tuple[float, float]], start: dict[str, float]) -> int:
        """Squarings that keep the Taylor argument <= 0.5 over the whole variable box.

        ``||[[A, B], [0, 0]] h||_1`` is evaluated at the start and at :meth:`norm_points`
        (points where the circuit does not compile are skipped); the largest value is
        doubled to cover points between those evaluated.
        """
        norms = [self.step_norm(start)]
        for point in self.norm_points(bounds):
            try:
                norms.append(self.step_norm(point))
            except WirestateError:
                continue
        return cexpm.squarings_for_norm(2.0 * max(norms))

    def numeric(self, values: dict[str, float], *, initial: np.ndarray | None = None) -> Evaluation:
        """The case at part values ``values`` (others nominal), simulated numerically."""
        all_values = {**self.nominal, **{k: float(v) for k, v in values.items()}}
        block = self._compile(all_values)
        if self.system_loop is not None:
            m = self._system_matrices(
                block.A, block.B, block.C, block.D, lambda A, B: numeric_zoh(A, B, self.output_step)
            )
            Phi, Gamma, C, D = m["Phi"], m["Gamma"], m["C"], m["D"]
            output_maps = m["outputs"]
            loop_c = Loop(m["A"], m["B"], m["Cc"], m["Dc"], [], [], [])
        elif self.sampled:
            powers = hold_powers(*numeric_zoh(block.A, block.B, self.output_step), self.substeps)
            Ad, Bd = powers[-1]
            loop_d = self._close_pi(Ad, Bd, block.C, block.D, _names(block), self.step)
            loop_c = self._loop_numeric(block)
            Phi, Gamma, C, D = loop_d.A, loop_d.B, loop_d.C, loop_d.D
            output_maps = self._held_maps(loop_d, powers, block.C, block.D, block.inputs)
        else:
            loop_c = self._loop_numeric(block)
            Phi, Gamma = numeric_zoh(loop_c.A, loop_c.B, self.step)
            C, D = loop_c.C, loop_c.D
            output_maps = [(C, D)]
        V = self.schedule
        x0 = self.initial_state(Phi, Gamma) if initial is None else initial
        # lifted block stepping (simulate.linear.propagate): the per-sample Python loop
        # was the largest single cost of the ~440 numeric evaluations of a robust tune
        X = propagate(np.asarray(Phi), np.asarray(Gamma), np.asarray(x0, float), V[:, :-1])
        Y = self._outputs_between(output_maps, X, V)
        return Evaluation(
            Phi,
            Gamma,
            C,
            D,
            loop_c.A,
            loop_c.B,
            X,
            Y,
            all_values,
            False,
            {"Cc": loop_c.C, "Dc": loop_c.D},
        )

    def _held_maps(self, loop_d: Loop, powers, C: Any, D: Any, inputs) -> list:
        """Output maps between the samples of the ``[controller]`` loop (see
        :func:`wirestate.tune.loop.held_output_maps`); the first is the loop's own."""
        if self.substeps == 1:
            return [(loop_d.C, loop_d.D)]
        maps = held_output_maps(
            loop_d, powers[: self.substeps], C, D, inputs=list(inputs),
            drive=self.spec.controller.drive,
        )  # fmt: skip
        return [(loop_d.C, loop_d.D)] + maps[1:]

    def _outputs_between(self, maps: list[tuple[Any, Any]], X: Any, V: Any) -> Any:
        """Outputs at every output step: ``maps[j] = (C_j, D_j)`` give the outputs ``j``
        output steps after each sample from that sample's state and inputs (``j = 0``: at
        the sample); the last column is the final sample. numpy or CasADi."""
        C0, D0 = maps[0]
        if len(maps) == 1:
            if isinstance(X, np.ndarray):
                return C0 @ X + D0 @ V
            import casadi

            return casadi.mtimes(C0, X) + casadi.mtimes(D0, casadi.DM(V))
        m, n_out = len(maps), C0.shape[0]
        if isinstance(X, np.ndarray):
            Y = np.empty((n_out, self.n_steps * m + 1))
            for j, (Cj, Dj) in enumerate(maps):
                Y[:, j : self.n_steps * m : m] = Cj @ X[:, :-1] + Dj @ V[:, :-1]
            Y[:, -1] = C0 @ X[:, -1] + D0 @ V[:, -1]
            return Y
        import casadi

        Vd = casadi.DM(V)
        # stacked (j, output) rows per sample, reshaped column-major: column k*m + j
        stacked = casadi.vertcat(
            *[casadi.mtimes(Cj, X[:, :-1]) + casadi.mtimes(Dj, Vd[:, :-1]) for Cj, Dj in maps]
        )
        body = casadi.reshape(stacked, n_out, self.n_steps * m)
        last = casadi.mtimes(C0, X[:, -1]) + casadi.mtimes(D0, Vd[:, -1])
        return casadi.horzcat(body, last)

    def initial_state(self, Phi: Any, Gamma: Any) -> Any:
        """Steady state of the loop at the first input sample, or zero (scenario.initial)."""
        n = Phi.shape[0]
        if self.spec.scenario.initial == "zero":
            x = np.zeros(n)
        else:
            x = np.array(steady_state(Phi, Gamma, self.schedule[:, 0]), dtype=float)
        for index, value in self._initial_rows:
            x[index] = value
        return x

    def symbolic_loop(self, values: dict[str, Any]) -> dict[str, Any]:
        """The continuous part of :meth:`symbolic`: the circuit's state space with part
        values as CasADi expressions and the continuous loop around it.

        Returns a mapping with ``ss`` (the circuit), ``loop`` (continuous loop) and
        ``zoh`` (the pair ``(A, B)`` whose zero-order hold :meth:`symbolic` forms, the
        matrices :meth:`step_norm` measures).
        """
        try:
            ss = symbolic_state_space(self.circuit, values)
        except WirestateError as exc:
            raise exc.with_file(str(self.circuit_file)) from None
        ctrl = self.spec.controller
        names = dict(states=list(ss.states), inputs=list(ss.inputs), outputs=list(ss.outputs))
        if self.system_loop is not None:
            part = self.system_loop.continuous_part(ss.A, ss.B, ss.C, ss.D)
            return {"ss": ss, "loop": None, "names": names, "zoh": (part.A, part.B)}
        if ctrl is None:
            loop_c = open_loop(ss.A, ss.B, ss.C, ss.D, **names)
        else:
            loop_c = self._close_pi(ss.A, ss.B, ss.C, ss.D, names)
        zoh_pair = (ss.A, ss.B) if self.sampled else (loop_c.A, loop_c.B)
        return {"ss": ss, "loop": loop_c, "names": names, "zoh": zoh_pair}

    def symbolic(
        self, values: dict[str, Any], squarings: int, loop: dict[str, Any] | None = None
    ) -> dict[str, Any]:
        """The loop matrices with part values as CasADi expressions (SX or MX).

        Returns a mapping with ``Phi, Gamma, C, D`` (discrete loop), ``A, B, Cc, Dc``
        (continuous loop); build an :class:`Evaluation` with :meth:`evaluation`. ``loop``
        is :meth:`symbolic_loop` of the same ``values`` when the caller has it already.
        """
        if loop is None:
            loop = self.symbolic_loop(values)
        ss, loop_c, names = loop["ss"], loop["loop"], loop["names"]
        if self.system_loop is not None:
            m = self._system_matrices(
                ss.A, ss.B, ss.C, ss.D, lambda A, B: cexpm.zoh(A, B, self.output_step, squarings)
            )
            Phi, Gamma, C, D = m["Phi"], m["Gamma"], m["C"], m["D"]
            output_maps = m["outputs"]
            loop_c = Loop(m["A"], m["B"], m["Cc"], m["Dc"], [], [], [])
        elif self.sampled:
            powers = hold_powers(*cexpm.zoh(ss.A, ss.B, self.output_step, squarings), self.substeps)
            Ad, Bd = powers[-1]
            loop_d = self._close_pi(Ad, Bd, ss.C, ss.D, names, self.step)
            Phi, Gamma, C, D = loop_d.A, loop_d.B, loop_d.C, loop_d.D
            output_maps = self._held_maps(loop_d, powers, ss.C, ss.D, ss.inputs)
        else:
            Phi, Gamma = cexpm.zoh(loop_c.A, loop_c.B, self.step, squarings)
            C, D = loop_c.C, loop_c.D
            output_maps = [(C, D)]
        import casadi

        # steady states at the input columns the limits refer to, and the initial state,
        # computed here once (a linear solve per column) rather than inside the NLP graph
        columns = self.steady_columns()
        n = Phi.shape[0]
        V = casadi.DM(self.schedule[:, columns])
        Xss = casadi.solve(casadi.DM.eye(n) - Phi, casadi.mtimes(Gamma, V))
        Yss = casadi.mtimes(C, Xss) + casadi.mtimes(D, V)
        x0 = Xss[:, 0] if self.spec.scenario.initial == "steady_state" else casadi.DM.zeros(n, 1)
        if self._initial_rows:
            given = dict(self._initial_rows)
            x0 = casadi.vertcat(*[given[i] if i in given else x0[i] for i in range(n)])
        return {
            "Phi": Phi,
            "Gamma": Gamma,
            "C": C,
            "D": D,
            "A": loop_c.A,
            "B": loop_c.B,
            "Cc": loop_c.C,
            "Dc": loop_c.D,
            "steady": Yss,
            "x0": x0,
            # the output maps between samples (j output steps after each sample), flat so
            # that every entry is one matrix
            **{f"C_sub{j}": Cj for j, (Cj, _) in enumerate(output_maps) if j},
            **{f"D_sub{j}": Dj for j, (_, Dj) in enumerate(output_maps) if j},
        }

    def steady_columns(self) -> list[int]:
        """Sample indices whose input values define steady states used by the limits."""
        columns = {0, self.n_steps}
        for limit in self.spec.limits:
            columns.add(max(int(round(limit.after / self.step)) - 1, 0))
        return sorted(columns)

    def evaluation(self, matrices: dict[str, Any], values: dict[str, Any], X: Any) -> Evaluation:
        """A symbolic :class:`Evaluation` from :meth:`symbolic` matrices and states ``X``."""

        m = matrices
        maps = [(m["C"], m["D"])] + [
            (m[f"C_sub{j}"], m[f"D_sub{j}"]) for j in range(1, self.substeps)
        ]
        Y = self._outputs_between(maps, X, self.schedule)
        return Evaluation(
            m["Phi"],
            m["Gamma"],
            m["C"],
            m["D"],
            m["A"],
            m["B"],
            X,
            Y,
            {**self.nominal, **values},
            True,
            {
                "Cc": m["Cc"],
                "Dc": m["Dc"],
                "steady": {k: m["steady"][:, i] for i, k in enumerate(self.steady_columns())},
                "x0": m["x0"],
            },
        )


def _has_value(part: Any) -> bool:
    return part.kind in ("resistor", "capacitor", "inductor") and getattr(part, "value", None)


def steady_state(Phi: Any, Gamma: Any, v: Any) -> Any:
    """``x = Phi x + Gamma v`` solved for ``x`` (numpy or CasADi)."""
    import casadi

    n = Phi.shape[0]
    if isinstance(Phi, casadi.SX | casadi.MX):
        return casadi.solve(casadi.DM.eye(n) - Phi, casadi.mtimes(Gamma, casadi.DM(v)))
    try:
        return np.linalg.solve(np.eye(n) - Phi, Gamma @ np.asarray(v))
    except np.linalg.LinAlgError:
        return np.linalg.lstsq(np.eye(n) - Phi, Gamma @ np.asarray(v), rcond=None)[0]


def _names(block: Any) -> dict[str, list[str]]:
    return {
        "states": list(block.states),
        "inputs": list(block.inputs),
        "outputs": list(block.outputs),
    }
