"""The circuit as a graph: ground, connectivity, source loops and cutsets, state selection.

State variables are chosen by a *normal tree* (Bryant, "The explicit form of Bashkow's A
matrix", IRE Trans. Circuit Theory, 1962; Chua and Lin, Computer-Aided Analysis of
Electronic Circuits, 1975, ch. 8): a spanning tree that takes branches in the priority
voltage-type, capacitor, resistor, inductor, current-type. Then

* tree capacitors and link inductors are the states,
* a link capacitor closes a loop of capacitors and voltage-type branches (it is *excess*:
  its voltage follows from the loop),
* a tree inductor lies in a cutset of inductors and current-type branches (excess: its
  current follows from the cutset),

so the order is ``capacitors + inductors - independent C/V loops - independent L/I
cutsets``, the circuit-minimal order. A voltage-type link means a loop of voltage sources;
a current-type tree branch means a cutset of current sources: both are errors.

Everything here depends only on the connections, never on part values, so the same
topology serves numeric compilation and symbolic (CasADi) compilation.
"""

from __future__ import annotations

from dataclasses import dataclass, field

from wirestate.errors import TopologyError
from wirestate.spec.circuit import CircuitSpec

VOLTAGE_KINDS = ("voltage_source", "vcvs", "ccvs", "electromechanical", "transformer_primary")
CURRENT_KINDS = ("current_source", "vccs", "cccs", "transformer_secondary")
#: switches and diodes are resistors whose value depends on the mode: the normal tree, and
#: so the states, are the same in every mode
RESISTIVE_KINDS = ("switch", "diode")
#: branch-name suffix of a transformer's secondary winding (the primary keeps the part name)
SECONDARY = ".secondary"
#: branch index standing for the unit constant input of a switched mode (diode forward drop)
CONSTANT_BRANCH = -1
#: tree priority: lower enters the normal tree first
PRIORITY = {"voltage": 0, "capacitor": 1, "resistor": 2, "inductor": 3, "current": 4}


def category(kind: str) -> str:
    """Branch category used by the normal tree: voltage, capacitor, resistor, inductor, current."""
    if kind in VOLTAGE_KINDS:
        return "voltage"
    if kind in CURRENT_KINDS:
        return "current"
    if kind in RESISTIVE_KINDS:
        return "resistor"
    return kind


@dataclass(frozen=True)
class Branch:
    """One two-terminal part: node indices (0 is ground) in its ``nodes`` order."""

    name: str
    kind: str
    p: int
    n: int

    @property
    def category(self) -> str:
        return category(self.kind)


@dataclass
class Topology:
    """Graph facts the equation stamping needs.

    Attributes
    ----------
    nodes
        Node names; index 0 is ground.
    branches
        Two-terminal parts in file order.
    in_tree
        Per branch: member of the normal tree.
    states
        Branch indices whose capacitor voltage / inductor current is a state, file order.
    excess_capacitors
        Link capacitor -> ``[(tree branch, sign)]`` with ``v_link = sum(sign * v_tree)``.
    excess_inductors
        Tree inductor -> ``[(link branch, sign)]`` with ``i_tree = sum(sign * i_link)``.
    couplings
        ``(coupling part, inductor a, inductor b)`` by name.
    inputs
        ``(input name, branch index)``: independent sources, then electromechanical speeds,
        then switch gates (branch of the first switch on that gate), in file order.
    gates
        Switch part -> name of its gate input.
    """

    spec: CircuitSpec
    nodes: list[str]
    branches: list[Branch]
    in_tree: list[bool]
    states: list[int]
    excess_capacitors: dict[int, list[tuple[int, int]]]
    excess_inductors: dict[int, list[tuple[int, int]]]
    couplings: list[tuple[str, str, str]]
    inputs: list[tuple[str, int]]
    branch_index: dict[str, int] = field(default_factory=dict)
    node_index: dict[str, int] = field(default_factory=dict)
    gates: dict[str, str] = field(default_factory=dict)

    def node(self, name: str | None) -> int:
        return 0 if name is None else self.node_index[name]


