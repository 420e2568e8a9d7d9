"""Stamping: each part contributes linear equations in one table (part kind -> stamp).

The unknowns ``w`` of the linear system are

* ``e``: potentials of the non-ground nodes (modified nodal analysis, Ho, Ruehli and
  Brennan, "The modified nodal approach to network analysis", IEEE Trans. Circuits and
  Systems 22(6), 1975),
* ``j``: currents of voltage-type branches and of excess (tree) inductors,
* ``d``: the state derivatives ``dx/dt``,

and the knowns are the states ``x`` (from the normal tree, see :mod:`wirestate.topology`),
the inputs ``u`` and, where a capacitor loop or inductor cutset contains a source, the
input derivatives ``du``. The equations are KCL at every non-ground node plus one branch
equation per voltage-type branch, state capacitor and inductor, so ``M w + N [x; u; du] = 0``
is square. :mod:`wirestate.reduce` solves it for ``d`` and the outputs.

Coefficients are computed by ordinary arithmetic on part values, so the same stamps build
float matrices for simulation and CasADi expressions for optimisation: pass CasADi symbols
as values and a :class:`Backend` whose ``sqrt`` accepts them.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from typing import Any

from wirestate.spec.circuit import SWITCHING_KINDS, part_parameter
from wirestate.topology import CONSTANT_BRANCH, SECONDARY, Branch, Topology

#: key of a switched part's mode-dependent source term in the values mapping
FORWARD = ".forward_voltage"

Key = tuple[str, int]  # ("w"|"x"|"u"|"du", index)
LinearForm = dict[Key, Any]


@dataclass(frozen=True)
class Backend:
    """The few scalar functions the stamps need beyond + - * /."""

    sqrt: Callable[[Any], Any] = math.sqrt


NUMERIC = Backend()


@dataclass
class Equations:
    """``rows`` and ``outputs`` as linear forms over ``w``, ``x``, ``u`` and ``du``."""

    topology: Topology
    n_w: int
    rows: list[LinearForm]
    outputs: list[LinearForm]
    output_names: list[str]
    output_units: list[str]
    row_labels: list[str] = field(default_factory=list)
    d_offset: int = 0


class _Stamper:
    def __init__(self, topology: Topology, values: Mapping[str, Any], backend: Backend) -> None:
        self.t = topology
        self.values = values
        self.backend = backend
        spec = topology.spec
        self.parts = spec.parts
        n_nodes = len(topology.nodes)
        # unknown layout: e (non-ground nodes), j (branch currents), d (state derivatives)
        self.j_index: dict[int, int] = {}
        next_index = n_nodes - 1
        for i, b in enumerate(topology.branches):
            if b.category == "voltage" or i in topology.excess_inductors:
                self.j_index[i] = next_index
                next_index += 1
        self.d_offset = next_index
        self.state_of = {branch: k for k, branch in enumerate(topology.states)}
        self.n_w = next_index + len(topology.states)
        self.input_of = {branch: k for k, (_, branch) in enumerate(topology.inputs)}
        self.mutual: dict[int, list[tuple[int, Any]]] = {}
        for name, a, b in topology.couplings:
            ia, ib = topology.branch_index[a], topology.branch_index[b]
            m = values[name] * backend.sqrt(values[a] * values[b])
            self.mutual.setdefault(ia, []).append((ib, m))
            self.mutual.setdefault(ib, []).append((ia, m))
        self._current_cache: dict[int, LinearForm] = {}
        self._visiting: set[int] = set()

    # -- building blocks ------------------------------------------------------------------
    def e(self, node: int) -> LinearForm:
        return {} if node == 0 else {("w", node - 1): 1.0}

    def voltage(self, b: Branch) -> LinearForm:
        return add(self.e(b.p), scale(self.e(b.n), -1.0))

    def node_voltage(self, plus: str | None, minus: str | None) -> LinearForm:
        return add(self.e(self.t.node(plus)), scale(self.e(self.t.node(minus)), -1.0))

    def current(self, branch: int) -> LinearForm:
        """Current through a branch, nodes[0] -> nodes[1], as a linear form."""
        if branch in self._current_cache:
            return self._current_cache[branch]
        if branch in self._visiting:
            names = ", ".join(self.t.branches[i].name for i in self._visiting)
            from wirestate.errors import TopologyError

            raise TopologyError(
                "unsupported_topology",
                f"current-controlled sources control each other in a loop ({names})",
                location=("parts", self.t.branches[branch].name, "control"),
            )
        self._visiting.add(branch)
        b = self.t.branches[branch]
        form = CURRENT_STAMPS[b.kind](self, branch, b)
        self._visiting.discard(branch)
        self._current_cache[branch] = form
        return form

    def voltage_rate(self, branch: int) -> LinearForm:
        """d/dt of a tree branch voltage that lies in a capacitor loop."""
        b = self.t.branches[branch]
        if b.kind == "capacitor":
            return {("w", self.d_offset + self.state_of[branch]): 1.0}
        if b.kind == "voltage_source":
            return {("du", self.input_of[branch]): 1.0}
        if b.kind == "electromechanical":
            return {("du", self.input_of[branch]): self.values[b.name]}
        raise AssertionError(f"internal: {b.kind} in a capacitor loop")  # topology rejects it

    def current_rate(self, branch: int) -> LinearForm:
        """d/dt of an inductor current (state, or excess through its cutset)."""
        b = self.t.branches[branch]
        if branch in self.state_of:
            return {("w", self.d_offset + self.state_of[branch]): 1.0}
        if branch in self.t.excess_inductors:
            form: LinearForm = {}
            for link, sign in self.t.excess_inductors[branch]:
                form = add(form, scale(self.current_rate(link), float(sign)))
            return form
        if b.kind == "current_source":
            return {("du", self.input_of[branch]): 1.0}
        raise AssertionError(f"internal: {b.kind} in an inductor cutset")  # topology rejects it

    # -- assembly ---------------------------------------------------------------------------
    def assemble(self, probes: tuple[tuple[str, str], ...] = ()) -> Equations:
        t = self.t
        n_nodes = len(t.nodes)
        rows: list[LinearForm] = [{} for _ in range(n_nodes - 1)]
        labels = [f"KCL at {name}" for name in t.nodes[1:]]
        for i, b in enumerate(t.branches):
            current = self.current(i)
            if b.p:
                rows[b.p - 1] = add(rows[b.p - 1], current)
            if b.n:
                rows[b.n - 1] = add(rows[b.n - 1], scale(current, -1.0))
        for i, b in enumerate(t.branches):
            stamp = BRANCH_STAMPS.get(b.kind)
            if stamp is None:
                continue
            row = stamp(self, i, b)
            if row is not None:
                rows.append(row)
                labels.append(f"{b.kind} {b.name}")
        outputs, names, units = self.output_forms()
        for what, part in probes:
            branch = self.t.branch_index[part]
            if what == "current":
                outputs.append(self.current(branch))
            else:
                outputs.append(self.voltage(self.t.branches[branch]))
            names.append(f"{what}:{part}")
            units.append("A" if what == "current" else "V")
        return Equations(
            topology=t,
            n_w=self.n_w,
            rows=rows,
            outputs=outputs,
            output_names=names,
            output_units=units,
            row_labels=labels,
            d_offset=self.d_offset,
        )

    def output_forms(self) -> tuple[list[LinearForm], list[str], list[str]]:
        forms, names, units = [], [], []
        for name, output in self.t.spec.outputs.items():
            if output.voltage is not None:
                forms.append(self.node_voltage(*output.voltage))
                units.append("V")
            else:
                forms.append(self.current(self.t.branch_index[output.current]))
                units.append("A")
            names.append(name)
        for i, b in enumerate(self.t.branches):
            if b.kind == "electromechanical":
                part = self.parts[b.name]
                rotary = part.motion == "rotary"
                default = f"{'torque' if rotary else 'force'}_{b.name}"
                forms.append(scale(self.current(i), self.values[b.name]))
                names.append(part.torque_output or default)
                units.append("N*m" if rotary else "N")
        return forms, names, units


# -- the stamp table ------------------------------------------------------------------------
# Current through each kind of branch (nodes[0] -> nodes[1]) as a linear form.


def _resistor_current(s: _Stamper, i: int, b: Branch) -> LinearForm:
    return scale(s.voltage(b), 1.0 / s.values[b.name])


def _capacitor_current(s: _Stamper, i: int, b: Branch) -> LinearForm:
    c = s.values[b.name]
    if i in s.state_of:
        return {("w", s.d_offset + s.state_of[i]): c}
    form: LinearForm = {}
    for tree_branch, sign in s.t.excess_capacitors[i]:
        form = add(form, scale(s.voltage_rate(tree_branch), float(sign)))
    return scale(form, c)


def _inductor_current(s: _Stamper, i: int, b: Branch) -> LinearForm:
    if i in s.state_of:
        return {("x", s.state_of[i]): 1.0}
    return {("w", s.j_index[i]): 1.0}


def _unknown_current(s: _Stamper, i: int, b: Branch) -> LinearForm:
    return {("w", s.j_index[i]): 1.0}


def _current_source_current(s: _Stamper, i: int, b: Branch) -> LinearForm:
    return {("u", s.input_of[i]): 1.0}


def _vccs_current(s: _Stamper, i: int, b: Branch) -> LinearForm:
    return scale(s.node_voltage(*s.parts[b.name].control), s.values[b.name])


def _cccs_current(s: _Stamper, i: int, b: Branch) -> LinearForm:
    control = s.t.branch_index[s.parts[b.name].control]
    return scale(s.current(control), s.values[b.name])


def _diode_current(s: _Stamper, i: int, b: Branch) -> LinearForm:
    # on: i = (v - V0) / R with the source term V0 as a constant input of the mode; off or
    # without forward voltage the diode is a plain resistor
    form = _resistor_current(s, i, b)
    offset = s.values.get(b.name + FORWARD, 0.0)
    if isinstance(offset, float) and offset == 0.0:
        return form
    return add(form, {("u", s.input_of[CONSTANT_BRANCH]): -offset / s.values[b.name]})


def _secondary_current(s: _Stamper, i: int, b: Branch) -> LinearForm:
    # ideal transformer: i2 = -ratio * i1
    primary = b.name.removesuffix(SECONDARY)
    return scale(s.current(s.t.branch_index[primary]), -s.values[primary])


CURRENT_STAMPS: dict[str, Callable[[_Stamper, int, Branch], LinearForm]] = {
    "resistor": _resistor_current,
    "capacitor": _capacitor_current,
    "inductor": _inductor_current,
    "voltage_source": _unknown_current,
    "vcvs": _unknown_current,
    "ccvs": _unknown_current,
    "electromechanical": _unknown_current,
    "current_source": _current_source_current,
    "vccs": _vccs_current,
    "cccs": _cccs_current,
    "switch": _resistor_current,
    "diode": _diode_current,
    "transformer_primary": _unknown_current,
    "transformer_secondary": _secondary_current,
}

# Branch equations (one row each) for the kinds whose current is not enough.


def _voltage_source_row(s: _Stamper, i: int, b: Branch) -> LinearForm:
    return add(s.voltage(b), {("u", s.input_of[i]): -1.0})


def _vcvs_row(s: _Stamper, i: int, b: Branch) -> LinearForm:
    control = s.node_voltage(*s.parts[b.name].control)
    return add(s.voltage(b), scale(control, -s.values[b.name]))


def _ccvs_row(s: _Stamper, i: int, b: Branch) -> LinearForm:
    control = s.current(s.t.branch_index[s.parts[b.name].control])
    return add(s.voltage(b), scale(control, -s.values[b.name]))


def _electromechanical_row(s: _Stamper, i: int, b: Branch) -> LinearForm:
    # back-EMF e = k * speed, with the speed an input of the block
    return add(s.voltage(b), {("u", s.input_of[i]): -s.values[b.name]})


def _capacitor_row(s: _Stamper, i: int, b: Branch) -> LinearForm | None:
    if i not in s.state_of:
        return None  # excess: its voltage already follows from the loop (KVL via potentials)
    return add(s.voltage(b), {("x", s.state_of[i]): -1.0})


def _inductor_row(s: _Stamper, i: int, b: Branch) -> LinearForm:
    # v = L di/dt + sum M di_other/dt (dots at nodes[0] of each inductor)
    flux_rate = scale(s.current_rate(i), s.values[b.name])
    for other, m in s.mutual.get(i, []):
        flux_rate = add(flux_rate, scale(s.current_rate(other), m))
    return add(s.voltage(b), scale(flux_rate, -1.0))


def _transformer_row(s: _Stamper, i: int, b: Branch) -> LinearForm:
    # ideal transformer: v1 = ratio * v2
    secondary = s.t.branches[s.t.branch_index[b.name + SECONDARY]]
    return add(s.voltage(b), scale(s.voltage(secondary), -s.values[b.name]))


BRANCH_STAMPS: dict[str, Callable[[_Stamper, int, Branch], LinearForm | None]] = {
    "transformer_primary": _transformer_row,
    "voltage_source": _voltage_source_row,
    "vcvs": _vcvs_row,
    "ccvs": _ccvs_row,
    "electromechanical": _electromechanical_row,
    "capacitor": _capacitor_row,
    "inductor": _inductor_row,
}


def assemble(
    topology: Topology,
    values: Mapping[str, Any],
    backend: Backend = NUMERIC,
    probes: tuple[tuple[str, str], ...] = (),
) -> Equations:
    """Stamp every part of ``topology`` with the given part values (floats or CasADi).

    ``probes`` adds outputs after the file's: ``("current", part)`` or ``("voltage",
    part)``, named ``current:PART`` / ``voltage:PART`` (the switched-circuit compiler
    watches its switches and diodes through them).
    """
    return _Stamper(topology, values, backend).assemble(tuple(probes))


def nominal_values(topology: Topology) -> dict[str, float]:
    """Primary value of every part that has one (SI base units), from the validated model."""
    values = {}
    for name, part in topology.spec.parts.items():
        field_name = part_parameter(part.kind)
        if field_name is not None:
            values[name] = getattr(part, field_name)
        elif part.kind in SWITCHING_KINDS:
            values[name] = part.off_resistance  # the mode with everything off
    return values


# -- linear-form helpers ------------------------------------------------------------------------


def add(a: LinearForm, b: LinearForm) -> LinearForm:
    out = dict(a)
    for key, value in b.items():
        out[key] = out[key] + value if key in out else value
    return out


def scale(a: LinearForm, factor: Any) -> LinearForm:
    return {key: value * factor for key, value in a.items()}
