"""Systems with switched circuits: modulators, sampled controllers and exact switching.

A system whose circuit blocks have switches or diodes (category ``switched``), or which
has a pulse-width modulator (:class:`~wirestate.blocks.Modulator`), runs here; the hybrid
engine (:mod:`wirestate.simulate.hybrid`) runs the others.

**One piecewise-affine model.** The continuous blocks - switched circuits and linear
blocks - are joined, for each mode (the conduction of every switch and diode of every
switched block), by the same interconnection as the linear part of any system
(:meth:`~wirestate.compose.ComposedSystem.linear_part`), with each switched block in that
mode: its matrices from :mod:`wirestate.switching` (the one stamping and elimination
path), its unit constant input and its device currents and voltages carried through.
Modes are joined once, when first visited, and cached. The model is advanced by the
switched engine (:mod:`wirestate.simulate.switched`): exact within a mode, split at gate
edges and at located diode events.

**One instant.** At a time ``t`` where several things happen, in this order:

1. sampled blocks due at ``t`` sample their inputs (continuous outputs just before any
   gate edge at ``t``) and update their held outputs, as in the hybrid engine (blocks
   with a computation delay publish first, the others run in signal order);
2. modulators whose carrier period starts at ``t`` latch their duty input - after step 1,
   so a controller without a delay acts in the same period, and one with ``delay = true``
   one period later, as in a digital converter controller;
3. gate edges due at ``t`` apply, switches follow their gates and diodes settle.

A controller whose sample time is a whole number of carrier periods, with the carrier's
phase at 0, therefore samples at carrier starts: synchronised sampling (Holmes and Lipo,
Pulse Width Modulation for Power Converters, 2003, sec. 1.2; Erickson and Maksimovic,
Fundamentals of Power Electronics, 2nd ed., ch. 7, sampling at the start of the period).
"""

from __future__ import annotations

import dataclasses
from collections.abc import Callable, Mapping
from pathlib import Path
from types import SimpleNamespace
from typing import Any

import numpy as np

from wirestate.compose import (
    LINEAR,
    MODULATOR,
    NONLINEAR,
    SAMPLED,
    SWITCHED,
    ComposedSystem,
    LinearPart,
    _shaped,
)
from wirestate.errors import SimulationError
from wirestate.lti import named_state_space
from wirestate.simulate.hybrid import _Engine
from wirestate.simulate.inputs import InputSet, Waveform
from wirestate.simulate.results import SimulationResult
from wirestate.simulate.switched import (
    Chunk,
    HeldInputs,
    SampleClock,
    SwitchedEngine,
    mode_sequence,
    run_setup,
)
from wirestate.switching import ModeModel, switched_circuit

#: the unit constant input of every switched block inside the joined model
UNIT = "_unit"


def has_switching(system: Any) -> bool:
    """True for a composed system with a switched circuit block or a modulator."""
    blocks = getattr(system, "blocks", None) or {}
    return any(b.category in (SWITCHED, MODULATOR) for b in blocks.values())


