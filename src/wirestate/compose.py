"""Wiring blocks into a system by signal name.

A signal is written ``block.signal``. Every block input is driven either by one block
output (the wiring, ``destination <- source``) or by an external input of the system.
Before any matrix work the wiring is checked: unknown blocks or signals, inputs driven
twice, inputs driven by nothing, and algebraic loops (a cycle of direct feedthrough with no
state to break it) each raise a :class:`~wirestate.errors.CompositionError` naming the
signals.

The continuous linear blocks are joined with ``control.interconnect`` (python-control);
sampled controllers, limited continuous controllers and user nonlinear blocks stay
separate and are run by :mod:`wirestate.simulate`. Composed state names are
``block.state``. python-control (about a second to import) is imported only when a
``control.StateSpace`` is needed: building, checking and composing a system file, and
reading its blocks' matrices (:meth:`BlockView.matrices`, what the tuning loop uses), do
without it.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from wirestate.blocks import Modulator, NonlinearBlock, PIDController
from wirestate.blocks import controllers as _controllers
from wirestate.blocks import mechanical as _mechanical
from wirestate.errors import CompositionError, WirestateError
from wirestate.lti import CircuitBlock, LinearBlock, load_state_space_block, named_state_space
from wirestate.reduce import compile_circuit
from wirestate.spec import load_circuit
from wirestate.spec.system import SystemSpec, load_system_spec
from wirestate.switching import switched_circuit

if TYPE_CHECKING:  # python-control costs about a second to import: only where it is used
    import control

LINEAR, SAMPLED, NONLINEAR = "linear", "sampled", "nonlinear"
#: a circuit with switches or diodes, and a pulse-width modulator (issue 12): run by
#: :mod:`wirestate.simulate.switched_system`
SWITCHED, MODULATOR = "switched", "modulator"


class _StateSpaceOnDemand:
    """``BlockView.system``: as given, or built from the view's source on first read
    (python-control costs about a second to import, and reading matrices does without
    it). A descriptor-typed dataclass field, so ``dataclasses.replace(view, system=...)``
    still works."""

    def __set_name__(self, owner: type, name: str) -> None:
        self.slot = f"_{name}"

    def __get__(self, view: Any, owner: type | None = None) -> Any:
        if view is None:
            return None  # the field's default
        found = view.__dict__.get(self.slot)
        if found is None and view.category in (LINEAR, SWITCHED):
            found = view.__dict__[self.slot] = _state_space_of(view.source)
        return found

    def __set__(self, view: Any, value: Any) -> None:
        view.__dict__[self.slot] = value


def _state_space_of(source: Any) -> control.StateSpace:
    return source if _is_state_space(source) else source.state_space()


@dataclass
class BlockView:
    """A block as composition and simulation see it.

    ``category`` is ``"linear"`` (continuous LTI, ``system`` is a ``control.StateSpace``),
    ``"sampled"`` (runs at ``sample_time``), ``"nonlinear"`` (continuous, CasADi
    right-hand side), ``"switched"`` (a circuit with switches or diodes; ``system`` is its
    mode with every device off) or ``"modulator"`` (a :class:`~wirestate.blocks.Modulator`).
    ``system`` is built from ``source`` on first read unless given; :meth:`matrices` reads
    the same numbers without python-control.
    """

    name: str
    category: str
    inputs: list[str]
    outputs: list[str]
    states: list[str]
    units: dict[str, str]
    x0: np.ndarray
    source: Any
    system: control.StateSpace | None = _StateSpaceOnDemand()
    input_defaults: dict[str, float] = field(default_factory=dict)
    sample_time: float | None = None

    def matrices(self) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """``(A, B, C, D)`` shaped by the block's states, inputs and outputs: continuous,
        or discrete for a sampled block; a controller with output limits unsaturated (the
        numbers :attr:`system` holds, without building it)."""
        # a system given to the view (a switched block's mode) wins over its source
        given = self.__dict__.get("_system")
        src = self.source if given is None else given
        if isinstance(src, PIDController):
            matrices = src.matrices()
        elif isinstance(src, CircuitBlock | LinearBlock) or _is_state_space(src):
            matrices = (src.A, src.B, src.C, src.D)
        else:
            raise CompositionError(
                "unknown_kind",
                f"block {self.name!r} ({type(src).__name__}) has no state-space matrices",
                location=("blocks", self.name),
            )
        n, m, p = len(self.states), len(self.inputs), len(self.outputs)
        shapes = ((n, n), (n, m), (p, n), (p, m))
        return tuple(_shaped(M, *shape) for M, shape in zip(matrices, shapes, strict=True))

    def feedthrough(self) -> set[tuple[str, str]]:
        """Pairs ``(input, output)`` with a direct path (no state in between)."""
        if self.category in (LINEAR, SWITCHED):
            D = self.matrices()[3]
            return {
                (self.inputs[j], self.outputs[i])
                for i in range(D.shape[0])
                for j in range(D.shape[1])
                if D[i, j] != 0.0
            }
        if _is_state_space(self.source):
            direct = bool(np.any(np.asarray(self.source.D) != 0.0))
        else:
            direct = self.source.has_feedthrough
        if direct:
            return {(i, o) for i in self.inputs for o in self.outputs}
        return set()

    # sampled blocks: one uniform interface for the simulator
    def sample(self, x: np.ndarray, u: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Outputs to hold and next state of a sampled block for inputs ``u``."""
        src = self.source
        if isinstance(src, PIDController):
            command, nxt = src.sample(x, float(u[0]), float(u[1]))
            return np.array([command]), nxt
        A, B, C, D = (np.asarray(m) for m in (src.A, src.B, src.C, src.D))
        return C @ x + D @ u, A @ x + B @ u