def analyse(spec: CircuitSpec) -> Topology:
    """Check the circuit graph and choose the state variables (see module docstring).

    Raises
    ------
    TopologyError
        ``no_ground``, ``floating_node``, ``shorted_part``, ``voltage_source_loop``,
        ``current_source_cutset``, ``unknown_node``, ``unknown_part`` or
        ``unsupported_topology``, naming the parts or nodes concerned.
    """
    ground = spec.ground
    two_terminal = _two_terminal(spec)
    if not two_terminal:
        raise TopologyError(
            "no_ground", "the circuit has no two-terminal parts", location=("parts",)
        )
    used_nodes = {node for part in two_terminal.values() for node in part.nodes}
    if ground not in used_nodes:
        raise TopologyError(
            "no_ground",
            f"no part connects to the ground node {ground!r} (set circuit.ground or connect "
            "a part to it)",
            location=("circuit", "ground"),
        )
    nodes = [ground] + sorted(used_nodes - {ground}, key=_natural_key)
    node_index = {name: i for i, name in enumerate(nodes)}

    branches: list[Branch] = []
    for name, part in two_terminal.items():
        a, b = part.nodes
        if a == b:
            raise TopologyError(
                "shorted_part",
                f"both terminals of {name} are on node {a!r}",
                location=_branch_location(name, spec),
            )
        branches.append(Branch(name, part.kind, node_index[a], node_index[b]))
    branch_index = {b.name: i for i, b in enumerate(branches)}

    _check_references(spec, node_index, branch_index)
    _check_transformers(spec, branches, branch_index, node_index)
    _check_floating(nodes, branches)
    in_tree = _normal_tree(nodes, branches)
    rooted = _RootedTree(len(nodes), branches, in_tree)

    _check_voltage_loops(branches, in_tree, rooted)
    _check_current_cutsets(branches, in_tree, rooted)

    excess_capacitors: dict[int, list[tuple[int, int]]] = {}
    excess_inductors: dict[int, list[tuple[int, int]]] = {}
    states: list[int] = []
    for i, b in enumerate(branches):
        if b.kind == "capacitor":
            if in_tree[i]:
                states.append(i)
            else:
                loop = rooted.loop(b)
                _require(loop, branches, ("vcvs", "ccvs", "transformer_primary"), b, "loop")
                excess_capacitors[i] = loop
        elif b.kind == "inductor":
            if in_tree[i]:
                cut = rooted.cutset(i, in_tree)
                _require(cut, branches, ("vccs", "cccs", "transformer_secondary"), b, "cutset")
                excess_inductors[i] = cut
            else:
                states.append(i)

    couplings = [
        (name, part.inductors[0], part.inductors[1])
        for name, part in spec.parts.items()
        if part.kind == "coupling"
    ]
    inputs = [(b.name, i) for i, b in enumerate(branches) if b.kind in _SOURCES]
    inputs += [
        (two_terminal[b.name].speed_input or b.name, i)
        for i, b in enumerate(branches)
        if b.kind == "electromechanical"
    ]
    gates = _gates(spec, [name for name, _ in inputs], spec.outputs)
    for part, gate in gates.items():
        if gate not in [name for name, _ in inputs]:
            inputs.append((gate, branch_index[part]))
    return Topology(
        spec=spec,
        nodes=nodes,
        branches=branches,
        in_tree=in_tree,
        states=states,
        excess_capacitors=excess_capacitors,
        excess_inductors=excess_inductors,
        couplings=couplings,
        inputs=inputs,
        branch_index=branch_index,
        node_index=node_index,
        gates=gates,
    )


def _branch_location(branch: str, spec: CircuitSpec) -> tuple[str, ...]:
    part, _, winding = branch.partition(".")
    if spec.parts[part].kind == "transformer":
        return ("parts", part, winding or "primary")
    return ("parts", part, "nodes")


def _two_terminal(spec: CircuitSpec) -> dict:
    """Every branch by name: two-terminal parts, and two windings per transformer."""
    from types import SimpleNamespace

    out: dict = {}
    for name, part in spec.parts.items():
        if part.kind == "transformer":
            out[name] = SimpleNamespace(kind="transformer_primary", nodes=part.primary)
            out[name + SECONDARY] = SimpleNamespace(
                kind="transformer_secondary", nodes=part.secondary
            )
        elif part.kind != "coupling":
            out[name] = part
    return out


