"""A switched tuning case: the system, its loop, and mode sequences from numeric runs.

Input: a :class:`~wirestate.spec.tuning.TuningSpec` whose ``system`` has a switched circuit
block driven by a modulator, whose duty a sampled PI sets. Output: a
:class:`SwitchedProblem` that checks every name, finds the loop (measured output, gain,
reference), gives the averaged operating point (state-space averaging, Middlebrook and
Cuk, IEEE PESC 1976) and runs the closed loop numerically
(:func:`~wirestate.simulate.switched_system.simulate_switched_system`) to read off the
mode sequence of one switching period (:class:`~wirestate.tune.sequence.PeriodSequence`).
"""

from __future__ import annotations

import dataclasses
import math
from pathlib import Path
from typing import Any

import numpy as np

from wirestate.errors import TuningError, WirestateError
from wirestate.spec.tuning import LIMIT_KINDS, SWITCHED_LIMIT_KINDS, TuningSpec
from wirestate.switching import SwitchedCircuit, is_switched
from wirestate.tune.sequence import Boundary, PeriodSequence

__all__ = ["SwitchedProblem", "is_switched_tuning"]

#: part kinds whose value a design variable may size
SIZED_KINDS = {"resistor": "ohm", "capacitor": "F", "inductor": "H"}
#: carrier periods the closed loop runs before its last period is read
BOOTSTRAP_PERIODS = 4
CHECK_PERIODS = 3


def is_switched_tuning(spec: TuningSpec) -> bool:
    """True when a tuning file asks for switched limits or its design block switches."""
    if any(limit.kind in SWITCHED_LIMIT_KINDS for limit in spec.limits):
        return True
    if spec.system_path is None or not spec.system_path.is_file():
        return False
    try:
        from wirestate.spec.system import load_system_spec

        system = load_system_spec(spec.system_path)
        block = system.blocks.get(spec.tuning.block or "")
        path = Path(getattr(block, "file", "") or "")
        if not path.is_absolute():
            path = spec.system_path.parent / path
        from wirestate.spec import load_circuit

        return path.is_file() and is_switched(load_circuit(path))
    except WirestateError:
        return False  # the linear path reports the file's own mistake