def _is_state_space(block: Any) -> bool:
    import sys

    # without python-control imported, nothing can be a control.StateSpace
    control = sys.modules.get("control")
    return control is not None and isinstance(block, control.StateSpace)


def view(block: Any, name: str | None = None) -> BlockView:
    """Classify a block (CircuitBlock, LinearBlock, control.StateSpace, PIDController,
    Modulator, NonlinearBlock)."""
    if isinstance(block, BlockView):
        return block
    if isinstance(block, CircuitBlock):
        category = LINEAR if switched_circuit(block) is None else SWITCHED
        return BlockView(
            name or block.name, category, list(block.inputs), list(block.outputs),
            list(block.states), dict(block.units), np.array(block.x0, dtype=float), block,
            input_defaults=dict(block.input_defaults),
        )  # fmt: skip
    if isinstance(block, LinearBlock):
        return BlockView(
            name or block.name, LINEAR, list(block.inputs), list(block.outputs),
            list(block.states), dict(block.units), np.zeros(len(block.states)), block,
        )  # fmt: skip
    if isinstance(block, Modulator):
        return BlockView(
            name or block.name, MODULATOR, list(block.inputs), list(block.outputs), [],
            block.units, np.zeros(0), block,
        )  # fmt: skip
    if isinstance(block, PIDController):
        units = block.units
        x0 = block.initial_state()
        if block.is_sampled:
            return BlockView(
                name or block.name, SAMPLED, list(block.inputs), list(block.outputs),
                block.states, units, x0, block, sample_time=float(block.sample_time),
            )  # fmt: skip
        if block.is_limited:
            return BlockView(
                name or block.name, NONLINEAR, list(block.inputs), list(block.outputs),
                block.states, units, x0, block,
            )  # fmt: skip
        return BlockView(
            name or block.name, LINEAR, list(block.inputs), list(block.outputs),
            block.states, units, x0, block,
        )  # fmt: skip
    if isinstance(block, NonlinearBlock):
        return BlockView(
            name or block.name, NONLINEAR, list(block.inputs), list(block.outputs),
            list(block.states), dict(block.units), block.initial_state(), block,
        )  # fmt: skip
    if _is_state_space(block):
        units = dict(getattr(block, "units", {}) or {})
        x0 = np.zeros(block.nstates)
        common = (
            name or block.name, list(block.input_labels), list(block.output_labels),
            list(block.state_labels), units, x0, block,
        )  # fmt: skip
        if block.isdtime(strict=True):
            return BlockView(common[0], SAMPLED, *common[1:], sample_time=float(block.dt))
        return BlockView(common[0], LINEAR, *common[1:])
    raise CompositionError(
        "unknown_kind",
        f"cannot use a {type(block).__name__} as a block; expected a CircuitBlock, "
        "LinearBlock, control.StateSpace, PIDController, Modulator or NonlinearBlock",
        location=("blocks", name or "?"),
    )


def _split(signal: str, where: tuple[str, ...]) -> tuple[str, str]:
    block, dot, name = signal.partition(".")
    if not dot or not block or not name:
        raise CompositionError(
            "unknown_signal", f"expected 'block.signal', got {signal!r}", location=where
        )
    return block, name


