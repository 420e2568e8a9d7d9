"""A tuning file resolved into a validated, compiled problem: stage 1 of the chain.

Input: a :class:`~wirestate.spec.tuning.TuningSpec` (and, from Python, a composed system).
Output: a :class:`Problem`: the circuit named by the file (or the circuit block of a system
file) with the outputs the limits and the stress report need added (currents through
parts, voltages across them), every name checked, the loop structure (a ``[controller]``
PI, a system's other blocks, or none), the sample grid, the units, the design variables
with their bounds, the tolerance corners, the :class:`~wirestate.tune.schedule.Schedule`
(stage 2), and the compiled parametric loop (:mod:`wirestate.tune.parametric`), built
once on first use and shared by everything that evaluates the case.

Three evaluations of a case exist, all on the same circuit compile and loop algebra:

* :meth:`Problem.evaluate` -- numeric, many part-value rows at once, through the
  parametric loop (the optimiser's exchange, snapping, corners, yield and sweeps);
* :meth:`Problem.symbolic` -- CasADi expressions of part values (the NLP);
* :meth:`Problem.numeric` -- one point through the independent numeric path
  (:func:`wirestate.reduce.compile_circuit` and scipy's exponential), the re-verification.
"""

from __future__ import annotations

import itertools
import math
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from wirestate.errors import TuningError, WirestateError
from wirestate.lti import CircuitBlock
from wirestate.reduce import compile_circuit
from wirestate.spec import CircuitSpec, load_circuit
from wirestate.spec.tuning import Limit, TuningSpec, check_units
from wirestate.tune.closed_loop import continuous_loop
from wirestate.tune.schedule import Grid, build_schedule

if TYPE_CHECKING:
    from wirestate.compose import ComposedSystem
    from wirestate.tune.evaluation import Evaluation
    from wirestate.tune.parametric import ParametricLoop

CURRENT_PREFIX = "i__"
VOLTAGE_PREFIX = "v__"
#: outputs added for a limited controller's command (its output range as two limits)
COMMAND_PREFIX = "u__"
_WATCH = (CURRENT_PREFIX, VOLTAGE_PREFIX)
#: parts whose value can be sized or spread by a tolerance
VALUE_KINDS = ("resistor", "capacitor", "inductor")
#: unit of each value kind (SI)
VALUE_UNITS = {"resistor": "ohm", "capacitor": "F", "inductor": "H"}
#: at most this many toleranced parts span the corners (2**8 = 256 corners)
MAX_CORNER_PARTS = 8