class SwitchedProblem:
    """The resolved switched tuning case (see the module docstring).

    Attributes
    ----------
    system
        The composed system; ``block`` its switched circuit block.
    circuit
        The block's :class:`~wirestate.switching.SwitchedCircuit` with probes for every
        part a limit, the objective or the stress report needs.
    switch, modulator, controller
        The switch the modulator drives, the modulator, the sampled PI's block name.
    measure, gain, reference
        In steady state ``gain * measure`` equals ``reference`` at every carrier start.
    parts
        Part values the sequence model takes: the design variables, then every other
        toleranced part (tolerance corners).
    """

    def __init__(self, spec: TuningSpec, *, file: str | None = None) -> None:
        self.spec = spec
        self.file = file
        self._check_kinds()
        self.system = self._load_system()
        self.block = spec.tuning.block
        view = self.system.blocks.get(self.block)
        if view is None or view.category != "switched":
            self._linear()
        self.circuit_spec = view.source.spec
        self._find_loop()
        self._check_variables()
        self.stress_parts = self._stress_parts()
        self._check_limits()
        probes = []
        for name in self._probed_parts():
            probes += [("current", name), ("voltage", name)]
        self.circuit = SwitchedCircuit(self.circuit_spec, extra_probes=tuple(probes))
        self.inputs = self._circuit_inputs()
        toleranced = [
            name
            for name, part in self.circuit_spec.parts.items()
            if getattr(part, "tolerance", None) and part.kind in SIZED_KINDS
        ]
        self.variables = list(spec.variables)
        self.parts = self.variables + [p for p in toleranced if p not in self.variables]
        self.tolerances = {
            p: float(self.circuit_spec.parts[p].tolerance)
            for p in self.parts
            if getattr(self.circuit_spec.parts[p], "tolerance", None)
        }
        self.bounds = {n: (float(v.min), float(v.max)) for n, v in spec.variables.items()}

    # -- checks -----------------------------------------------------------------------------
    def _refuse(self, message: str, location: tuple, code: str = "unsupported_switched_tuning"):
        raise TuningError(code, message, file=self.file, location=location)

    def _linear(self) -> None:
        limit = next(x for x in self.spec.limits if x.kind in SWITCHED_LIMIT_KINDS)
        where = f"block {self.spec.tuning.block!r}" if self.spec.tuning.block else "the circuit"
        self._refuse(
            f"limit {limit.label!r}: a {limit.kind!r} limit needs switching events, and "
            f"{where} has no switches or diodes",
            ("limits", limit.label, "kind"),
            "switched_limit_on_linear",
        )

    def _check_kinds(self) -> None:
        spec = self.spec
        for limit in spec.limits:
            if limit.kind in LIMIT_KINDS:
                self._refuse(
                    f"limit {limit.label!r}: a {limit.kind!r} limit applies to linear "
                    f"circuits; a switched tuning takes {', '.join(SWITCHED_LIMIT_KINDS)}",
                    ("limits", limit.label, "kind"),
                    "invalid_limit",
                )
        if spec.system_path is None:
            switched = False
            if spec.tuning.circuit is not None and spec.circuit_path.is_file():
                from wirestate.spec import load_circuit

                try:
                    switched = is_switched(load_circuit(spec.circuit_path))
                except WirestateError as exc:
                    raise exc.with_file(str(spec.circuit_path)) from None
            if not switched:
                self._linear()
            self._refuse(
                "a switched tuning needs 'system' (a switched circuit block, a modulator and "
                "the sampled PI that sets its duty)",
                ("tuning",),
            )
        objective = spec.objective
        if objective.ise or objective.peak_impedance:
            self._refuse(
                "a switched tuning's objective takes 'resistor_energy' (energy per switching "
                "period) and 'capacitance' only",
                ("objective",),
            )
        if spec.solver.robust and not spec.stress.tolerance_corners:
            self._refuse(
                "robust = true imposes limits at tolerance corners; it needs "
                "stress.tolerance_corners = true",
                ("solver", "robust"),
                "invalid_field",
            )

    def _load_system(self) -> Any:
        from wirestate.compose import system_from_spec
        from wirestate.spec.system import load_system_spec

        path = self.spec.system_path
        if not Path(path).is_file():
            self._refuse(f"system = {self.spec.tuning.system!r}: no file {path}",
                         ("tuning", "system"), "file_not_found")  # fmt: skip
        try:
            return system_from_spec(load_system_spec(path), file=path)
        except WirestateError as exc:
            raise exc.with_file(str(path)) from None

    def _find_loop(self) -> None:
        cs = self.system
        modulators = [b for b in cs.blocks.values() if b.category == "modulator"]
        if len(modulators) != 1:
            self._refuse("a switched tuning needs exactly one modulator block in the system",
                         ("tuning", "system"))  # fmt: skip
        mod = modulators[0]
        m = mod.source
        if m.carrier != "sawtooth" or m.complementary or m.phase or m.dead_time:
            self._refuse(
                f"modulator {mod.name!r}: the switched tuning handles a sawtooth carrier with "
                "one gate, no phase and no dead time",
                ("tuning", "system"),
            )
        self.modulator = m
        self.period = m.period
        gate_dest = [d for d, s in cs.wiring.items() if s == f"{mod.name}.gate"]
        gates = {d.split(".", 1)[1] for d in gate_dest if d.split(".")[0] == self.block}
        switches = [
            n for n, p in self.circuit_spec.parts.items()
            if p.kind == "switch" and (getattr(p, "gate", None) or n) in gates
        ]  # fmt: skip
        if len(switches) != 1:
            self._refuse(f"the modulator must drive the gate of one switch of {self.block!r}",
                         ("tuning", "system"))  # fmt: skip
        self.switch = switches[0]
        source = cs.wiring.get(f"{mod.name}.duty", "")
        controller = cs.blocks.get(source.split(".")[0])
        pid = getattr(controller, "source", None)
        if controller is None or controller.category != "sampled" or not getattr(pid, "ki", 0):
            self._refuse(
                "the modulator's duty must come from a sampled PI with integral action",
                ("tuning", "system"),
            )
        if pid.kd or abs(pid.sample_time - self.period) > 1e-9 * self.period:
            self._refuse("the PI must be a PI (kd = 0) sampled once per carrier period",
                         ("tuning", "system"))  # fmt: skip
        self.controller = controller.name
        self.measure, self.gain = self._measured(f"{controller.name}.measurement")
        self.reference = self._external_value(f"{controller.name}.reference")

    def _measured(self, dest: str) -> tuple[str, float]:
        """The circuit output the PI measures and the static gain in between."""
        cs, gain = self.system, 1.0
        for _ in range(len(cs.blocks) + 1):
            src = cs.wiring.get(dest)
            if src is None:
                break
            block, signal = src.split(".", 1)
            if block == self.block:
                return signal, gain
            view = cs.blocks[block]
            D = np.asarray(getattr(view.system, "D", np.zeros((0, 0))))
            if view.category != "linear" or view.states or D.shape != (1, 1):
                break
            gain *= float(D[0, 0])
            dest = f"{block}.{view.inputs[0]}"
        self._refuse(
            "the PI's measurement must be an output of the switched block, through static "
            "gains only",
            ("tuning", "system"),
        )
        raise AssertionError  # unreachable

    def _external_value(self, dest: str) -> float:
        for ext, dests in self.system.external_inputs.items():
            if dest in dests:
                value = self.spec.scenario.inputs.get(ext, self.system.input_defaults.get(ext))
                if value is None:
                    self._refuse(f"scenario.inputs gives no value for {ext!r}",
                                 ("scenario", "inputs"), "missing_field")  # fmt: skip
                return float(value)
        self._refuse(f"{dest} must be an input of the system", ("tuning", "system"))
        raise AssertionError  # unreachable

    def _circuit_inputs(self) -> np.ndarray:
        """The circuit's input values (scenario inputs, else the sources' values)."""
        cs, out = self.system, []
        defaults = self.circuit.input_defaults
        for name in self.circuit.inputs:
            value = defaults.get(name, 0.0)
            for ext, dests in cs.external_inputs.items():
                if f"{self.block}.{name}" in dests:
                    value = float(self.spec.scenario.inputs.get(ext, cs.input_defaults.get(
                        ext, value)))  # fmt: skip
            out.append(value)
        return np.array(out, dtype=float)

    def _check_variables(self) -> None:
        for name, variable in self.spec.variables.items():
            part = self.circuit_spec.parts.get(name)
            if part is None or part.kind not in SIZED_KINDS:
                self._refuse(
                    f"design variable {name!r} names no resistor, capacitor or inductor of "
                    f"block {self.block!r}",
                    ("variables", name),
                    "unknown_variable",
                )
            expected = SIZED_KINDS[part.kind]
            for field_name, unit in variable.written_units.items():
                if unit not in (expected, "1"):
                    self._refuse(
                        f"{name} is a {part.kind}; its {field_name} must be in {expected}, "
                        f"got a value in {unit}",
                        ("variables", name, field_name),
                        "wrong_unit",
                    )

    def _stress_parts(self) -> list[str]:
        parts = self.circuit_spec.parts
        rated = [
            n for n, p in parts.items()
            if p.kind == "switch" and getattr(p, "rated_voltage", None) is not None
        ]  # fmt: skip
        return list(dict.fromkeys([*self.spec.variables, *rated]))

    def _probed_parts(self) -> list[str]:
        names = [p for p in self.stress_parts if self.circuit_spec.parts[p].kind != "switch"]
        for limit in self.spec.limits:
            if limit.kind in ("energy_per_period", "average_power"):
                names.append(limit.part)
            if limit.kind == "efficiency":
                names += [limit.input, *limit.loads]
        names += list(self.spec.objective.parts) if self.spec.objective.resistor_energy else []
        devices = {n for n, p in self.circuit_spec.parts.items() if p.kind in ("switch", "diode")}
        return [n for n in dict.fromkeys(names) if n not in devices]

    def _check_limits(self) -> None:
        from wirestate.spec.tuning import check_units

        parts = self.circuit_spec.parts
        outputs = set(self.circuit_spec.outputs) | {
            f"{w}_{n}" for n, p in parts.items() if p.kind in ("switch", "diode") for w in "iv"
        }
        for limit in self.spec.limits:
            where = ("limits", limit.label)
            if limit.output is not None and limit.output not in outputs:
                self._refuse(
                    f"limit {limit.label!r}: block {self.block!r} has no output "
                    f"{limit.output!r} (outputs: {', '.join(sorted(outputs))})",
                    (*where, "output"),
                    "invalid_limit",
                )
            if limit.kind in ("peak_after_switching", "ring_settling"):
                if limit.part != self.switch:
                    self._refuse(
                        f"limit {limit.label!r}: no switching event of {limit.part!r}; the "
                        f"modulator switches {self.switch!r}",
                        (*where, "part"),
                        "unknown_switching_event",
                    )
                if limit.within >= self.period:
                    self._refuse(
                        f"limit {limit.label!r}: 'within' must be shorter than the period",
                        (*where, "within"),
                        "invalid_limit",
                    )
            wanted = {"energy_per_period": ("resistor",), "average_power": ("resistor",)}
            if (
                limit.kind in wanted
                and getattr(parts.get(limit.part), "kind", None) not in (wanted[limit.kind])
            ):
                self._refuse(f"limit {limit.label!r}: {limit.part!r} is no resistor of "
                             f"{self.block!r}", (*where, "part"), "invalid_limit")  # fmt: skip
            if limit.kind == "efficiency":
                if getattr(parts.get(limit.input), "kind", None) != "voltage_source":
                    self._refuse(f"limit {limit.label!r}: input {limit.input!r} is no voltage "
                                 f"source of {self.block!r}", (*where, "input"),
                                 "invalid_limit")  # fmt: skip
                for load in limit.loads:
                    kind = getattr(parts.get(load), "kind", None)
                    if kind not in ("resistor", "current_source"):
                        self._refuse(f"limit {limit.label!r}: load {load!r} is no resistor or "
                                     f"current source of {self.block!r}", (*where, "loads"),
                                     "invalid_limit")  # fmt: skip
        units = {name: "V" if name.startswith("v_") else "A" for name in outputs}
        for name, out in self.circuit_spec.outputs.items():
            units[name] = "V" if getattr(out, "voltage", None) is not None else "A"
        check_units(self.spec, units, file=self.file)
        for part in self.spec.objective.parts:
            if part not in parts:
                self._refuse(f"objective: no part {part!r} in {self.block!r}",
                             ("objective", "parts"), "unknown_part")  # fmt: skip

    # -- numbers ------------------------------------------------------------------------------
    def start_values(self) -> dict[str, float]:
        """Starting design values (``start``, else the geometric mean of the bounds)."""
        out = {}
        for name, v in self.spec.variables.items():
            out[name] = float(v.start) if v.start is not None else math.sqrt(v.min * v.max)
        return out

    def nominal(self, design: dict[str, float]) -> dict[str, float]:
        """Every part of :attr:`parts` at its file value, design values applied."""
        out = {}
        for name in self.parts:
            out[name] = float(design.get(name, self.circuit_spec.parts[name].value))
        return out

    def open_loop_run(
        self, values: dict[str, float], x0: np.ndarray, duty: float, periods: int
    ) -> Any:
        """The circuit alone, its gate a ``pwm:`` waveform at ``duty``, from ``x0``."""
        from wirestate.simulate.switched import simulate_switched

        circuit = SwitchedCircuit(self.circuit_spec.with_values(values))
        gate = circuit.devices[circuit.device_index(self.switch)].gate
        inputs = dict(zip(circuit.inputs, (float(v) for v in self.inputs), strict=True))
        inputs[gate] = f"pwm:{self.modulator.frequency!r}Hz,duty={duty!r}"
        T = self.period
        return simulate_switched(circuit, periods * T, T / 4, inputs, x0=np.array(x0))

    def periodic_start(self, values: dict[str, float]) -> tuple[np.ndarray, float]:
        """A periodic steady state near the operating point, as a start for the runs.

        For a duty, one period is run from a state, its mode sequence read, and the fixed
        point of that sequence's period map (event times held) taken as the next state,
        until the sequence repeats; the duty is found by the secant method on the loop's
        condition (measurement on the reference at the carrier start).
        """
        circuit = SwitchedCircuit(self.circuit_spec.with_values(values))
        row = circuit.outputs.index(self.measure)
        x = np.array(circuit.x0, dtype=float)

        def miss(duty: float) -> float:
            nonlocal x
            for _ in range(8):
                sequence = self.last_period(self.open_loop_run(values, x, duty, 2), 2)
                x_new = _fixed_point(circuit, sequence, self.inputs)
                done = np.allclose(x_new, x, rtol=1e-6, atol=1e-9)
                x = x_new
                if done:
                    break
            mode = circuit.mode(sequence.modes[0])
            y = mode.C[row] @ x + mode.D[row] @ self.inputs + mode.g[row]
            return self.gain * float(y) - self.reference

        d0, d1 = 0.3, 0.5
        m0, m1 = miss(d0), miss(d1)
        for _ in range(12):
            if m1 == m0:
                break
            d0, d1, m0 = d1, min(0.95, max(0.02, d1 - m1 * (d1 - d0) / (m1 - m0))), m1
            m1 = miss(d1)
            if abs(m1) <= 1e-9 * max(abs(self.reference), 1.0):
                break
        return x, d1

    def closed_loop_run(
        self, values: dict[str, float], x0: np.ndarray, duty: float, periods: int
    ) -> Any:
        """The system run numerically from ``x0`` (circuit) with the PI at ``duty``."""
        from wirestate.compose import view
        from wirestate.reduce import compile_circuit
        from wirestate.simulate.switched_system import simulate_switched_system

        cs = self.system
        spec = self.circuit_spec.with_values(values)
        stage = dataclasses.replace(view(compile_circuit(spec), self.block), x0=np.array(x0))
        pi = cs.blocks[self.controller]
        blocks = dict(cs.blocks)
        blocks[self.block] = stage
        blocks[self.controller] = dataclasses.replace(pi, x0=np.full(len(pi.states), duty))
        system = dataclasses.replace(cs, blocks=blocks)
        inputs = {k: float(v) for k, v in self.spec.scenario.inputs.items()}
        T = self.period
        return simulate_switched_system(system, periods * T, T / 4, inputs)

    def last_period(self, result: Any, periods: int) -> PeriodSequence:
        """The mode sequence of the run's last carrier period."""
        T = self.period
        t0, t1 = (periods - 1) * T, periods * T
        slack = 1e-9 * T
        prefix = f"{self.block}."
        modes, boundaries = [], []
        for interval in result.modes:
            if interval.end <= t0 + slack or interval.start >= t1 - slack:
                continue
            modes.append(tuple(interval.on))
        events = [e for e in result.events if t0 + slack < e.time < t1 - slack]
        times = sorted({e.time for e in events})
        for t in times:
            at = [e for e in events if e.time == t]
            if len(at) != 1:
                self._refuse(
                    f"{len(at)} parts change mode at one instant inside a period "
                    f"({', '.join(e.part for e in at)}); the switched tuning needs one "
                    "change per boundary",
                    ("tuning", "system"),
                )
            e = at[0]
            boundaries.append(Boundary(e.part.removeprefix(prefix), e.change, bool(e.located),
                                       float(e.time - t0)))  # fmt: skip
        gate = [b for b in boundaries if not b.located]
        if len(gate) != 1 or gate[0].part != self.switch or len(modes) != len(boundaries) + 1:
            self._refuse(
                "the last period of the closed-loop run does not have one turn-off of "
                f"{self.switch} (the switch may stay on or off for a whole period)",
                ("scenario",),
            )
        return PeriodSequence(tuple(modes), tuple(boundaries), T, gate[0].time / T)


def _fixed_point(circuit: SwitchedCircuit, sequence: PeriodSequence, u: np.ndarray) -> np.ndarray:
    """``x0 = (I - Phi)^-1 gamma`` of one period's sequence, event times held (numeric)."""
    from scipy.linalg import expm

    n = circuit.n_states
    times = [0.0, *(b.time for b in sequence.boundaries), sequence.period]
    M = np.eye(n + 1)
    for k, on in enumerate(sequence.modes):
        mode = circuit.mode(on)
        Z = np.zeros((n + 1, n + 1))
        Z[:n, :n] = mode.A
        Z[:n, n] = mode.B @ u + mode.f
        M = expm(Z * (times[k + 1] - times[k])) @ M
    return np.linalg.solve(np.eye(n) - M[:n, :n], M[:n, n])