@dataclass
class ComposedSystem:
    """Blocks wired by signal name, checked, with the linear part interconnected.

    Attributes
    ----------
    name
        System name.
    blocks
        Block views by name, in the order given.
    wiring
        ``destination -> source`` (both ``block.signal``).
    external_inputs
        External input name -> the block inputs it drives.
    external_outputs
        External output name -> the block output it reads.
    units
        Unit of every external input and output and every composed state.
    input_defaults
        Default values of external inputs (from circuit source ``value`` fields).
    """

    name: str
    blocks: dict[str, BlockView]
    wiring: dict[str, str]
    external_inputs: dict[str, list[str]]
    external_outputs: dict[str, str]
    units: dict[str, str] = field(default_factory=dict)
    input_defaults: dict[str, float] = field(default_factory=dict)
    file: str | None = None

    @property
    def inputs(self) -> list[str]:
        return list(self.external_inputs)

    @property
    def outputs(self) -> list[str]:
        return list(self.external_outputs)

    @property
    def states(self) -> list[str]:
        return [f"{b.name}.{s}" for b in self.blocks.values() for s in b.states]

    @property
    def is_linear(self) -> bool:
        """True when every block is continuous LTI (then :meth:`state_space` exists)."""
        return all(b.category == LINEAR for b in self.blocks.values())

    @property
    def sample_times(self) -> list[float]:
        return sorted({b.sample_time for b in self.blocks.values() if b.category == SAMPLED})

    def x0(self) -> np.ndarray:
        parts = [b.x0 for b in self.blocks.values()]
        return np.concatenate(parts) if parts else np.zeros(0)

    def linear_part(self) -> LinearPart:
        """The continuous linear blocks joined by ``control.interconnect``; the outputs of
        the other blocks that drive them become inputs (see :class:`LinearPart`)."""
        return _linear_part(self)

    def state_space(self) -> control.StateSpace:
        """The whole system as one named ``control.StateSpace`` (continuous LTI only)."""
        if not self.is_linear:
            other = [b.name for b in self.blocks.values() if b.category != LINEAR]
            raise CompositionError(
                "unknown_kind",
                f"{self.name}: not a linear time-invariant system (sampled, limited or "
                f"nonlinear blocks: {', '.join(other)}); simulate it instead",
            )
        part = self.linear_part()
        sys = part.system
        rows_in = [part.inputs.index(n) for n in self.inputs]
        rows_out = [part.outputs.index(self.external_outputs[n]) for n in self.outputs]
        # named_state_space: a system without external inputs is a valid system too
        n, m, p = len(part.states), len(part.inputs), len(part.outputs)
        return named_state_space(
            _shaped(sys.A, n, n),
            _shaped(sys.B, n, m)[:, rows_in],
            _shaped(sys.C, p, n)[rows_out, :],
            _shaped(sys.D, p, m)[np.ix_(rows_out, rows_in)],
            self.name,
            self.inputs,
            self.outputs,
            part.states,
        )

    def poles(self) -> np.ndarray:
        """Poles of the composed LTI system (rad/s)."""
        return np.asarray(self.state_space().poles())


def _shaped(matrix: Any, rows: int, cols: int) -> np.ndarray:
    # python-control stores an empty (n, 0) matrix as (0, 0)
    matrix = np.asarray(matrix, dtype=float)
    return np.zeros((rows, cols)) if matrix.size == 0 else matrix.reshape(rows, cols)


@dataclass
class LinearPart:
    """The continuous LTI blocks as one ``control.StateSpace``.

    ``inputs`` are the external inputs that reach a linear block, then every output of a
    sampled / nonlinear block that drives a linear block (named ``block.signal``);
    ``outputs`` are every output of every linear block (``block.signal``); ``states`` are
    ``block.state``.
    """

    system: control.StateSpace
    inputs: list[str]
    outputs: list[str]
    states: list[str]
    blocks: list[str]