class SystemPart:
    """The continuous blocks of a system with switched circuits, as one piecewise-affine
    model with the interface of :class:`~wirestate.switching.SwitchedCircuit` (devices,
    ``gate_index``, ``mode(on)``, ``x0``), so :class:`SwitchedEngine` runs it.

    Devices are named ``block.part`` (``part`` with ``prefixed=False``, for one switched
    block wrapped with its modulator); inputs are the external inputs that reach a
    continuous block and the outputs of sampled blocks and modulators that drive one;
    outputs are every output of every continuous block (``block.signal``).
    """

    def __init__(self, system: ComposedSystem, *, prefixed: bool = True) -> None:
        self.system = system
        self.name = system.name
        self.circuits = {
            name: switched_circuit(b.source)
            for name, b in system.blocks.items()
            if b.category == SWITCHED
        }
        self.devices = [
            dataclasses.replace(d, name=f"{block}.{d.name}" if prefixed else d.name)
            for block, sc in self.circuits.items()
            for d in sc.devices
        ]
        self._probes = {
            block: [f"_i_{d.name}" for d in sc.devices] + [f"_v_{d.name}" for d in sc.devices]
            for block, sc in self.circuits.items()
        }
        self._modes: dict[tuple[bool, ...], ModeModel] = {}
        first = self._join(self.off)
        self.inputs = [name for name in first.inputs if name != UNIT]
        probe_names = {f"{b}.{p}" for b, names in self._probes.items() for p in names}
        self.outputs = [name for name in first.outputs if name not in probe_names]
        self.states = list(first.states)
        self.x0 = np.concatenate(
            [system.blocks[b].x0 for b in first.blocks] or [np.zeros(0)]
        ).astype(float)
        self.gate_index = {}
        for block, sc in self.circuits.items():
            for d in sc.devices:
                if d.kind == "switch":
                    source = self._gate_source(f"{block}.{d.gate}")
                    name = f"{block}.{d.name}" if prefixed else d.name
                    self.gate_index[name] = self.inputs.index(source)
        self._offset = self._state_offset()

    @property
    def off(self) -> tuple[bool, ...]:
        return tuple(False for _ in self.devices)

    @property
    def visited_modes(self) -> list[tuple[bool, ...]]:
        return list(self._modes)

    def _gate_source(self, dest: str) -> str:
        """The input of the joined model that drives the gate ``dest``."""
        system = self.system
        for ext, dests in system.external_inputs.items():
            if dest in dests:
                return ext
        src = system.wiring[dest]
        if system.blocks[src.split(".")[0]].category in (SAMPLED, MODULATOR):
            return src
        raise SimulationError(
            "invalid_gate",
            f"{dest} is driven by {src}, a continuous signal; a gate must come from a "
            "modulator, a sampled block or an external input (gate edges are then known)",
            file=system.file,
            location=("wiring", dest),
        )

    def _join(self, on: tuple[bool, ...]) -> LinearPart:
        """The continuous blocks joined with every switched block in its mode of ``on``."""
        system = self.system
        views = dict(system.blocks)
        external = {name: list(dests) for name, dests in system.external_inputs.items()}
        external[UNIT] = []
        start = 0
        for block, sc in self.circuits.items():
            mode = sc.mode(on[start : start + len(sc.devices)])
            start += len(sc.devices)
            view = views[block]
            inputs = [*view.inputs, UNIT]
            outputs = [*view.outputs, *self._probes[block]]
            ss = named_state_space(
                mode.A,
                np.hstack([mode.B, mode.f[:, None]]),
                np.vstack([mode.C, mode.P]),
                np.block([[mode.D, mode.g[:, None]], [mode.Q, mode.p[:, None]]]),
                block,
                inputs,
                outputs,
                list(view.states),
            )
            views[block] = dataclasses.replace(
                view, category=LINEAR, inputs=inputs, outputs=outputs, system=ss
            )
            external[UNIT].append(f"{block}.{UNIT}")
        if not external[UNIT]:
            del external[UNIT]
        joined = dataclasses.replace(system, blocks=views, external_inputs=external)
        return joined.linear_part()

    def mode(self, on: tuple[bool, ...]) -> ModeModel:
        """The joined model with devices ``on`` (in :attr:`devices` order), cached."""
        on = tuple(bool(v) for v in on)
        found = self._modes.get(on)
        if found is None:
            part = self._join(on)
            n, m, p = len(part.states), len(part.inputs), len(part.outputs)
            A = _shaped(part.system.A, n, n)
            B = _shaped(part.system.B, n, m)
            C = _shaped(part.system.C, p, n)
            D = _shaped(part.system.D, p, m)
            keep = [part.inputs.index(name) for name in self.inputs]
            unit = part.inputs.index(UNIT) if UNIT in part.inputs else None
            rows = [part.outputs.index(name) for name in self.outputs]
            probes = [
                part.outputs.index(f"{block}.{name}")
                for kind in ("_i_", "_v_")
                for block in self.circuits
                for name in self._probes[block]
                if name.startswith(kind)
            ]

            def column(M: np.ndarray) -> np.ndarray:
                return M[:, unit] if unit is not None else np.zeros(M.shape[0])

            found = ModeModel(
                on=on,
                A=A,
                B=B[:, keep],
                f=column(B),
                C=C[rows],
                D=D[rows][:, keep],
                g=column(D[rows]),
                P=C[probes],
                Q=D[probes][:, keep],
                p=column(D[probes]),
                state_offset=self._offset,
            )
            self._modes[on] = found
        return found

    def _state_offset(self) -> np.ndarray:
        """Physical state = state + offset @ inputs, for switched blocks whose capacitors
        sit in a loop with a voltage source (the offset is the same in every mode)."""
        system = self.system
        offset = np.zeros((len(self.states), len(self.inputs)))
        for block, sc in self.circuits.items():
            block_offset = sc.mode(sc.off).state_offset
            for j in np.flatnonzero(np.any(block_offset != 0.0, axis=0)):
                dest = f"{block}.{sc.inputs[j]}"
                source = next(
                    (ext for ext, dests in system.external_inputs.items() if dest in dests),
                    system.wiring.get(dest),
                )
                if source not in self.inputs:
                    raise SimulationError(
                        "unsupported_switched_system",
                        f"{dest} drives a capacitor loop of switched block {block!r} and "
                        f"comes from the continuous signal {source}; drive it from an "
                        "external input or a sampled block",
                        file=system.file,
                        location=("wiring", dest),
                    )
                for i, state in enumerate(sc.states):
                    row = self.states.index(f"{block}.{state}")
                    offset[row, self.inputs.index(source)] += block_offset[i, j]
        return offset

    def output_index(self, name: str) -> int:
        return self.outputs.index(name)