def _gates(spec: CircuitSpec, inputs: list[str], outputs: dict) -> dict[str, str]:
    """Gate input of every switch; a gate may not be a source, speed or output name."""
    gates = {}
    for name, part in spec.parts.items():
        if part.kind != "switch":
            continue
        gate = part.gate or name
        clash = "an input of a source or speed" if gate in inputs else None
        if gate in outputs:
            clash = "an output"
        if clash:
            raise TopologyError(
                "invalid_gate",
                f"the gate of {name} must be a block input of its own, but {gate!r} is {clash}",
                location=("parts", name, "gate"),
            )
        gates[name] = gate
    return gates


def _check_transformers(
    spec: CircuitSpec, branches: list[Branch], index: dict, node_index: dict[str, int]
) -> None:
    """A winding node that no other part touches is a typo or an open terminal: refuse it."""
    for name, part in spec.parts.items():
        if part.kind != "transformer":
            continue
        own = {index[name], index[name + SECONDARY]}
        for field_name in ("primary", "secondary"):
            for node in getattr(part, field_name):
                k = node_index[node]
                others = [
                    b.name for i, b in enumerate(branches) if i not in own and k in (b.p, b.n)
                ]
                if not others and node != spec.ground:
                    raise TopologyError(
                        "unknown_node",
                        f"transformer {name}: no other part connects to {field_name} node {node!r}",
                        location=("parts", name, field_name),
                    )


_SOURCES = ("voltage_source", "current_source")


def _natural_key(name: str) -> tuple:
    import re

    return tuple(int(t) if t.isdigit() else t for t in re.split(r"(\d+)", name))


def _check_references(spec: CircuitSpec, node_index: dict[str, int], branch_index: dict) -> None:
    def need_node(node: str | None, location: tuple) -> None:
        if node is not None and node not in node_index:
            raise TopologyError(
                "unknown_node",
                f"no part connects to node {node!r}",
                location=location,
            )

    def need_part(part: str, location: tuple, what: str = "part") -> None:
        if part not in branch_index:
            raise TopologyError(
                "unknown_part",
                f"no {what} named {part!r} (parts: {', '.join(sorted(branch_index))})",
                location=location,
            )

    for name, part in spec.parts.items():
        if part.kind in ("vcvs", "vccs"):
            for node in part.control:
                need_node(node, ("parts", name, "control"))
        elif part.kind in ("ccvs", "cccs"):
            need_part(part.control, ("parts", name, "control"))
            if part.control == name:
                raise TopologyError(
                    "unknown_part",
                    f"{name} cannot be controlled by its own current",
                    location=("parts", name, "control"),
                )
        elif part.kind == "coupling":
            a, b = part.inductors
            for inductor in (a, b):
                if inductor not in spec.parts or spec.parts[inductor].kind != "inductor":
                    raise TopologyError(
                        "unknown_part",
                        f"{name} couples {inductor!r}, which is not an inductor of this circuit",
                        location=("parts", name, "inductors"),
                    )
            if a == b:
                raise TopologyError(
                    "unknown_part",
                    f"{name} couples {a} with itself",
                    location=("parts", name, "inductors"),
                )
    for name, output in spec.outputs.items():
        if output.voltage is not None:
            for node in output.voltage:
                need_node(node, ("outputs", name, "voltage"))
        else:
            need_part(output.current, ("outputs", name, "current"))


class _UnionFind:
    def __init__(self, n: int) -> None:
        self.parent = list(range(n))

    def find(self, a: int) -> int:
        while self.parent[a] != a:
            self.parent[a] = self.parent[self.parent[a]]
            a = self.parent[a]
        return a

    def union(self, a: int, b: int) -> bool:
        ra, rb = self.find(a), self.find(b)
        if ra == rb:
            return False
        self.parent[ra] = rb
        return True


def _check_floating(nodes: list[str], branches: list[Branch]) -> None:
    uf = _UnionFind(len(nodes))
    for b in branches:
        uf.union(b.p, b.n)
    ground_root = uf.find(0)
    floating = [i for i in range(1, len(nodes)) if uf.find(i) != ground_root]
    if floating:
        root = uf.find(floating[0])
        group = [nodes[i] for i in floating if uf.find(i) == root]
        parts = [b.name for b in branches if uf.find(b.p) == root]
        raise TopologyError(
            "floating_node",
            f"node{'s' if len(group) > 1 else ''} {', '.join(group)} "
            f"{'have' if len(group) > 1 else 'has'} no path to ground "
            f"(parts {', '.join(parts)} form a separate network; connect it to ground)",
            location=("parts", parts[0], "nodes"),
        )