def _linear_part(cs: ComposedSystem) -> LinearPart:
    import control

    linear = [b for b in cs.blocks.values() if b.category == LINEAR]
    states = [f"{b.name}.{s}" for b in linear for s in b.states]
    names = {b.name for b in linear}
    outputs = [f"{b.name}.{o}" for b in linear for o in b.outputs]
    inputs: list[str] = []
    targets: list[list[str]] = []
    for ext, dests in cs.external_inputs.items():
        hit = [d for d in dests if d.split(".")[0] in names]
        if hit:
            inputs.append(ext)
            targets.append(hit)
    cut: dict[str, list[str]] = {}
    connections = []
    for dest, src in cs.wiring.items():
        if dest.split(".")[0] not in names:
            continue
        if src.split(".")[0] in names:
            connections.append([dest, src])
        else:
            cut.setdefault(src, []).append(dest)
    for src, dests in cut.items():
        inputs.append(src)
        targets.append(dests)
    if not linear:
        empty = control.ss(
            np.zeros((0, 0)), np.zeros((0, len(inputs))), np.zeros((0, 0)),
            np.zeros((0, len(inputs))), 0,
        )  # fmt: skip
        return LinearPart(empty, inputs, [], [], [])
    systems = [b.system.copy(name=b.name) if b.system.name != b.name else b.system for b in linear]
    internal_in = [f"u{k}" for k in range(len(inputs))]
    internal_out = [f"y{k}" for k in range(len(outputs))]
    sys = control.interconnect(
        systems,
        connections=connections or False,
        inplist=targets,
        outlist=outputs,
        inputs=internal_in,
        outputs=internal_out,
        name=cs.name,
        check_unused=False,
    )
    if not isinstance(sys, control.StateSpace):  # pragma: no cover - all members are LTI
        raise CompositionError("unknown_kind", f"{cs.name}: the linear part is not LTI")
    expected = [
        f"{b.name}{control.config.defaults['iosys.state_name_delim']}{s}"
        for b in linear
        for s in b.states
    ]
    if list(sys.state_labels) != expected:  # pragma: no cover - python-control ordering
        raise CompositionError("unknown_kind", f"{cs.name}: unexpected state order")
    return LinearPart(sys, inputs, outputs, states, [b.name for b in linear])


# -- building and checking ---------------------------------------------------------------