def simulate_switched_system(
    system: ComposedSystem,
    until: float,
    step: float,
    inputs: Mapping[str, str | float | Waveform] | InputSet | None = None,
    *,
    use_defaults: bool = True,
    base: Path | None = None,
    fine_step: float | None = None,
    fine_window: float | None = None,
    max_changes: int | None = None,
    progress: Callable[[float], None] | None = None,
) -> SimulationResult:
    """Simulate a system with switched circuits, modulators and sampled controllers.

    Parameters
    ----------
    system
        The composed system (see :func:`has_switching`).
    until, step
        Horizon and output step (s).
    inputs
        Waveforms for the external inputs; inputs that drive a gate may take ``pwm:...``.
    fine_step, fine_window
        After every switching event, also record every ``fine_step`` for ``fine_window``.
    max_changes
        Mode changes allowed at one instant before ``switching_chatter``.

    Returns
    -------
    SimulationResult
        External outputs, every state (``block.state``; switched and linear blocks as
        compiled, sampled blocks ``x[k]`` over ``[t_k, t_k+1)``), the external inputs,
        ``events`` (parts named ``block.part``) and ``modes``.
    """
    bad = [b.name for b in system.blocks.values() if b.category == NONLINEAR]
    if bad:
        raise SimulationError(
            "unsupported_switched_system",
            f"{system.name}: blocks {', '.join(bad)} are continuous and nonlinear; with "
            "switched circuits only linear continuous blocks, sampled blocks and "
            "modulators can run (give a limited controller a sample_time)",
            file=system.file,
            location=("blocks", bad[0]),
        )
    grid, input_set, fine = run_setup(
        system, until, step, inputs, use_defaults, base, fine_step, fine_window
    )
    return _SystemRun(system, grid, step, input_set, fine, max_changes).execute(progress)