def _normal_tree(nodes: list[str], branches: list[Branch]) -> list[bool]:
    uf = _UnionFind(len(nodes))
    in_tree = [False] * len(branches)
    order = sorted(range(len(branches)), key=lambda i: PRIORITY[branches[i].category])
    for i in order:
        if uf.union(branches[i].p, branches[i].n):
            in_tree[i] = True
    return in_tree


class _RootedTree:
    """The normal tree rooted at ground: parent branch, depth and subtree intervals."""

    def __init__(self, n_nodes: int, branches: list[Branch], in_tree: list[bool]) -> None:
        adjacency: list[list[tuple[int, int]]] = [[] for _ in range(n_nodes)]
        for i, b in enumerate(branches):
            if in_tree[i]:
                adjacency[b.p].append((b.n, i))
                adjacency[b.n].append((b.p, i))
        self.branches = branches
        self.parent_node = [-1] * n_nodes
        self.parent_branch = [-1] * n_nodes
        self.depth = [0] * n_nodes
        self.enter = [0] * n_nodes
        self.leave = [0] * n_nodes
        # iterative depth-first walk; enter/leave give subtree membership in O(1)
        clock = 0
        seen = [False] * n_nodes
        stack: list[tuple[int, int]] = [(0, 0)]
        seen[0] = True
        self.enter[0] = clock
        while stack:
            node, k = stack[-1]
            if k < len(adjacency[node]):
                stack[-1] = (node, k + 1)
                child, branch = adjacency[node][k]
                if not seen[child]:
                    seen[child] = True
                    self.parent_node[child] = node
                    self.parent_branch[child] = branch
                    self.depth[child] = self.depth[node] + 1
                    clock += 1
                    self.enter[child] = clock
                    stack.append((child, 0))
            else:
                self.leave[node] = clock
                stack.pop()

    def _step(self, node: int) -> tuple[int, int]:
        """(tree branch to the parent, sign of e_node - e_parent in that branch's voltage)."""
        branch = self.parent_branch[node]
        return branch, (1 if self.branches[branch].p == node else -1)

    def loop(self, link: Branch) -> list[tuple[int, int]]:
        """Fundamental loop of a link: ``v_link = e_p - e_n = sum(sign * v_tree)``."""
        terms: dict[int, int] = {}
        a, b = link.p, link.n
        while a != b:
            if self.depth[a] >= self.depth[b]:
                branch, sign = self._step(a)
                terms[branch] = terms.get(branch, 0) + sign
                a = self.parent_node[a]
            else:
                branch, sign = self._step(b)
                terms[branch] = terms.get(branch, 0) - sign
                b = self.parent_node[b]
        return [(branch, sign) for branch, sign in terms.items() if sign]

    def path_branches(self, a: int, b: int) -> list[int]:
        return [branch for branch, _ in self.loop(Branch("", "", a, b))]

    def inside(self, node: int, root: int) -> bool:
        return self.enter[root] <= self.enter[node] <= self.leave[root]

    def cutset(self, tree_branch: int, in_tree: list[bool]) -> list[tuple[int, int]]:
        """Fundamental cutset of a tree branch: ``i_tree = sum(sign * i_link)``."""
        t = self.branches[tree_branch]
        child = t.p if self.parent_branch[t.p] == tree_branch else t.n
        s_tree = 1 if t.p == child else -1  # +1: the tree branch carries current out of the subtree
        terms = []
        for i, b in enumerate(self.branches):
            if in_tree[i]:
                continue
            p_in, n_in = self.inside(b.p, child), self.inside(b.n, child)
            if p_in != n_in:
                s_link = 1 if p_in else -1
                # KCL over the subtree: s_tree*i_tree + sum(s_link*i_link) = 0
                terms.append((i, -s_tree * s_link))
        return terms