def compose(
    blocks: Iterable[Any] | Mapping[str, Any],
    wiring: Mapping[str, str] | Sequence[tuple[str, str]] = (),
    inputs: Mapping[str, str | Sequence[str]] | None = None,
    outputs: Mapping[str, str] | Sequence[str] | None = None,
    *,
    name: str = "system",
    file: str | None = None,
) -> ComposedSystem:
    """Wire blocks into a system by signal name (the Python form of a system file).

    Parameters
    ----------
    blocks
        Blocks (``CircuitBlock``, ``LinearBlock``, ``control.StateSpace``,
        :class:`PIDController`, :class:`Modulator`, :class:`NonlinearBlock`) in a list
        (named by their own names) or a mapping by name.
    wiring
        ``{"block.input": "block.output"}`` or ``[(destination, source), ...]``.
    inputs
        External input name -> the block input(s) it drives.
    outputs
        External output name -> block output; or a list of ``block.signal`` names (used
        as they are). Default: every block output, named ``block.signal``.
    name
        System name.

    Returns
    -------
    ComposedSystem

    Raises
    ------
    CompositionError
        ``unknown_signal``, ``duplicate_signal``, ``unconnected_input`` or
        ``algebraic_loop``, naming the signals involved.
    """
    if isinstance(blocks, Mapping):
        views = {n: view(b, n) for n, b in blocks.items()}
    else:
        views = {}
        for b in blocks:
            v = view(b)
            if v.name in views:
                raise CompositionError(
                    "duplicate_signal", f"two blocks are named {v.name!r}", location=("blocks",)
                )
            views[v.name] = v
    pairs = list(wiring.items()) if isinstance(wiring, Mapping) else [tuple(p) for p in wiring]
    ext_in = {
        k: [v] if isinstance(v, str) else list(v) for k, v in (inputs or {}).items()
    }  # fmt: skip
    if outputs is None:
        ext_out = {f"{b.name}.{o}": f"{b.name}.{o}" for b in views.values() for o in b.outputs}
    elif isinstance(outputs, Mapping):
        ext_out = dict(outputs)
    else:
        ext_out = {o: o for o in outputs}

    def check(signal: str, kind: str, where: tuple[str, ...]) -> None:
        block, sig = _split(signal, where)
        if block not in views:
            raise CompositionError(
                "unknown_signal",
                f"{signal!r}: no block named {block!r} (blocks: {', '.join(views)})",
                file=file,
                location=where,
            )
        names = views[block].inputs if kind == "input" else views[block].outputs
        if sig not in names:
            raise CompositionError(
                "unknown_signal",
                f"{signal!r}: block {block!r} has no {kind} {sig!r} "
                f"({kind}s: {', '.join(names) or 'none'})",
                file=file,
                location=where,
            )

    driven: dict[str, str] = {}
    for dest, src in pairs:
        check(dest, "input", ("wiring", dest))
        check(src, "output", ("wiring", dest))
        if dest in driven:
            raise CompositionError(
                "duplicate_signal",
                f"{dest} is driven twice ({driven[dest]} and {src})",
                file=file,
                location=("wiring", dest),
            )
        driven[dest] = src
    for ext, dests in ext_in.items():
        if not dests:
            raise CompositionError(
                "unconnected_input", f"external input {ext!r} drives nothing",
                file=file, location=("inputs", ext),
            )  # fmt: skip
        for dest in dests:
            check(dest, "input", ("inputs", ext))
            if dest in driven:
                raise CompositionError(
                    "duplicate_signal",
                    f"{dest} is driven twice ({driven[dest]} and external input {ext})",
                    file=file,
                    location=("inputs", ext),
                )
            driven[dest] = ext
    for out, src in ext_out.items():
        check(src, "output", ("outputs", out))
    missing = [
        f"{b.name}.{i}" for b in views.values() for i in b.inputs if f"{b.name}.{i}" not in driven
    ]
    if missing:
        raise CompositionError(
            "unconnected_input",
            f"nothing drives {', '.join(missing)}; wire each to a block output or list it "
            "under the external inputs",
            file=file,
            location=("wiring", missing[0]),
        )
    wiring_map = {d: s for d, s in pairs}
    _check_loops(views, wiring_map, file)

    _controller_units(views, wiring_map)
    _check_units(views, wiring_map, ext_in, file)
    units: dict[str, str] = {}
    defaults: dict[str, float] = {}
    for b in views.values():
        for s in b.states:
            units[f"{b.name}.{s}"] = b.units.get(s, "")
    for ext, dests in ext_in.items():
        block, sig = dests[0].split(".")
        units[ext] = views[block].units.get(sig, "")
        found = [
            views[d.split(".")[0]].input_defaults.get(d.split(".")[1])
            for d in dests
            if d.split(".")[1] in views[d.split(".")[0]].input_defaults
        ]
        if found and all(v == found[0] for v in found):
            defaults[ext] = float(found[0])
    for out, src in ext_out.items():
        block, sig = src.split(".")
        units[out] = views[block].units.get(sig, "")
    return ComposedSystem(name, views, wiring_map, ext_in, ext_out, units, defaults, file)


def _controller_units(views: dict[str, BlockView], wiring: dict[str, str]) -> None:
    # a controller's reference carries the unit of what it measures (known only once wired)
    for b in views.values():
        if isinstance(b.source, PIDController) and not b.units.get("measurement"):
            src = wiring.get(f"{b.name}.measurement")
            if src is not None:
                block, sig = src.split(".")
                unit = views[block].units.get(sig, "")
                measured = ("measurement", "reference", "derivative_filter", "last_measurement")
                b.units = {**b.units, **dict.fromkeys(measured, unit)}


def _check_units(
    views: dict[str, BlockView],
    wiring: dict[str, str],
    external: dict[str, list[str]],
    file: str | None,
) -> None:
    """Refuse a wire whose two ends state different units (a current command into a
    voltage input), and an external input that drives inputs of different units. A signal
    without a unit (``""``) takes whatever it is wired to."""
    from wirestate.units import same_unit

    def unit_of(signal: str) -> str:
        block, sig = signal.split(".")
        return views[block].units.get(sig, "") or ""

    def shown(unit: str) -> str:
        return "1 (dimensionless)" if unit == "1" else unit

    for dest, src in wiring.items():
        a, b = unit_of(src), unit_of(dest)
        if a and b and not same_unit(a, b):
            error = CompositionError(
                "wrong_unit",
                f"{src} is in {shown(a)} and drives {dest}, which is in {shown(b)}; the units "
                "of a wire must agree",
                file=file,
                location=("wiring", dest),
            )
            error.signals = (dest, src)  # type: ignore[attr-defined]
            raise error
    for name, dests in external.items():
        found = [(d, unit_of(d)) for d in dests if unit_of(d)]
        other = [(d, u) for d, u in found if not same_unit(u, found[0][1])]
        if other:
            raise CompositionError(
                "wrong_unit",
                f"external input {name!r} drives {found[0][0]} ({shown(found[0][1])}) and "
                f"{other[0][0]} ({shown(other[0][1])}); one input has one unit",
                file=file,
                location=("inputs", name),
            )