class _SystemRun:
    def __init__(self, cs, grid, step, input_set, fine, max_changes) -> None:
        self.cs = cs
        self.part = SystemPart(cs)
        self.engine = SwitchedEngine(self.part, max_changes=max_changes)
        self.clock = SampleClock(grid, step, self.engine, fine)
        self.until = self.clock.until
        gates = [
            ext
            for ext, dests in cs.external_inputs.items()
            if any(self._drives_gate(d) for d in dests)
        ]
        self.external = HeldInputs(cs.inputs, input_set, gates, self.clock)
        self.gate_rows = {row for row, _ in self.external.gate_rows}
        self.sampled = [b for b in cs.blocks.values() if b.category == SAMPLED]
        self.modulators = {b.name: b.source for b in cs.blocks.values() if b.category == MODULATOR}
        self.schedules = {name: m.schedule() for name, m in self.modulators.items()}
        # the hybrid engine's own order of sampled blocks (as export/plan.py uses it)
        self.order = _Engine._sample_order(SimpleNamespace(cs=cs, sampled=self.sampled))
        self.direct = {b.name: bool(b.feedthrough()) for b in self.sampled}
        self.sources = {
            name: [self._source(f"{name}.{i}") for i in cs.blocks[name].inputs]
            for name in [*(b.name for b in self.sampled), *self.modulators]
        }
        self.part_sources = [self._source_of_part_input(n) for n in self.part.inputs]
        self.held = {b.name: np.zeros(len(b.outputs)) for b in self.sampled}
        self.xs = {b.name: np.array(b.x0, dtype=float) for b in self.sampled}
        self.before = {name: x.copy() for name, x in self.xs.items()}
        self.sample_count = {b.name: 0 for b in self.sampled}
        self.carrier_count = {name: 0 for name in self.modulators}
        self.kept: list[tuple[Chunk, dict]] = []

    # -- wiring ----------------------------------------------------------------------------
    def _drives_gate(self, dest: str) -> bool:
        block, signal = dest.split(".")
        sc = self.part.circuits.get(block)
        return sc is not None and any(d.gate == signal for d in sc.devices)

    def _source(self, dest: str) -> tuple:
        cs = self.cs
        for ext, dests in cs.external_inputs.items():
            if dest in dests:
                return ("ext", cs.inputs.index(ext))
        src = cs.wiring[dest]
        block, signal = src.split(".")
        b = cs.blocks[block]
        if b.category in (SAMPLED, MODULATOR):
            return (b.category, block, b.outputs.index(signal))
        return ("continuous", self.part.output_index(src))

    def _source_of_part_input(self, name: str) -> tuple:
        cs = self.cs
        if name in cs.external_inputs:
            return ("ext", cs.inputs.index(name))
        block, signal = name.split(".")
        return (cs.blocks[block].category, block, cs.blocks[block].outputs.index(signal))

    # -- values at an instant --------------------------------------------------------------
    def _value(self, src: tuple, t: float, y: np.ndarray | None) -> float:
        kind = src[0]
        if kind == "ext":
            return float(self.external.U[src[1], self.clock.index(t)])
        if kind == SAMPLED:
            return float(self.held[src[1]][src[2]])
        if kind == MODULATOR:
            return float(self.schedules[src[1]].values[src[2]])
        return float(y[src[1]])

    def _continuous_outputs(self, t: float) -> np.ndarray:
        """Outputs of the continuous blocks now: the mode and gates before any edge at
        ``t``, the held outputs of sampled blocks as updated so far at ``t``."""
        e = self.engine
        u = e.inputs
        for j, src in enumerate(self.part_sources):
            if src[0] == SAMPLED:
                u[j] = self.held[src[1]][src[2]]
            elif src[0] == "ext" and src[1] not in self.gate_rows:
                # the external inputs now: before the run's first apply the engine holds
                # zeros, and a source's feedthrough (a load current through an ESR) would
                # reach the first sample of a controller
                u[j] = self.external.U[src[1], self.clock.index(t)]
        mode = e.data().mode
        return mode.C @ e.x + mode.D @ u + mode.g

    def _inputs_of(self, name: str, t: float) -> np.ndarray:
        sources = self.sources[name]
        y = None
        if any(src[0] == "continuous" for src in sources):
            y = self._continuous_outputs(t)
        return np.array([self._value(src, t, y) for src in sources])

    def _sample(self, t: float) -> None:
        snap = self.clock.snap
        due = [b for b in self.order if abs(self.sample_count[b.name] * b.sample_time - t) <= snap]
        for b in due:
            self.before[b.name] = self.xs[b.name].copy()
            self.sample_count[b.name] += 1
        delayed = [b for b in due if not self.direct[b.name]]
        for b in delayed:  # outputs depend on the state only
            self.held[b.name], _ = b.sample(self.xs[b.name], np.zeros(len(b.inputs)))
        for b in due:
            if self.direct[b.name]:
                u = self._inputs_of(b.name, t)
                self.held[b.name], self.xs[b.name] = b.sample(self.xs[b.name], u)
        for b in delayed:
            _, self.xs[b.name] = b.sample(self.xs[b.name], self._inputs_of(b.name, t))

    def _latch(self, t: float, first: bool) -> None:
        snap = self.clock.snap
        for name, m in self.modulators.items():
            k = self.carrier_count[name]
            start = m.carrier_start(k)
            if first and start > snap:  # the run starts inside the period before period 0
                duty = self._inputs_of(name, t)[0]
                self.schedules[name].latch(t, duty, start=start - m.period)
            elif abs(start - t) <= snap:
                self.schedules[name].latch(t, self._inputs_of(name, t)[0])
                self.carrier_count[name] = k + 1
            self.schedules[name].advance_to(t, snap)

    def _next_time(self, t: float) -> float:
        snap = self.clock.snap
        candidates = [self.until, self.external.next_boundary(t)]
        for b in self.sampled:
            candidates.append(self.sample_count[b.name] * b.sample_time)
        for name, m in self.modulators.items():
            candidates.append(m.carrier_start(self.carrier_count[name]))
            candidates.append(self.schedules[name].next_edge())
        later = min(c for c in candidates if c > t + snap)
        return float(self.clock.merge(np.array([later]))[0])

    def _part_inputs(self, t: float, t_next: float) -> np.ndarray:
        ext = self.external.over(t, t_next)
        u = np.empty(len(self.part_sources))
        for j, src in enumerate(self.part_sources):
            if src[0] == "ext":
                u[j] = ext[src[1]]
            elif src[0] == SAMPLED:
                u[j] = self.held[src[1]][src[2]]
            else:
                u[j] = self.schedules[src[1]].values[src[2]]
        return u

    def _snapshot(self) -> dict:
        return {
            "held": {k: v.copy() for k, v in self.held.items()},
            "states": {k: v.copy() for k, v in self.before.items()},
            "gates": {k: s.values.copy() for k, s in self.schedules.items()},
        }

    # -- the loop --------------------------------------------------------------------------
    def execute(self, progress) -> SimulationResult:
        e = self.engine
        t, first = 0.0, True
        next_report = 0.05
        while True:
            self._sample(t)
            self._latch(t, first)
            at_end = t >= self.until - self.clock.snap
            t_next = t if at_end else self._next_time(t)
            e.apply(self._part_inputs(t, t_next), record=not first)
            if first:
                self.initial_on = tuple(e.on)
                first = False
            if self.clock.is_sample(t):
                self.kept.append((Chunk(np.array([t]), e.x[:, None].copy(), tuple(e.on),
                                        e.inputs), self._snapshot()))  # fmt: skip
            if at_end:
                break
            chunks = e.advance_to(t_next, self.clock.sample)
            if chunks:
                snapshot = self._snapshot()
                self.kept.extend((chunk, snapshot) for chunk in chunks)
            t = t_next
            if progress is not None and t >= next_report * self.until:
                progress(t / self.until)
                next_report = t / self.until + 0.05
        return self._result()

    def _result(self) -> SimulationResult:
        cs, part, e = self.cs, self.part, self.engine
        times, outputs, states, inputs = [], [], [], []
        state_rows = {name: k for k, name in enumerate(part.states)}
        for chunk, snap in self.kept:
            mode = e.data(chunk.on).mode
            k = len(chunk.times)
            y = mode.C @ chunk.states + (mode.D @ chunk.u + mode.g)[:, None]
            rows = []
            for src in cs.external_outputs.values():
                block, signal = src.split(".")
                b = cs.blocks[block]
                if b.category == SAMPLED:
                    rows.append(np.full(k, snap["held"][block][b.outputs.index(signal)]))
                elif b.category == MODULATOR:
                    rows.append(np.full(k, snap["gates"][block][b.outputs.index(signal)]))
                else:
                    rows.append(y[part.output_index(src)])
            outputs.append(np.array(rows).reshape(len(rows), k))
            x_rows = []
            for name in cs.states:
                if name in state_rows:
                    x_rows.append(chunk.states[state_rows[name]])
                else:
                    block, state = name.split(".", 1)
                    index = cs.blocks[block].states.index(state)
                    x_rows.append(np.full(k, snap["states"][block][index]))
            states.append(np.array(x_rows).reshape(len(x_rows), k))
            inputs.append(self.external.U[:, [self.clock.index(t) for t in chunk.times]])
            times.append(chunk.times)
        time = np.concatenate(times)
        return SimulationResult(
            name=cs.name,
            time=time,
            output_names=cs.outputs,
            outputs=np.hstack(outputs),
            state_names=cs.states,
            states=np.hstack(states),
            input_names=cs.inputs,
            inputs=np.hstack(inputs),
            units=dict(cs.units),
            method=(
                "exact piecewise-linear: ZOH within each mode, split at every gate edge and "
                f"located diode event ({len(e.events)} switching events, "
                f"{len(part.visited_modes)} modes joined); sampled blocks held between "
                "samples, modulators latched at each carrier start"
            ),
            events=list(e.events),
            modes=mode_sequence(
                self.initial_on, e.events, [d.name for d in part.devices], self.until
            ),
        )


__all__ = ["SystemPart", "has_switching", "simulate_switched_system"]