class Problem:
    """A tuning file resolved against its circuit; see the module docstring.

    Parameters
    ----------
    spec
        The validated tuning file.
    file
        The tuning file's path, for messages.
    system
        A composed system built in Python (:func:`wirestate.compose.compose`), used
        instead of a system file; ``spec.tuning.block`` names its circuit block.
    """

    def __init__(
        self,
        spec: TuningSpec,
        *,
        file: str | None = None,
        system: ComposedSystem | None = None,
    ) -> None:
        self.spec = spec
        self.file = file
        self.system_loop = None
        circuit, system = self._design_circuit(system)
        self.base_circuit = circuit
        self.variables = list(spec.variables)
        self._check_robust()
        self._check_variables(circuit)
        self.watched = self._watched_parts(circuit)
        self.circuit = self._with_watch_outputs(circuit)
        self.nominal = {n: float(p.value) for n, p in circuit.parts.items() if _has_value(p)}
        self.block = self._compile(self.nominal)
        self.circuit_names = {
            "states": list(self.block.states),
            "inputs": list(self.block.inputs),
            "outputs": list(self.block.outputs),
        }
        if system is not None:
            from wirestate.tune.wiring import SystemLoop

            self.system_loop = SystemLoop(
                system, spec.tuning.block, list(self.block.outputs), file=file
            )
            self.spec = spec = self._with_range_limits(spec)
            period = self.system_loop.sample_time
            self.sampled = period is not None
            step = float(period) if self.sampled else float(spec.scenario.step)
            self._check_system_limits()
        else:
            ctrl = spec.controller
            self.sampled = ctrl is not None and ctrl.sample_time is not None
            step = float(ctrl.sample_time) if self.sampled else float(spec.scenario.step)
        substeps = self._substeps(step) if self.sampled else 1
        self.grid = Grid(step, substeps, max(1, int(round(spec.scenario.horizon / step))))
        loop = continuous_loop(self, self.block.A, self.block.B, self.block.C, self.block.D)
        self.states, self.inputs, self.outputs = loop.states, loop.inputs, loop.outputs
        self._check_names()
        check_units(self.spec, self.units, file=self.file)
        self.schedule = build_schedule(self)
        self._loops: dict[tuple, ParametricLoop] = {}

    # -- the sample grid, as attributes -------------------------------------------------

    @property
    def step(self) -> float:
        """The stepping period (s): a sampled loop's period, else the scenario step."""
        return self.grid.step

    @property
    def substeps(self) -> int:
        return self.grid.substeps

    @property
    def n_steps(self) -> int:
        return self.grid.n_steps

    @property
    def output_step(self) -> float:
        return self.grid.output_step

    @property
    def times(self) -> np.ndarray:
        """Times of the output samples (``Evaluation.Y`` columns), s."""
        return self.grid.times

    # -- set-up -----------------------------------------------------------------------

    def _design_circuit(self, system: Any) -> tuple[CircuitSpec, Any]:
        spec = self.spec
        if system is not None:
            circuit, self.circuit_file = self._given_system(system)
            return circuit, system
        if spec.system_path is not None:
            return self._load_system()
        if spec.tuning.circuit is None:
            raise TuningError(
                "missing_field",
                "the tuning names no circuit or system file; give 'circuit', 'system', or "
                "a composed system in Python",
                file=self.file,
                location=("tuning",),
            )
        self.circuit_file = spec.circuit_path
        self._check_exists(spec.circuit_path, "circuit")
        try:
            return load_circuit(spec.circuit_path), None
        except WirestateError as exc:
            raise exc.with_file(str(spec.circuit_path)) from None

    def _load_system(self) -> tuple[CircuitSpec, Any]:
        """The system file: its design block's circuit (its file for messages), the system."""
        from wirestate.compose import system_from_spec
        from wirestate.spec.system import load_system_spec

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
        self.circuit_file = circuit_file
        return circuit, system

    def _given_system(self, system: Any) -> tuple[CircuitSpec, str]:
        from wirestate.tune.wiring import not_a_circuit_block

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

    def _check_robust(self) -> None:
        if self.spec.solver.robust and not self.spec.stress.tolerance_corners:
            raise TuningError(
                "invalid_field",
                "robust = true imposes every limit at the tolerance corners; it needs "
                "stress.tolerance_corners = true",
                file=self.file,
                location=("solver", "robust"),
            )

    def _check_variables(self, circuit: CircuitSpec) -> None:
        for name in self.variables:
            part = circuit.parts.get(name)
            if part is None or not hasattr(part, "value") or part.kind not in VALUE_KINDS:
                raise TuningError(
                    "unknown_variable",
                    f"design variable {name!r} names no resistor, capacitor or inductor of "
                    f"circuit {circuit.name!r}",
                    file=self.file,
                    location=("variables", name),
                )
            expected = VALUE_UNITS[part.kind]
            for field_name, unit in self.spec.variables[name].written_units.items():
                if unit not in (expected, "1"):
                    raise TuningError(
                        "wrong_unit",
                        f"{name} is {_article(part.kind)} {part.kind}; its {field_name} must "
                        f"be in {expected}, got a value in {unit}",
                        file=self.file,
                        location=("variables", name, field_name),
                    )

    def _with_range_limits(self, spec: TuningSpec) -> TuningSpec:
        """The spec with two more limits per controller with output limits: its command
        (output ``u__<block>``) at most ``high`` and at least ``low``, so the loop's
        unsaturated dynamics stay exact."""
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

    def _substeps(self, period: float) -> int:
        """Output steps per sample period of a sampled loop: the period over the scenario
        step, which must divide it."""
        ratio = period / float(self.spec.scenario.step)
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
                f"{period:g} s {what}",
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
            if part.kind in VALUE_KINDS and any(
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

    def _compile(self, values: dict[str, float]) -> CircuitBlock:
        try:
            return compile_circuit(self.circuit.with_values(values))
        except WirestateError as exc:
            raise exc.with_file(str(self.circuit_file)) from None

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
            self._check_signal(limit, "output", self.outputs, self.user_outputs)
            self._check_signal(limit, "input", self.inputs, self.inputs)
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

    def _check_signal(self, limit: Limit, key: str, known: list[str], shown: list[str]) -> None:
        name = getattr(limit, key)
        if name is not None and name not in known:
            verb = "names output" if key == "output" else "injects at input"
            raise TuningError(
                "invalid_limit",
                f"limit {limit.label!r} {verb} {name!r}; {key}s: {', '.join(shown)}",
                file=self.file,
                location=("limits", limit.label, key),
            )

    # -- names and units ----------------------------------------------------------------

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

    @property
    def user_outputs(self) -> list[str]:
        """The outputs a tuning file can name (without the ones the problem adds)."""
        return [o for o in self.outputs if not o.startswith((*_WATCH, COMMAND_PREFIX))]

    def _system_signals(self) -> list[tuple[str, str]]:
        """``(output, block.signal)`` of a system case: the system's external outputs, the
        design block's watch outputs, then the commands of limited controllers."""
        loop = self.system_loop
        pairs = list(loop.system.external_outputs.items())
        pairs += [(o, f"{loop.design}.{o}") for o in self.block.outputs if o.startswith(_WATCH)]
        pairs += [(COMMAND_PREFIX + s.split(".")[0], s) for s in loop.output_ranges]
        return pairs

    def system_outputs(self) -> list[str]:
        """The outputs of a system case (see :meth:`_system_signals`)."""
        return [output for output, _ in self._system_signals()]

    def system_rows(self, signals: list[str]) -> np.ndarray:
        """0/1 matrix picking :meth:`system_outputs` out of ``signals`` (a missing one,
        such as a sampled output in the continuous part, gives a zero row)."""
        pairs = self._system_signals()
        S = np.zeros((len(pairs), len(signals)))
        for row, (_, name) in enumerate(pairs):
            if name in signals:
                S[row, signals.index(name)] = 1.0
        return S

    # -- design variables and tolerance corners ------------------------------------------

    @property
    def bounds(self) -> dict[str, tuple[float, float]]:
        """``variable -> (min, max)`` (SI units)."""
        return {n: (float(v.min), float(v.max)) for n, v in self.spec.variables.items()}

    def start_values(self) -> dict[str, float]:
        """The starting point: each variable's ``start``, else the geometric mean of its
        bounds."""
        out = {}
        for name, var in self.spec.variables.items():
            out[name] = float(var.start) if var.start is not None else math.sqrt(var.min * var.max)
        return out

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
            n for n, p in parts.items() if getattr(p, "tolerance", None) and p.kind in VALUE_KINDS
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

    def parametric(
        self,
        parameters: list[str] | None = None,
        box: dict[str, tuple[float, float]] | None = None,
    ) -> ParametricLoop:
        """The compiled parametric loop over ``parameters`` (default: the design variables
        and the toleranced parts), accurate over ``box`` (default: the variable bounds,
        widened by every part's tolerance). Built once per argument set and kept."""
        from wirestate.tune.parametric import ParametricLoop, default_box

        if parameters is None:
            parameters = list(dict.fromkeys(self.variables + self.tolerance_corners()[0]))
        box = default_box(self, parameters) if box is None else box
        key = (tuple(parameters), tuple(sorted(box.items())))
        if key not in self._loops:
            self._loops[key] = ParametricLoop(self, parameters, box)
        return self._loops[key]

    def evaluate(self, rows: list[dict[str, float]]) -> Evaluation:
        """Numeric evaluations at many part-value rows at once, through the default
        parametric loop; part values not given in a row take their nominal value."""
        loop = self.parametric()
        return loop.evaluate(loop.rows(rows))

    def symbolic(self, values: dict[str, Any], *, horizon: int | None = None) -> Evaluation:
        """The case with part values as CasADi expressions (see
        :meth:`ParametricLoop.symbolic`)."""
        return self.parametric().symbolic(values, horizon=horizon)

    def numeric(self, values: dict[str, float], *, initial: np.ndarray | None = None):
        """One point through the independent numeric path (numeric compile, scipy's
        exponential): the re-verification. ``initial`` replaces the initial state."""
        from wirestate.tune.evaluation import independent_evaluation

        return independent_evaluation(self, values, initial=initial)


def _has_value(part: Any) -> bool:
    return part.kind in VALUE_KINDS and getattr(part, "value", None)


def _article(word: str) -> str:
    return "an" if word[:1] in "aeiou" else "a"