def _check_loops(views: dict[str, BlockView], wiring: dict[str, str], file: str | None) -> None:
    # signal graph: source output -> destination input (wires) and input -> output inside a
    # block with direct feedthrough. A cycle is an algebraic loop.
    edges: dict[str, list[str]] = {}
    for dest, src in wiring.items():
        edges.setdefault(src, []).append(dest)
    for b in views.values():
        for i, o in b.feedthrough():
            edges.setdefault(f"{b.name}.{i}", []).append(f"{b.name}.{o}")
    loop = find_cycle(edges)
    if loop is not None:
        raise CompositionError(
            "algebraic_loop",
            f"algebraic loop through {' -> '.join(loop)}: every block on it passes "
            "its input straight to its output; add a state (a filter, a sampled "
            "controller with a computation delay) or remove a direct path",
            file=file,
            location=("wiring", loop[-1]),
        )


def find_cycle(edges: Mapping[str, list[str]]) -> list[str] | None:
    """A directed cycle of ``edges`` as ``[a, b, ..., a]``, or ``None``.

    Depth-first search with an explicit stack (Tarjan's colouring, Cormen et al.,
    Introduction to Algorithms, 3rd ed., sec. 22.3), so a chain of any length is safe
    (a recursive search failed at about 500 blocks).
    """
    colour: dict[str, int] = {}
    for root in list(edges):
        if colour.get(root, 0):
            continue
        path: list[str] = [root]
        iterators = [iter(edges.get(root, ()))]
        colour[root] = 1
        while iterators:
            nxt = next(iterators[-1], None)
            if nxt is None:
                colour[path.pop()] = 2
                iterators.pop()
                continue
            state = colour.get(nxt, 0)
            if state == 1:
                return path[path.index(nxt) :] + [nxt]
            if state == 0:
                colour[nxt] = 1
                path.append(nxt)
                iterators.append(iter(edges.get(nxt, ())))
    return None


# -- from a system file ------------------------------------------------------------------


def build_block(name: str, spec: Any, base: Path | None = None) -> Any:
    """Build one block from its validated system-file table.

    Linear blocks come as :class:`~wirestate.lti.LinearBlock` (named matrices; their
    ``control.StateSpace`` is the view's :attr:`BlockView.system`), so that a system file
    is built without importing python-control."""
    kind = spec.kind
    if kind == "circuit":
        block = compile_circuit(block_circuit(name, spec, base)[0])
        block.name = name
        return block
    if kind == "state_space":
        path = Path(spec.file)
        block = load_state_space_block(base / path if base and not path.is_absolute() else path)
        block.name = name
        return block
    if kind == "rotary_inertia":
        return _mechanical.rotary_inertia(name, spec.inertia, spec.friction, as_state_space=False)
    if kind == "gear":
        return _mechanical.gear(name, spec.ratio, as_state_space=False)
    if kind == "torsional_shaft":
        return _mechanical.torsional_shaft(
            name, spec.inertia_drive, spec.inertia_load, spec.stiffness, spec.damping,
            spec.friction_drive, spec.friction_load, as_state_space=False,
        )  # fmt: skip
    if kind == "mass_spring_damper":
        return _mechanical.mass_spring_damper(
            name, spec.mass, spec.stiffness, spec.damping, as_state_space=False
        )
    if kind in ("pi", "pid"):
        return PIDController(
            name=name,
            kp=spec.kp,
            ki=spec.ki,
            kd=getattr(spec, "kd", 0.0),
            derivative_filter=getattr(spec, "derivative_filter", None),
            sample_time=spec.sample_time,
            output_limits=spec.limits_si(),
            anti_windup=spec.anti_windup,
            tracking_time=spec.tracking_time,
            delay=spec.delay,
            unit=spec.unit,
        )
    if kind == "state_feedback":
        return _controllers.state_feedback(
            name, np.array([spec.gain]), list(spec.measured),
            reference_gain=spec.reference_gain, as_state_space=False,
        )  # fmt: skip
    if kind == "gain":
        return _controllers.static_gain(name, spec.gain, spec.unit, as_state_space=False)
    if kind == "modulator":
        return Modulator(
            name, spec.frequency, spec.carrier, spec.dead_time, spec.complementary,
            spec.phase / 360.0,
        )  # fmt: skip
    if kind == "sensor_filter":
        return _controllers.sensor_filter(
            name, spec.time_constant, spec.gain, spec.unit, as_state_space=False
        )
    raise CompositionError(
        "unknown_kind", f"unknown block kind {kind!r}", location=("blocks", name)
    )  # pragma: no cover


