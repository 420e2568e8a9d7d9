"""Switched circuits: the modes of a circuit with switches and diodes, compiled lazily.

A *mode* is the on/off state of every switch and diode. Switches and diodes are resistive
piecewise-linear models (a resistor of ``on_resistance`` or ``off_resistance``), so they
sit in the normal tree as resistors and every mode keeps the same named states; a state
never jumps at a mode change (no impulsive charge redistribution). A conducting diode adds
a source term: its current is ``(v - V0) / on_resistance`` with
``V0 = forward_voltage * (1 - on_resistance / off_resistance)``, the line that meets the
off line ``v / off_resistance`` at ``v = forward_voltage``, so the diode's curve is
continuous and monotone and the mode at a given state is unique.

The source term enters each mode as an extra input held at 1 (the last input column of
the mode's stamped equations), so a mode is exactly affine:

    dx/dt = A x + B u + f,        y = C x + D u + g.

Each mode is stamped by :func:`wirestate.equations.assemble` with that mode's
resistances and eliminated by :func:`wirestate.reduce.block_from_equations` (numbers) or
:func:`wirestate.reduce.symbolic_from_values` (CasADi, replaying the numeric pivots): the
one compile path, once per mode actually visited, cached. This is the piecewise-linear
view of switched networks of state-space averaging (Middlebrook and Cuk, "A general
unified approach to modelling switching-converter power stages", IEEE PESC 1976), without
the averaging.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np

from wirestate.equations import FORWARD, assemble, nominal_values
from wirestate.lti import CircuitBlock
from wirestate.reduce import block_from_equations, check_valued_parts, symbolic_from_values
from wirestate.spec.circuit import SWITCHING_KINDS, CircuitSpec
from wirestate.topology import CONSTANT_BRANCH, analyse

#: name of the unit constant input inside a mode's stamped equations
CONSTANT_INPUT = "_unit"
#: a switch is on while its gate input is above this level
GATE_THRESHOLD = 0.5


@dataclass(frozen=True)
class Device:
    """A switch or diode of a switched circuit (SI units)."""

    name: str
    kind: str
    on_resistance: float
    off_resistance: float
    gate: str | None = None
    forward_voltage: float = 0.0

    @property
    def source_term(self) -> float:
        """``V0`` of the conducting line ``i = (v - V0) / on_resistance`` (V)."""
        return self.forward_voltage * (1.0 - self.on_resistance / self.off_resistance)


@dataclass
class ModeModel:
    """One mode: ``dx/dt = A x + B u + f``, ``y = C x + D u + g`` and the device rows.

    ``P x + Q u + p`` gives, for every device in :attr:`SwitchedCircuit.devices` order,
    first its current (nodes[0] -> nodes[1]) then its voltage. ``state_offset`` as in
    :class:`~wirestate.lti.CircuitBlock` (physical state = ``x + state_offset @ u``).
    """

    on: tuple[bool, ...]
    A: np.ndarray
    B: np.ndarray
    f: np.ndarray
    C: np.ndarray
    D: np.ndarray
    g: np.ndarray
    P: np.ndarray
    Q: np.ndarray
    p: np.ndarray
    state_offset: np.ndarray

    @property
    def B_affine(self) -> np.ndarray:
        """``[B, f]``: the input matrix with the constant as its last column."""
        return np.hstack([self.B, self.f[:, None]])


class SwitchedCircuit:
    """A circuit with switches and diodes: its modes compiled on demand and cached.

    Parameters
    ----------
    spec
        A validated circuit with at least one ``switch`` or ``diode`` part.
    extra_probes
        ``("current" | "voltage", part)`` rows added after the device rows of ``P, Q, p``
        (and of :meth:`symbolic_mode`'s outputs), e.g. a snubber resistor's current.

    Attributes
    ----------
    devices
        Switches and diodes in file order.
    states, inputs, outputs, units, x0, input_defaults, name
        As for :class:`~wirestate.lti.CircuitBlock`; the inputs include the gates.
    """

    def __init__(self, spec: CircuitSpec, extra_probes: tuple[tuple[str, str], ...] = ()) -> None:
        self.spec = spec
        self.name = spec.name
        topology = analyse(spec)
        inputs = [*topology.inputs, (CONSTANT_INPUT, CONSTANT_BRANCH)]
        self.topology = dataclasses.replace(topology, inputs=inputs)
        self.devices = [
            Device(
                name,
                part.kind,
                part.on_resistance,
                part.off_resistance,
                gate=topology.gates.get(name),
                forward_voltage=getattr(part, "forward_voltage", 0.0),
            )
            for name, part in spec.parts.items()
            if part.kind in SWITCHING_KINDS
        ]
        self.probes = tuple(
            [("current", d.name) for d in self.devices]
            + [("voltage", d.name) for d in self.devices]
            # further part currents and voltages (the tuning's energies), after the devices'
            + list(extra_probes)
        )
        self._modes: dict[tuple[bool, ...], ModeModel] = {}
        first = self._compile(tuple(False for _ in self.devices))
        self.states = list(first.states)
        self.inputs = [name for name, _ in topology.inputs]
        self.outputs = list(first.outputs[: len(first.outputs) - len(self.probes)])
        self.extra_probes = tuple(extra_probes)
        self.units = {k: v for k, v in first.units.items() if k != CONSTANT_INPUT}
        self.x0 = first.x0.copy()
        self.input_defaults = dict(first.input_defaults)
        self.notes = list(first.notes)
        self.gate_index = {
            d.name: self.inputs.index(d.gate) for d in self.devices if d.kind == "switch"
        }

    @property
    def n_states(self) -> int:
        return len(self.states)

    def values(self, on: tuple[bool, ...]) -> dict[str, Any]:
        """Part values of a mode: nominal values, device resistances and source terms."""
        values: dict[str, Any] = nominal_values(self.topology)
        for device, conducting in zip(self.devices, on, strict=True):
            values[device.name] = device.on_resistance if conducting else device.off_resistance
            if conducting and device.source_term != 0.0:
                values[device.name + FORWARD] = device.source_term
        return values

    def _compile(self, on: tuple[bool, ...]) -> CircuitBlock:
        eq = assemble(self.topology, self.values(on), probes=self.probes)
        return block_from_equations(eq)

    def mode(self, on: tuple[bool, ...]) -> ModeModel:
        """The compiled mode with devices ``on`` (in :attr:`devices` order), cached."""
        on = tuple(bool(v) for v in on)
        found = self._modes.get(on)
        if found is None:
            block = self._compile(on)
            n_y, n_u = len(self.outputs), len(self.inputs)
            found = ModeModel(
                on=on,
                A=block.A,
                B=block.B[:, :n_u].copy(),
                f=block.B[:, n_u].copy(),
                C=block.C[:n_y].copy(),
                D=block.D[:n_y, :n_u].copy(),
                g=block.D[:n_y, n_u].copy(),
                P=block.C[n_y:].copy(),
                Q=block.D[n_y:, :n_u].copy(),
                p=block.D[n_y:, n_u].copy(),
                state_offset=block.state_offset[:, :n_u].copy(),
            )
            self._modes[on] = found
        return found

    @property
    def visited_modes(self) -> list[tuple[bool, ...]]:
        """Modes compiled so far (each exactly once)."""
        return list(self._modes)

    def symbolic_mode(
        self,
        on: tuple[bool, ...],
        variables: Mapping[str, Any],
        *,
        linear_solver: str = "symbolicqr",
        bounds: Mapping[str, tuple[float, float]] | None = None,
    ) -> Any:
        """The mode's state space with some part values as CasADi expressions.

        Same stamps and elimination as :meth:`mode`: its pivots replayed on CasADi values
        (see :func:`wirestate.reduce.symbolic_from_values`). The returned
        :class:`~wirestate.reduce.SymbolicStateSpace` has the block inputs followed by the
        unit constant, so its last column of ``B`` is ``f`` and of ``D`` is ``g``; the
        outputs are the file's outputs followed by every device current then voltage.
        ``linear_solver`` and ``bounds`` as for
        :func:`wirestate.reduce.symbolic_state_space`.
        """
        on = tuple(bool(v) for v in on)
        check_valued_parts(self.spec, variables)
        return symbolic_from_values(
            self.topology,
            self.values(on),
            variables,
            self._compile(on),
            probes=self.probes,
            linear_solver=linear_solver,
            bounds=bounds,
        )

    def describe(self, on: tuple[bool, ...]) -> str:
        """``"Q1 on, D1 off"``."""
        return ", ".join(
            f"{d.name} {'on' if v else 'off'}" for d, v in zip(self.devices, on, strict=True)
        )

    def device_index(self, name: str) -> int:
        return [d.name for d in self.devices].index(name)

    def as_block(self) -> CircuitBlock:
        """The mode with every device off as a plain block (inspection, signatures)."""
        return block_from_equations(assemble(analyse(self.spec), self.values(self.off)))

    @property
    def off(self) -> tuple[bool, ...]:
        return tuple(False for _ in self.devices)


def is_switched(spec: Any) -> bool:
    """True when a circuit model has switches or diodes."""
    parts = getattr(spec, "parts", None) or {}
    return any(part.kind in SWITCHING_KINDS for part in parts.values())


def switched_circuit(model: Any) -> SwitchedCircuit | None:
    """The :class:`SwitchedCircuit` behind a model (itself, or a compiled block of a
    switched circuit file); ``None`` when the model has no switches or diodes."""
    if isinstance(model, SwitchedCircuit):
        return model
    spec = getattr(model, "spec", None)
    if isinstance(model, CircuitBlock) and spec is not None and is_switched(spec):
        cached = getattr(model, "_switched", None)
        if cached is None:
            cached = SwitchedCircuit(spec)
            model._switched = cached  # type: ignore[attr-defined]
        return cached
    return None