def _check_voltage_loops(branches: list[Branch], in_tree: list[bool], rooted: _RootedTree) -> None:
    for i, b in enumerate(branches):
        if b.category == "voltage" and not in_tree[i]:
            loop = [branches[j].name for j in rooted.path_branches(b.p, b.n)]
            raise TopologyError(
                "voltage_source_loop",
                f"{b.name} closes a loop of voltage sources with {', '.join(loop)}; "
                "their voltages cannot all be imposed (add a series resistance or inductance)",
                location=("parts", b.name),
            )


def _check_current_cutsets(
    branches: list[Branch], in_tree: list[bool], rooted: _RootedTree
) -> None:
    for i, b in enumerate(branches):
        if b.category == "current" and in_tree[i]:
            others = [branches[j].name for j, _ in rooted.cutset(i, in_tree)]
            members = ", ".join([b.name, *others])
            raise TopologyError(
                "current_source_cutset",
                f"current sources {members} form a cutset: their currents have no other "
                "path (add a parallel resistance or capacitance)"
                if others
                else f"current source {b.name} forms a cutset by itself: its current has no "
                "return path (add a parallel resistance or capacitance)",
                location=("parts", b.name),
            )


def _require(
    terms: list[tuple[int, int]],
    branches: list[Branch],
    forbidden: tuple[str, ...],
    element: Branch,
    what: str,
) -> None:
    bad = [branches[j].name for j, _ in terms if branches[j].kind in forbidden]
    if bad:
        raise TopologyError(
            "unsupported_topology",
            f"{element.name} lies in a {what} with the controlled source(s) {', '.join(bad)}; "
            f"its {'current' if element.kind == 'capacitor' else 'voltage'} would need the "
            "derivative of a controlling quantity (add a small series resistance or parallel "
            "conductance)",
            location=("parts", element.name),
        )


def _named(branch: Branch) -> str:
    kind = branch.kind.replace("_", " ")
    return f"{kind} {branch.name}"


def _signed_sum(prefix: str, terms: list[tuple[int, int]], branches: list[Branch]) -> str:
    """``v_C3 - v_C1`` from ``[(branch, sign)]``."""
    text = ""
    for k, sign in terms:
        name = f"{prefix}_{branches[k].name}"
        if not text:
            text = name if sign > 0 else f"-{name}"
        else:
            text += f" + {name}" if sign > 0 else f" - {name}"
    return text


def excess_notes(topology: Topology) -> dict[int, str]:
    """Why each excess capacitor and inductor has no state of its own, by branch index.

    A link capacitor closes a loop of capacitors and voltage-type parts: its voltage is
    fixed by them, and its current is its capacitance times their rate of change. A tree
    inductor lies in a cutset of inductors and current-type parts: its current is fixed by
    them, its voltage is its inductance times their rate of change (the normal-tree rule
    in the module docstring).
    """
    branches = topology.branches
    # (excess parts, source category, where to say it is, what fixes, what it fixes, derived)
    kinds = (
        (topology.excess_capacitors, "voltage", "directly across", "loop", "v", "current"),
        (topology.excess_inductors, "current", "in series with", "cutset", "i", "voltage"),
    )
    notes = {}
    for excess, source, alone, group, symbol, derived in kinds:
        fixed = "voltage" if symbol == "v" else "current"
        for index, terms in excess.items():
            part = branches[index].name
            others = [branches[k] for k, _ in terms]
            if len(others) == 1 and others[0].category == source:
                where = f"it is {alone} {_named(others[0])}"
            else:
                verb = "closes a loop" if group == "loop" else "lies in a cutset"
                where = f"it {verb} with " + ", ".join(_named(b) for b in others)
            notes[index] = (
                f"{part} has no state of its own: {where}; the {group} fixes its {fixed} "
                f"({symbol}_{part} = {_signed_sum(symbol, terms, branches)}), so its "
                f"{derived} is {part} times the rate of change of that {fixed}"
            )
    return notes


def excess_through(topology: Topology, branch: int) -> list[int]:
    """The excess capacitors and inductors whose loop or cutset contains ``branch`` (an
    input's source): the parts whose current or voltage follows that input's derivative."""
    found = [
        k for k, loop in topology.excess_capacitors.items() if any(b == branch for b, _ in loop)
    ]
    found += [k for k, cut in topology.excess_inductors.items() if any(b == branch for b, _ in cut)]
    return found