def block_circuit(name: str, spec: Any, base: Path | None = None) -> tuple[Any, Path]:
    """The validated circuit of a ``kind = "circuit"`` block table (its ``values``
    replacements applied) and the circuit file's path."""
    path = Path(spec.file)
    if base is not None and not path.is_absolute():
        path = base / path
    circuit = load_circuit(path)
    if spec.values:
        circuit = _with_values(circuit, spec.values, name, str(path))
    return circuit, path


def _with_values(circuit: Any, values: Mapping[str, Any], block: str, file: str) -> Any:
    from wirestate.units import parse_quantity

    unit_of = {"resistor": "ohm", "inductor": "H", "capacitor": "F", "voltage_source": "V",
               "current_source": "A", "coupling": "1"}  # fmt: skip
    si = {}
    for part, value in values.items():
        if part not in circuit.parts:
            raise CompositionError(
                "unknown_part",
                f"circuit {circuit.name!r} ({file}) has no part {part!r}",
                location=("blocks", block, "values", part),
            )
        unit = unit_of.get(circuit.parts[part].kind, "1")
        try:
            si[part] = parse_quantity(value, unit, field="")
        except WirestateError as exc:
            # the whole place in the location (blocks.div.values.R1), like every other field
            exc.location = ("blocks", block, "values", part)
            exc.args = (str(exc),)
            raise
    try:
        return circuit.with_values(si)
    except WirestateError as exc:
        # point at the replacement in the system file, not at the circuit file's field
        if len(exc.location) >= 2 and exc.location[0] == "parts" and exc.location[1] in si:
            exc.location = ("blocks", block, "values", exc.location[1])
            exc.args = (str(exc),)
        raise


def system_from_spec(spec: SystemSpec, *, file: str | Path | None = None) -> ComposedSystem:
    """Build and compose the blocks of a validated system file."""
    base = Path(file).parent if file is not None else None
    blocks = {}
    for name, block_spec in spec.blocks.items():
        try:
            blocks[name] = build_block(name, block_spec, base)
        except WirestateError as exc:
            if exc.file is None and file is not None:
                exc.with_file(str(file))
            if not exc.location or exc.location[0] != "blocks":
                exc.location = ("blocks", name, *exc.location)
                exc.args = (str(exc),)
            raise
    try:
        return compose(
            blocks,
            spec.wiring,
            spec.input_targets(),
            spec.outputs or None,
            name=spec.name,
            file=None if file is None else str(file),
        )
    except CompositionError as exc:
        if exc.code == "wrong_unit" and hasattr(exc, "signals"):
            raise _at_unit_field(exc, spec) from None
        raise


def _at_unit_field(exc: CompositionError, spec: SystemSpec) -> CompositionError:
    """A unit clash on a wire, placed at the ``unit`` field of the block that stated the
    unit (a controller's command, a gain's output, a sensor filter's signal), if any."""
    dest, src = exc.signals  # type: ignore[attr-defined]
    source, target = src.split(".")[0], dest.split(".")[0]
    for block in (source, target):
        stated = getattr(spec.blocks[block], "unit", "")
        if stated and (block == source or spec.blocks[block].kind == "sensor_filter"):
            exc.location = ("blocks", block, "unit")
            exc.message = f"unit {stated!r} of block {block!r} contradicts the wiring: " + (
                exc.message
            )
            exc.args = (str(exc),)
            break
    return exc


def load_system(path: str | Path) -> ComposedSystem:
    """Read, validate, build and compose a system file (TOML)."""
    return system_from_spec(load_system_spec(path), file=path)


def is_system_file(data: Mapping[str, Any]) -> bool:
    """True for a parsed system file (top-level ``[system]`` table), False for a circuit."""
    return "system" in data and "circuit" not in data


__all__ = [
    "BlockView",
    "ComposedSystem",
    "LinearPart",
    "block_circuit",
    "build_block",
    "compose",
    "is_system_file",
    "load_system",
    "system_from_spec",
    "view",
]
