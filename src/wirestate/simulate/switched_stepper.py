"""Co-simulation stepping of switched circuits: events inside :meth:`step`.

``Stepper(block, dt)`` returns a :class:`SwitchedStepper` when the block has switches or
diodes, or when a modulator drives its gates (``modulator=`` and ``gates=``, or a composed
system of switched circuits, linear blocks and modulators). Within one call of
:meth:`~SwitchedStepper.step` the inputs are held; the state advances exactly through
every gate edge of the modulator (latched at each carrier start with the duty input of
that step) and every diode event located on the exact solution
(:class:`~wirestate.simulate.switched.SwitchedEngine`). The events of the step are
reported in :attr:`SwitchedStepper.last_events` as ``(time, part, "off -> on")``;
:meth:`~SwitchedStepper.save` and :meth:`~SwitchedStepper.restore` include the mode, the
modulator's pending edges and the event list.
"""

from __future__ import annotations

import copy
import math
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np

from wirestate.compose import MODULATOR, SAMPLED, ComposedSystem, compose
from wirestate.errors import SimulationError
from wirestate.reduce import compile_circuit
from wirestate.simulate.stepper import Stepper
from wirestate.simulate.switched import SwitchedEngine, SwitchEvent
from wirestate.simulate.switched_system import SystemPart, has_switching
from wirestate.switching import SwitchedCircuit, switched_circuit

#: times within this fraction of the step are one instant (carrier starts, edges)
_SNAP = 1e-9


def is_switched_model(system: Any, modulator: Any = None) -> bool:
    """True when :class:`~wirestate.simulate.stepper.Stepper` should step ``system`` with
    events (switches, diodes or a modulator)."""
    return modulator is not None or has_switching(system) or switched_circuit(system) is not None


class SwitchedStepper(Stepper):
    """Advance a switched circuit (or a system of switched circuits, linear blocks and
    modulators) one step at a time, exactly, with the events inside each step.

    Parameters
    ----------
    system
        A compiled circuit with switches or diodes (``CircuitBlock`` or
        :class:`~wirestate.switching.SwitchedCircuit`), or a composed system whose blocks
        are switched circuits, linear blocks and modulators (no sampled blocks: the master
        runs the controllers).
    dt
        Default step (s); :meth:`step` may pass another one per call.
    x0
        Initial state.
    modulator, gates
        A :class:`~wirestate.blocks.Modulator` inside, and which of its outputs drives
        which gate input (``{"Q1": "gate"}``); its ``duty`` becomes an input of the stepper.
    max_changes
        Mode changes allowed at one instant before ``switching_chatter``.
    """

    def __init__(
        self,
        system: Any,
        dt: float,
        *,
        x0: Sequence[float] | None = None,
        modulator: Any = None,
        gates: Mapping[str, str] | None = None,
        max_changes: int | None = None,
    ) -> None:
        wrapped = modulator is not None
        if wrapped:
            system = _with_modulator(system, modulator, gates or {})
        if isinstance(system, ComposedSystem):
            self._init_system(system, prefixed=not wrapped)
        else:
            circuit = switched_circuit(system)
            self.part = circuit
            self.name = circuit.name
            self.input_names = list(circuit.inputs)
            self.output_names = list(circuit.outputs)
            self.units = dict(circuit.units)
            self._sources = [("ext", j) for j in range(len(circuit.inputs))]
            self._output_rows = [("continuous", j) for j in range(len(circuit.outputs))]
            self._modulators: dict[str, Any] = {}
            self._defaults = dict(circuit.input_defaults)
        self.state_names = list(self.part.states)
        if wrapped:  # one block with its modulator: the block's own state names
            self.state_names = [s.split(".", 1)[1] for s in self.state_names]
        self._n = len(self.state_names)
        self._m = len(self.input_names)
        self._index = {name: i for i, name in enumerate(self.input_names)}
        self._u = np.zeros(self._m)
        for name, value in self._defaults.items():
            if name in self._index and value is not None:
                self._u[self._index[name]] = float(value)
        self.engine = SwitchedEngine(self.part, max_changes=max_changes)
        if x0 is not None:
            self.engine.x = self._checked_state(x0)
        self._schedules = {name: m.schedule() for name, m in self._modulators.items()}
        self._carriers = dict.fromkeys(self._modulators, 0)
        self._started = False
        self.time = 0.0
        self.last_events: list[SwitchEvent] = []
        self._dt = self._checked_dt(dt)

    def _init_system(self, cs: ComposedSystem, *, prefixed: bool) -> None:
        sampled = [b.name for b in cs.blocks.values() if b.category == SAMPLED]
        if sampled:
            raise SimulationError(
                "unsupported_switched_system",
                f"{cs.name}: the stepper runs no sampled blocks ({', '.join(sampled)}); the "
                "master runs the controller and passes its command in",
                location=("blocks", sampled[0]),
            )
        self._cs = cs
        self.part = SystemPart(cs, prefixed=prefixed)
        self.name = cs.name
        self.input_names = list(cs.inputs)
        self.output_names = list(cs.outputs)
        self.units = dict(cs.units)
        self._defaults = dict(cs.input_defaults)
        self._modulators = {b.name: b.source for b in cs.blocks.values() if b.category == MODULATOR}
        self._sources = []
        for name in self.part.inputs:
            if name in cs.external_inputs:
                self._sources.append(("ext", cs.inputs.index(name)))
            else:
                block, signal = name.split(".")
                self._sources.append((MODULATOR, block, cs.blocks[block].outputs.index(signal)))
        self._duty = {}
        for name in self._modulators:
            dest = f"{name}.duty"
            ext = [e for e, dests in cs.external_inputs.items() if dest in dests]
            if not ext:
                raise SimulationError(
                    "unsupported_switched_system",
                    f"{cs.name}: {dest} must be an external input of the stepper (the master "
                    "passes the duty in)",
                    location=("wiring", dest),
                )
            self._duty[name] = cs.inputs.index(ext[0])
        self._output_rows = []
        for src in cs.external_outputs.values():
            block, signal = src.split(".")
            if cs.blocks[block].category == MODULATOR:
                index = cs.blocks[block].outputs.index(signal)
                self._output_rows.append((MODULATOR, block, index))
            else:
                self._output_rows.append(("continuous", self.part.output_index(src)))

    # -- stepping ------------------------------------------------------------------------
    def step(self, u: Sequence[float] | Mapping[str, float] | np.ndarray, dt: float | None = None):
        """Advance one step with ``u`` held over it, through every event inside it.

        Returns the outputs at the end of the step (before any edge due exactly there,
        which belongs to the next step). The step's events are in :attr:`last_events`.
        """
        if dt is not None:
            self._dt = self._checked_dt(dt)
        if hasattr(u, "keys"):
            self._set_inputs(u)
        else:
            self._u[:] = np.asarray(u, dtype=float).reshape(self._m)
        e = self.engine
        before = len(e.events)
        t, end = self.time, self.time + self._dt
        snap = _SNAP * self._dt
        while True:
            self._latch(t, snap)
            e.apply(self._part_inputs(), record=self._started)
            self._started = True
            nxt = self._next_edge(t, snap, end)
            e.advance_to(nxt)
            t = nxt
            if end - t <= snap:  # an edge due exactly at the end belongs to the next step
                break
        e.time = self.time = end
        self.last_events = e.events[before:]
        return self.outputs

    def _set_inputs(self, u: Mapping[str, float]) -> None:
        for name, value in u.items():
            if name not in self._index:
                raise SimulationError(
                    "unknown_signal",
                    f"{self.name}: no input named {name!r} "
                    f"(inputs: {', '.join(self.input_names) or 'none'})",
                    location=("inputs", name),
                )
            self._u[self._index[name]] = value

    def _latch(self, t: float, snap: float) -> None:
        for name, m in self._modulators.items():
            schedule = self._schedules[name]
            k = self._carriers[name]
            start = m.carrier_start(k)
            if not self._started and start > snap:  # first step inside the period before 0
                schedule.latch(t, self._u[self._duty[name]], start=start - m.period)
            elif abs(start - t) <= snap:
                schedule.latch(t, self._u[self._duty[name]])
                self._carriers[name] = k + 1
            schedule.advance_to(t, snap)

    def _next_edge(self, t: float, snap: float, end: float) -> float:
        candidates = [end]
        for name, m in self._modulators.items():
            candidates.append(m.carrier_start(self._carriers[name]))
            candidates.append(self._schedules[name].next_edge())
        nxt = min(c for c in candidates if c > t + snap)
        return end if abs(nxt - end) <= snap else nxt

    def _part_inputs(self) -> np.ndarray:
        u = np.empty(len(self._sources))
        for j, src in enumerate(self._sources):
            u[j] = self._u[src[1]] if src[0] == "ext" else self._schedules[src[1]].values[src[2]]
        return u

    def _checked_dt(self, dt: float) -> float:
        dt = float(dt)
        if not (math.isfinite(dt) and dt > 0):
            raise SimulationError("invalid_step", f"the step must be positive, got {dt!r} s")
        return dt

    # -- state access --------------------------------------------------------------------
    @property
    def dt(self) -> float:
        return self._dt

    @property
    def state(self) -> np.ndarray:
        """A copy of the state vector (order of :attr:`state_names`)."""
        return self.engine.x.copy()

    @state.setter
    def state(self, x: Sequence[float]) -> None:
        self.engine.x = self._checked_state(x)

    @property
    def physical_state(self) -> np.ndarray:
        """Capacitor voltages and inductor currents (the state plus its offset)."""
        e = self.engine
        return e.x + e.data().mode.state_offset @ self._part_inputs()

    @physical_state.setter
    def physical_state(self, values: Sequence[float]) -> None:
        e = self.engine
        e.x = self._checked_state(values) - e.data().mode.state_offset @ self._part_inputs()

    @property
    def inputs(self) -> np.ndarray:
        """The inputs last applied (held)."""
        return self._u.copy()

    @property
    def outputs(self) -> np.ndarray:
        """Outputs now, in the present mode with the inputs held."""
        e = self.engine
        mode = e.data().mode
        u = self._part_inputs()
        y = mode.C @ e.x + mode.D @ u + mode.g
        return np.array([
            y[row[1]] if row[0] == "continuous" else self._schedules[row[1]].values[row[2]]
            for row in self._output_rows
        ])  # fmt: skip

    @property
    def mode(self) -> dict[str, bool]:
        """Conduction of every switch and diode now (part name -> on)."""
        return {d.name: bool(on) for d, on in zip(self.part.devices, self.engine.on, strict=True)}

    @property
    def events(self) -> list[SwitchEvent]:
        """Every event since the start (or the last :meth:`restore`), in time order."""
        return list(self.engine.events)

    def save(self) -> tuple:
        """A snapshot: state, mode, time, held inputs, events, the modulators' schedules."""
        return (
            self.engine.save(), self._u.copy(), self.time, copy.deepcopy(self._schedules),
            dict(self._carriers), self._started, list(self.last_events),
        )  # fmt: skip

    def restore(self, saved: tuple) -> None:
        """Go back to a snapshot of :meth:`save` (rollback for iterative masters)."""
        if not (isinstance(saved, tuple) and len(saved) == 7):
            raise SimulationError(
                "state_size_mismatch", f"{self.name}: the snapshot belongs to another stepper"
            )
        engine, u, t, schedules, carriers, started, last = saved
        if np.shape(engine[0]) != (self._n,) or np.shape(u) != (self._m,):
            raise SimulationError(
                "state_size_mismatch", f"{self.name}: the snapshot belongs to another block"
            )
        self.engine.restore(engine)
        self._u[:] = u
        self.time = float(t)
        self._schedules = copy.deepcopy(schedules)
        self._carriers = dict(carriers)
        self._started = started
        self.last_events = list(last)

    @property
    def feedthrough(self) -> dict[str, list[str]]:
        """For every output, the inputs that reach it directly in the present mode."""
        mode = self.engine.data().mode
        out = {}
        for name, row in zip(self.output_names, self._output_rows, strict=True):
            reach = set()
            if row[0] == "continuous":
                for j, src in enumerate(self._sources):
                    if src[0] == "ext" and mode.D[row[1], j] != 0.0:
                        reach.add(self.input_names[src[1]])
            out[name] = [n for n in self.input_names if n in reach]
        return out


def _with_modulator(block: Any, modulator: Any, gates: Mapping[str, str]) -> ComposedSystem:
    """``block`` with ``modulator`` driving the gate inputs named in ``gates``; every other
    input of the block, and the duty, become external inputs of the same name."""
    if not gates:
        raise SimulationError(
            "invalid_gate",
            "a modulator needs gates={gate input: modulator output}, e.g. {'Q1': 'gate'}",
            location=("gates",),
        )
    if isinstance(block, SwitchedCircuit):
        block = compile_circuit(block.spec)
    name = getattr(block, "name", "block")
    inputs = list(block.inputs)
    for gate, output in gates.items():
        if gate not in inputs or output not in modulator.outputs:
            raise SimulationError(
                "invalid_gate",
                f"gates maps {gate!r} to {output!r}: the block's inputs are "
                f"{', '.join(inputs)}, the modulator's outputs {', '.join(modulator.outputs)}",
                location=("gates", gate),
            )
    wiring = {f"{name}.{gate}": f"{modulator.name}.{output}" for gate, output in gates.items()}
    external = {i: f"{name}.{i}" for i in inputs if i not in gates}
    external["duty"] = f"{modulator.name}.duty"
    outputs = {o: f"{name}.{o}" for o in block.outputs}
    return compose([block, modulator], wiring, external, outputs, name=name)
