"""Algebraic elimination to an explicit, minimal state-space with physical state names.

The stamped system ``M w + N_x x + N_u u + N_du du = 0`` (see :mod:`wirestate.equations`)
is solved for the unknowns ``w``; the state-derivative rows of the solution give

    dx/dt = A x + B0 u + B1 du/dt,        y = C x + D0 u + D1 du/dt.

``B1`` is non-zero only for a capacitor in a loop with a voltage source (or an inductor
in a cutset with a current source). Such states are shifted, ``z = x - B1 u``, which gives
the explicit form ``dz/dt = A z + (A B1 + B0) u`` and ``y = C z + (D0 + C B1) u`` (the
standard removal of input derivatives, e.g. Chua and Lin 1975, sec. 8-4). An output with
``D1 != 0`` would need ``du/dt`` itself and is refused.

The order equals the number of normal-tree capacitors plus link inductors, i.e.
``capacitors + inductors - C/V loops - L/I cutsets``.

The numeric path eliminates the unknowns one at a time on the sparse rows
(:mod:`wirestate.elimination`: linear time for ladder-like circuits, no SciPy import for a
small one) and falls back to a sparse LU factorisation (SuperLU via SciPy) when the solution
is dense; the symbolic path runs the same stamps with CasADi values and solves with CasADi,
so optimisation sees exactly the compiled equations. Large blocks with a sparse ``A`` keep
it sparse (:attr:`wirestate.lti.CircuitBlock.sparse_A`).
"""

from __future__ import annotations

import dataclasses
import gc
import itertools
import math
from collections.abc import Iterable, Iterator, Mapping, Sequence
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from wirestate.elimination import SingularEquations, UnstablePivot, eliminate, is_exact_zero
from wirestate.equations import Backend, Equations, assemble, nominal_values, part_parameter
from wirestate.errors import CompileError, TopologyError, WirestateError
from wirestate.lti import CircuitBlock
from wirestate.spec import CircuitSpec, parse_circuit
from wirestate.topology import Topology, analyse, excess_notes, excess_through

#: entries of B1 below this (relative to the largest) are round-off, not a loop with a source
_SHIFT_TOLERANCE = 1e-12
#: an output derivative term is real when it is this large against the terms that formed it
_DERIVATIVE_TOLERANCE = 1e-9


@dataclass
class _Layout:
    """Column layout of the known vector ``[x; u; du]`` (du only for inputs that need it)."""

    n_x: int
    n_u: int
    du_inputs: list[int]

    @property
    def width(self) -> int:
        return self.n_x + self.n_u + len(self.du_inputs)

    def column(self, kind: str, index: int) -> int:
        if kind == "x":
            return index
        if kind == "u":
            return self.n_x + index
        return self.n_x + self.n_u + self.du_inputs.index(index)


def _layout(eq: Equations) -> _Layout:
    used = sorted(
        {index for form in (*eq.rows, *eq.outputs) for (kind, index) in form if kind == "du"}
    )
    return _Layout(len(eq.topology.states), len(eq.topology.inputs), used)


def _triplets(forms: list[dict], layout: _Layout) -> tuple[list, list]:
    """Split linear forms into (row, col, value) for the w part and the known part."""
    w_part, known_part = [], []
    for row, form in enumerate(forms):
        for (kind, index), value in form.items():
            if kind == "w":
                w_part.append((row, index, value))
            else:
                known_part.append((row, layout.column(kind, index), value))
    return w_part, known_part


def _rows(forms: list[dict], layout: _Layout) -> tuple[list[dict], list[dict]]:
    """Split linear forms into their ``w`` part and their known part, by column index."""
    unknown, known = [], []
    for form in forms:
        w_row, k_row = {}, {}
        for (kind, index), value in form.items():
            if kind == "w":
                w_row[index] = value
            else:
                k_row[layout.column(kind, index)] = value
        unknown.append(w_row)
        known.append(k_row)
    return unknown, known


def _sparse(triplets: list, shape: tuple[int, int]) -> Any:
    import scipy.sparse as sp

    if not triplets:
        return sp.csc_matrix(shape)
    rows, cols, vals = zip(*triplets, strict=True)
    return sp.coo_matrix((np.asarray(vals, float), (rows, cols)), shape=shape).tocsc()


@dataclass
class _Solution:
    A: Any
    B0: Any
    B1: Any
    C: Any
    D0: Any
    D1: Any
    D1_magnitude: Any = None


#: blocks with more states than this whose A has at most ``SPARSE_MAX_DENSITY`` of its
#: entries non-zero keep A sparse (a ladder of thousands of sections: a dense A alone would
#: be hundreds of megabytes); see :attr:`wirestate.lti.CircuitBlock.sparse_A`
SPARSE_MIN_STATES = 400
SPARSE_MAX_DENSITY = 0.05


def _elimination_budget(n_w: int, width: int) -> int:
    # entries the plain-Python elimination may create before a general sparse LU is faster:
    # ~50 per unknown covers ladders, filters and windings with room to spare; a small
    # circuit never falls back (so compiling it never imports SciPy). No source: measured.
    return max(200_000, 50 * (n_w + width))


def _solve_numeric(eq: Equations, layout: _Layout) -> tuple[_Solution, list | None]:
    """The solved equations and the elimination's pivots (``None`` after SuperLU)."""
    n_x, width = layout.n_x, layout.width
    try:
        result = _eliminated(eq, layout, budget=_elimination_budget(eq.n_w, width))
    except SingularEquations:
        raise _singular_error(eq) from None
    if result is None:
        return _solve_superlu(eq, layout), None
    solution = result.solution
    y_unknown, y_known = _rows(eq.outputs, layout)
    Y = _from_forms(_output_forms(y_unknown, y_known, solution), width, sparse=False)
    # the terms' sizes, for _check_output_derivatives
    sizes = _output_forms(y_unknown, y_known, solution, magnitude=True)
    Y_size = _from_forms(sizes, width, sparse=False)
    d_forms = solution[eq.d_offset : eq.d_offset + n_x]
    in_a = sum(1 for form in d_forms for c in form if c < n_x)
    Wd = _from_forms(
        d_forms, width, sparse=n_x > SPARSE_MIN_STATES and in_a <= SPARSE_MAX_DENSITY * n_x**2
    )
    finite = np.isfinite(Wd.data if hasattr(Wd, "data") else Wd).all()
    if not (finite and np.isfinite(Y).all()):
        # every pivot was non-zero, so the equations are regular: the numbers overflowed
        raise _overflow_error(eq)
    return _split_solution(Wd, Y, Y_size, layout), result.pivots


def _eliminated(eq: Equations, layout: _Layout | None = None, **options: Any) -> Any:
    """:func:`wirestate.elimination.eliminate` on the stamped rows (``options`` as there):
    the one elimination of the numeric compile, its replay and the checks of its pivots."""
    rows, known = _rows(eq.rows, layout or _layout(eq))
    return eliminate(rows, known, eq.n_w, **options)


def _output_forms(
    y_unknown: list[dict], y_known: list[dict], solution: list[dict], *, magnitude: bool = False
) -> list[dict]:
    """Outputs as linear forms of the knowns: their known part plus their unknowns'
    solutions (numbers or CasADi values); ``magnitude`` sums the terms' sizes instead."""
    forms = []
    for w_row, k_row in zip(y_unknown, y_known, strict=True):
        form = {c: abs(v) for c, v in k_row.items()} if magnitude else dict(k_row)
        for w, factor in w_row.items():
            for c, v in solution[w].items():
                term = abs(factor * v) if magnitude else factor * v
                form[c] = form[c] + term if c in form else term
        forms.append(form)
    return forms


def _overflow_error(eq: Equations) -> CompileError:
    """``out_of_range`` naming the smallest and the largest part value (by magnitude)."""
    values = {
        name: abs(v)
        for name, v in nominal_values(eq.topology).items()
        if isinstance(v, float) and v != 0.0
    }
    spread = ""
    location: tuple[str, ...] = ("parts",)
    if values:
        low, high = min(values, key=values.get), max(values, key=values.get)
        decades = math.log10(values[high] / values[low])
        spread = f": part values span {decades:.0f} decades, from {low} to {high}"
        location = ("parts", low)
    return CompileError(
        "out_of_range",
        f"the state equations leave the floating-point range{spread} (a part far smaller or "
        "larger than the rest; check its value and unit prefix)",
        location=location,
    )


def _from_forms(forms: list[dict], width: int, *, sparse: bool) -> Any:
    """Rows ``{column: value}`` as a dense array, or (large, sparse) a SciPy CSR matrix."""
    if not sparse:
        out = np.zeros((len(forms), width))
        for r, form in enumerate(forms):
            if form:
                out[r, list(form)] = list(form.values())
        return out
    import scipy.sparse as sp

    counts = np.fromiter((len(form) for form in forms), dtype=np.int64, count=len(forms))
    indptr = np.concatenate([[0], np.cumsum(counts)])
    indices = np.fromiter((c for form in forms for c in form), dtype=np.int64, count=indptr[-1])
    data = np.fromiter((v for form in forms for v in form.values()), float, count=indptr[-1])
    out = sp.csr_matrix((data, indices, indptr), shape=(len(forms), width))
    out.sort_indices()
    return out


def _split_solution(Wd: Any, Y: np.ndarray, Y_size: np.ndarray, layout: _Layout) -> _Solution:
    x_cols = slice(0, layout.n_x)
    u_cols = slice(layout.n_x, layout.n_x + layout.n_u)
    du_cols = slice(layout.n_x + layout.n_u, layout.width)
    dense = Wd if isinstance(Wd, np.ndarray) else None
    return _Solution(
        A=Wd[:, x_cols] if dense is not None else Wd[:, x_cols].tocsr(),
        B0=dense[:, u_cols] if dense is not None else Wd[:, u_cols].toarray(),
        B1=dense[:, du_cols] if dense is not None else Wd[:, du_cols].toarray(),
        C=Y[:, x_cols],
        D0=Y[:, u_cols],
        D1=Y[:, du_cols],
        D1_magnitude=Y_size[:, du_cols],
    )


def _solve_superlu(eq: Equations, layout: _Layout) -> _Solution:
    """Rows of ``M^-1 N`` by SuperLU, for circuits whose solution is too dense for
    :func:`wirestate.elimination.eliminate`."""
    n_rows, n_w = len(eq.rows), eq.n_w
    w_t, k_t = _triplets(eq.rows, layout)
    M = _sparse(w_t, (n_rows, n_w))
    N = _sparse(k_t, (n_rows, layout.width))
    yw_t, yk_t = _triplets(eq.outputs, layout)
    Yw = _sparse(yw_t, (len(eq.outputs), n_w))
    Yk = _sparse(yk_t, (len(eq.outputs), layout.width)).toarray()
    d_rows = np.arange(eq.d_offset, eq.d_offset + layout.n_x)
    output_rows = np.unique(Yw.nonzero()[1])
    needed = np.concatenate([d_rows, output_rows])
    try:
        W = _solve_rows(M, -N, needed)
    except RuntimeError:
        raise _singular_error(eq) from None
    if not np.all(np.isfinite(W)):
        raise _singular_error(eq)
    Wd, Wy = W[: layout.n_x], W[layout.n_x :]
    Yw_used = Yw[:, output_rows]
    Y = Yw_used @ Wy + Yk
    Y_size = abs(Yw_used) @ np.abs(Wy) + np.abs(Yk)
    return _split_solution(Wd, Y, Y_size, layout)


#: above this many unknowns the singular-equation message names no parts (an SVD would
#: cost more than the compile; common practice, no source)
_NAME_PARTS_MAX = 3000


def _singular_error(eq: Equations) -> CompileError:
    """``singular_equations`` naming the parts whose equations depend on each other.

    The left null vector of ``M`` (from its SVD) weights the equations that combine to
    zero; the parts whose branch equations carry weight form the loop (a vcvs driving its
    own control nodes, two ccvs each controlled by the other's current).
    """
    location: tuple[str, ...] = ("parts",)
    named = ""
    if len(eq.rows) <= _NAME_PARTS_MAX and eq.row_labels:
        M = np.zeros((len(eq.rows), eq.n_w))
        for r, form in enumerate(eq.rows):
            for (kind, index), value in form.items():
                if kind == "w":
                    M[r, index] += value
        U, sigma, _ = np.linalg.svd(M)
        weights = np.abs(U[:, -1])
        involved = [eq.row_labels[k] for k in np.flatnonzero(weights > 1e-6 * weights.max())]
        parts = [label.split()[-1] for label in involved if not label.startswith("KCL at")]
        nodes = [label.removeprefix("KCL at ") for label in involved if label.startswith("KCL at")]
        if parts:
            named = f" through {', '.join(dict.fromkeys(parts))}"
            location = ("parts", parts[0])
        elif nodes:
            named = f" at nodes {', '.join(nodes)}"
    return CompileError(
        "singular_equations",
        f"the circuit equations are singular{named}: no unique solution for the node "
        "voltages and branch currents (check controlled-source gains and loops through "
        "them)",
        location=location,
    )


def _solve_rows(M: Any, N: Any, rows: np.ndarray, batch: int = 16) -> np.ndarray:
    """Rows ``rows`` of ``M^-1 N`` as a dense array (sparse LU, SuperLU via SciPy).

    SuperLU solves a handful of dense right-hand sides at a time much faster than one wide
    block (16 columns per call measured fastest on 1000-section ladders), and only the
    state-derivative and output rows are kept, so memory stays at the size of the result.
    """
    from scipy.sparse.linalg import splu

    lu = splu(M, permc_spec="MMD_AT_PLUS_A")
    N = N.tocsc()
    n, width = N.shape
    out = np.empty((len(rows), width))
    block = np.zeros((n, batch), order="F")
    for start in range(0, width, batch):
        stop = min(start + batch, width)
        block[:] = 0.0
        for k, col in enumerate(range(start, stop)):
            lo, hi = N.indptr[col], N.indptr[col + 1]
            block[N.indices[lo:hi], k] = N.data[lo:hi]
        solved = lu.solve(block[:, : stop - start])
        out[:, start:stop] = solved[rows]
    return out


def _expand_du(matrix: Any, layout: _Layout, zeros: Any) -> Any:
    """Place the du columns (only the inputs that have one) into an (n, n_u) matrix."""
    out = zeros
    for k, index in enumerate(layout.du_inputs):
        out[:, index] = matrix[:, k]
    return out


def _check_output_derivatives(eq: Equations, sol: _Solution, layout: _Layout) -> None:
    if not layout.du_inputs:
        return
    real = np.abs(sol.D1) > _DERIVATIVE_TOLERANCE * sol.D1_magnitude
    real &= sol.D1_magnitude > 0
    if real.any():
        row, col = map(int, np.argwhere(real)[0])
        output = eq.output_names[row]
        source, branch = eq.topology.inputs[layout.du_inputs[col]]
        parts = [eq.topology.branches[k] for k in excess_through(eq.topology, branch)]
        if parts:
            why = "; ".join(excess_notes(eq.topology)[eq.topology.branch_index[p.name]]
                            for p in parts)  # fmt: skip
            because = f": {why}"
        else:
            because = (
                " (for example the current of a capacitor placed directly across a voltage source)"
            )
        raise TopologyError(
            "output_needs_derivative",
            f"output {output} would need the derivative of input {source}{because}; measure "
            "it through a part with series resistance or inductance instead",
            location=("outputs", output) if output in eq.topology.spec.outputs else ("parts",),
        )


def _state_names(topology: Topology, shifted: np.ndarray) -> list[str]:
    names = []
    for k, branch in enumerate(topology.states):
        b = topology.branches[branch]
        base = f"{'v' if b.kind == 'capacitor' else 'i'}_{b.name}"
        names.append(f"{base}_shifted" if shifted[k] else base)
    return names


def _input_units(topology: Topology) -> dict[str, str]:
    units = {}
    for name, branch in topology.inputs:
        b = topology.branches[branch]
        if branch < 0 or b.kind == "switch":
            units[name] = "1"  # a gate, or the unit constant of a switched mode
        elif b.kind == "voltage_source":
            units[name] = "V"
        elif b.kind == "current_source":
            units[name] = "A"
        else:
            units[name] = "rad/s" if topology.spec.parts[b.name].motion == "rotary" else "m/s"
    return units


def compile_circuit(spec: CircuitSpec) -> CircuitBlock:
    """Compile a validated circuit into an explicit, minimal, named state-space block.

    Method: normal-tree state selection (Bryant 1962; Chua and Lin 1975) and modified nodal
    analysis stamping (Ho, Ruehli and Brennan 1975), solved by sparse Gaussian elimination
    (:mod:`wirestate.elimination`, or SuperLU when the solution is dense).

    Parameters
    ----------
    spec
        The validated circuit model.

    Returns
    -------
    CircuitBlock
        ``A, B, C, D`` in SI units; states ``v_<C>`` / ``i_<L>``, inputs named after the
        sources (and electromechanical speeds), outputs from ``[outputs]`` plus
        electromechanical torques or forces.
    """
    with _no_cyclic_collection():
        topology = analyse(spec)
        return block_from_equations(assemble(topology, nominal_values(topology)))


@contextmanager
def _no_cyclic_collection() -> Iterator[None]:
    """Pause Python's cyclic garbage collector: compiling a large circuit creates hundreds
    of thousands of small dictionaries, none in a reference cycle, and the collector's
    passes over them took a third of the time of a 4000-section ladder (measured)."""
    was_enabled = gc.isenabled()
    gc.disable()
    try:
        yield
    finally:
        if was_enabled:
            gc.enable()


def block_from_equations(eq: Equations) -> CircuitBlock:
    """Eliminate stamped equations (:func:`wirestate.equations.assemble`) to a named block.

    This is the elimination step of :func:`compile_circuit`; the switched-circuit compiler
    calls it once per mode with that mode's resistances.
    """
    topology = eq.topology
    spec = topology.spec
    layout = _layout(eq)
    sol, pivots = _solve_numeric(eq, layout)
    _check_output_derivatives(eq, sol, layout)
    n_x, n_u = layout.n_x, layout.n_u
    B1 = _expand_du(sol.B1, layout, np.zeros((n_x, n_u)))
    scale = max(1.0, float(np.abs(B1).max(initial=0.0)))
    B1[np.abs(B1) <= _SHIFT_TOLERANCE * scale] = 0.0
    shifted = np.any(B1 != 0.0, axis=1)
    A = sol.A  # a numpy array, or a SciPy CSR matrix for a large sparse block
    B = np.asarray(A @ B1) + sol.B0
    C = np.asarray(sol.C)
    D = sol.D0 + C @ B1
    states = _state_names(topology, shifted)
    units = dict.fromkeys(states, "V")
    for k, branch in enumerate(topology.states):
        if topology.branches[branch].kind == "inductor":
            units[states[k]] = "A"
    units.update(_input_units(topology))
    units.update(dict(zip(eq.output_names, eq.output_units, strict=True)))
    x0, notes = _initial_state(topology)
    notes += list(excess_notes(topology).values())
    defaults = {
        name: spec.parts[topology.branches[branch].name].value
        for name, branch in topology.inputs
        if branch >= 0
        and topology.branches[branch].kind in ("voltage_source", "current_source")
        and spec.parts[topology.branches[branch].name].value is not None
    }
    return CircuitBlock(
        name=spec.name,
        A=A,
        B=B,
        C=C,
        D=D,
        states=states,
        inputs=[name for name, _ in topology.inputs],
        outputs=list(eq.output_names),
        x0=x0,
        state_offset=B1,
        input_defaults=defaults,
        units=units,
        spec=spec,
        notes=notes,
        elimination_order=pivots,
    )


def _initial_state(topology: Topology) -> tuple[np.ndarray, list[str]]:
    parts = topology.spec.parts
    x0 = np.zeros(len(topology.states))
    for k, branch in enumerate(topology.states):
        initial = parts[topology.branches[branch].name].initial
        x0[k] = 0.0 if initial is None else initial
    notes = []
    for branch in (*topology.excess_capacitors, *topology.excess_inductors):
        name = topology.branches[branch].name
        if parts[name].initial is not None:
            notes.append(
                f"{name}: 'initial' ignored; its "
                f"{'voltage' if parts[name].kind == 'capacitor' else 'current'} follows from "
                "the other parts of its loop or cutset"
            )
    return x0, notes


def load_block(path: str | Path) -> CircuitBlock:
    """Read, validate and compile a circuit model file, or load a state-space file
    (``[state_space]`` table, see :func:`wirestate.lti.load_state_space_block`)."""
    from wirestate.spec.load import read_toml
    from wirestate.spec.state_space import is_state_space_file, parse_state_space

    data = read_toml(path)
    if is_state_space_file(data):
        from wirestate.lti import block_from_state_space

        return block_from_state_space(parse_state_space(data, file=str(path)), file=path)
    spec = parse_circuit(data, file=str(path))
    try:
        return compile_circuit(spec)
    except WirestateError as exc:
        raise exc.with_file(str(path)) from None


# -- symbolic path ------------------------------------------------------------------------------


@dataclass
class SymbolicStateSpace:
    """``A, B, C, D`` and ``state_offset`` as CasADi matrices of the design variables."""

    A: Any
    B: Any
    C: Any
    D: Any
    state_offset: Any
    states: list[str]
    inputs: list[str]
    outputs: list[str]
    units: dict[str, str]


def symbolic_state_space(
    spec: CircuitSpec,
    variables: Mapping[str, Any],
    *,
    linear_solver: str = "symbolicqr",
    bounds: Mapping[str, tuple[float, float]] | None = None,
) -> SymbolicStateSpace:
    """The compiled state-space with some part values replaced by CasADi expressions.

    The topology, the stamps and the elimination are those of :func:`compile_circuit`; only
    the arithmetic runs on CasADi values. The elimination replays the numeric compile's
    pivots, operation for operation (:func:`symbolic_from_values`), so at the file's values
    the matrices equal the numeric compile's to round-off of the last bit, and exact first
    and second derivatives come from CasADi's automatic differentiation.

    Parameters
    ----------
    spec
        The validated circuit model (nominal values for every part not in ``variables``).
    variables
        Part name -> CasADi scalar (``SX`` or ``MX``) replacing that part's primary value
        (resistance, capacitance, inductance, gain, coupling coefficient or
        electromechanical constant), in SI base units. The matrices come back as the same
        kind.
    linear_solver
        Only for circuits whose solution is dense, where the numeric compile uses SuperLU
        and this one CasADi's ``solve``: the linear solver for ``MX`` values,
        ``"symbolicqr"`` (the default) or a sparse numeric one such as ``"qr"``.
    bounds
        Part name -> ``(low, high)``: the values the expressions will be evaluated at (for
        example an optimiser's box). The pivots chosen at the file's values are checked
        over the box; see :func:`symbolic_from_values`.
    """
    topology = analyse(spec)
    check_valued_parts(spec, variables)
    # the numeric compile fixes the structure (shifted states, refused derivatives) and
    # chooses the pivots
    block = compile_circuit(spec)
    return symbolic_from_values(
        topology,
        nominal_values(topology),
        variables,
        block,
        linear_solver=linear_solver,
        bounds=bounds,
    )


def valued_parts(spec: CircuitSpec) -> list[str]:
    """Parts with a primary value, in file order: resistors, inductors, capacitors,
    couplings, controlled-source gains, electromechanical constants, transformer ratios."""
    return [name for name, part in spec.parts.items() if part_parameter(part.kind) is not None]


def check_valued_parts(spec: CircuitSpec, names: Iterable[str]) -> None:
    """Refuse (``unknown_part``) any name that is not a part with a primary value."""
    _refuse_unknown(names, valued_parts(spec), "a part with a value", "parts with values")


def _refuse_unknown(names: Iterable[str], known: Iterable[str], what: str, listed: str) -> None:
    """``unknown_part`` for the first of ``names`` not in ``known``, listing ``known``."""
    known = list(known)
    for name in names:
        if name not in known:
            raise CompileError(
                "unknown_part",
                f"{name!r} is not {what} ({listed}: {', '.join(sorted(known)) or 'none'})",
                location=("parts", name),
            )


def symbolic_from_values(
    topology: Topology,
    values: Mapping[str, Any],
    variables: Mapping[str, Any],
    block: CircuitBlock,
    *,
    probes: tuple[tuple[str, str], ...] = (),
    linear_solver: str = "symbolicqr",
    bounds: Mapping[str, tuple[float, float]] | None = None,
) -> SymbolicStateSpace:
    """Stamp ``topology`` with ``variables`` in place of some ``values`` and eliminate.

    ``block`` is the numeric compile of the same stamps at ``values``
    (:func:`block_from_equations`). The equations are stamped on one ``SX`` symbol per
    variable, eliminated by replaying the block's pivots (:func:`symbolic_from_equations`)
    and wrapped in one ``casadi.Function``, which is then called on ``variables``: SX
    values get the expressions inlined, MX values one call node whose derivatives are
    the SX function's (measured faster to build and to evaluate than a replay on MX
    scalars, see DEVELOPERS.md).

    Where the numeric compile fell back to SuperLU (a dense solution), so does this one,
    to CasADi's ``solve`` on the equations stamped with ``variables`` (``linear_solver``
    for MX).

    Pivots and other part values. An unknown with a single row left at its step has that
    row as its pivot at any part values, and the pivot can vanish only where the
    remaining equations are singular, which for positive R, L, C they are not. Where more
    than one row had the unknown (a *contested* step), the pivot chosen at ``values`` may
    become small elsewhere. With ``bounds``, every contested pivot whose column depends on
    bounded parts is checked at the corners of the box over those parts (each part alone
    at each bound, and all low and all high, when there are more than eight): it must
    stay at least ``MIN_PIVOT_RATIO`` of its column. If it does not, the pivots are chosen
    again at the centre of the box and checked the same way; if that fails too, the
    compile is refused (``unstable_elimination``) naming the parts and the equation.
    """
    import casadi

    backend = Backend(sqrt=casadi.sqrt)
    if block.elimination_order is None:
        eq = assemble(topology, {**values, **variables}, backend, probes)
        mx = any(isinstance(v, casadi.MX) for v in variables.values())
        return symbolic_from_equations(eq, block, mx=mx, linear_solver=linear_solver)
    box = _checked_bounds(bounds or {}, variables)
    symbols = {name: casadi.SX.sym(name) for name in variables}
    eq = assemble(topology, {**values, **symbols}, backend, probes)
    order = block.elimination_order
    first_failure = None
    for centre in (False, True) if box else (False,):
        if centre:
            point = {**values, **{name: _centre(*box[name]) for name in box}}
            order = _numeric_order(topology, point, probes)
        sym, contested = _replay(eq, block, casadi.SX, order)
        failure = _box_failure(topology, values, probes, order, contested, box)
        if failure is None:
            break
        first_failure = first_failure or failure
    else:
        raise _unstable_error(first_failure)
    if not variables:
        return sym
    compiled = casadi.Function(
        "compiled_circuit",
        list(symbols.values()),
        [sym.A, sym.B, sym.C, sym.D, sym.state_offset],
    )
    with _exact_casadi_arithmetic():  # inlined into SX values: the same operations again
        A, B, C, D, offset = compiled(*variables.values())
    return dataclasses.replace(sym, A=A, B=B, C=C, D=D, state_offset=offset)


@contextmanager
def _exact_casadi_arithmetic() -> Iterator[None]:
    """Pause CasADi's rewriting of SX expressions as they are built.

    CasADi simplifies ``(x*y)/y`` to ``x`` and ``(x+y)-y`` to ``x``: exact in real
    numbers, not in floating point, and the replay must make the numeric compile's
    operations (measured: with the rewriting, one entry of an aux_buck mode differed by
    3.4e-10 of itself from the numeric compile; without it, not at all). The stamps are
    built with the rewriting on, which removes their ``1*x`` and ``-1*x`` (exact; half the
    instructions of a ladder's matrices). The switch is CasADi's global option, restored
    on the way out.
    """
    import casadi

    was = casadi.GlobalOptions.getSimplificationOnTheFly()
    casadi.GlobalOptions.setSimplificationOnTheFly(False)
    try:
        yield
    finally:
        casadi.GlobalOptions.setSimplificationOnTheFly(was)


def symbolic_from_equations(
    eq: Equations,
    block: CircuitBlock,
    *,
    mx: bool,
    linear_solver: str = "symbolicqr",
) -> SymbolicStateSpace:
    """Eliminate equations stamped with CasADi values; ``block`` is their numeric compile.

    The symbolic half of :func:`block_from_equations`: the block's pivots
    (:attr:`~wirestate.lti.CircuitBlock.elimination_order`) are replayed on the CasADi rows
    by :func:`wirestate.elimination.eliminate`, the same function and the same operations
    as the numeric compile. ``block`` also fixes which states are shifted. A
    block compiled by SuperLU (a dense solution) has no pivots; then CasADi's ``solve``
    eliminates (symbolic QR for ``SX``, ``linear_solver`` for ``MX``).
    """
    import casadi

    kind = casadi.MX if mx else casadi.SX
    if block.elimination_order is not None:
        return _replay(eq, block, kind, block.elimination_order)[0]
    layout = _layout(eq)
    w_t, k_t = _triplets(eq.rows, layout)
    M = _casadi_matrix(kind, w_t, (len(eq.rows), eq.n_w))
    N = _casadi_matrix(kind, k_t, (len(eq.rows), layout.width))
    W = casadi.solve(M, -N, linear_solver) if mx else casadi.solve(M, -N)
    yw_t, yk_t = _triplets(eq.outputs, layout)
    Yw = _casadi_matrix(kind, yw_t, (len(eq.outputs), eq.n_w))
    Yk = _casadi_matrix(kind, yk_t, (len(eq.outputs), layout.width))
    Y = casadi.mtimes(Yw, W) + Yk
    return _symbolic_matrices(kind, W[eq.d_offset : eq.d_offset + layout.n_x, :], Y, eq, block)


def _replay(
    eq: Equations, block: CircuitBlock, kind: Any, order: Sequence[tuple[int, int]]
) -> tuple[SymbolicStateSpace, dict[int, list[Any]]]:
    """The matrices by the replayed elimination, and its contested columns."""
    layout = _layout(eq)
    y_unknown, y_known = _rows(eq.outputs, layout)
    with _exact_casadi_arithmetic():
        result = _eliminated(eq, layout, order=order)
        assert result is not None  # no budget: a replay never gives up
        y_forms = _output_forms(y_unknown, y_known, result.solution)
        Y = _casadi_from_forms(kind, y_forms, layout)
        d_forms = result.solution[eq.d_offset : eq.d_offset + layout.n_x]
        Wd = _casadi_from_forms(kind, d_forms, layout)
        return _symbolic_matrices(kind, Wd, Y, eq, block), result.contested


def _symbolic_matrices(
    kind: Any, Wd: Any, Y: Any, eq: Equations, block: CircuitBlock
) -> SymbolicStateSpace:
    """``A, B, C, D`` from the solved state-derivative rows ``Wd`` and outputs ``Y``
    (columns ``[x; u; du]``), with the block's shifted states (as in
    :func:`block_from_equations`)."""
    import casadi

    layout = _layout(eq)
    n_x, n_u = layout.n_x, layout.n_u
    A = Wd[:, :n_x]
    B0 = Wd[:, n_x : n_x + n_u]
    C = Y[:, :n_x]
    D0 = Y[:, n_x : n_x + n_u]
    B1 = kind(n_x, n_u)
    for k, index in enumerate(layout.du_inputs):
        for row in range(n_x):
            if block.state_offset[row, index] != 0.0:
                B1[row, index] = Wd[row, n_x + n_u + k]
    if B1.nnz():
        B0 = casadi.mtimes(A, B1) + B0
        D0 = D0 + casadi.mtimes(C, B1)
    return SymbolicStateSpace(
        A=A,
        B=B0,
        C=C,
        D=D0,
        state_offset=B1,
        states=list(block.states),
        inputs=list(block.inputs),
        outputs=list(block.outputs),
        units=dict(block.units),
    )


def _casadi_from_forms(kind: Any, forms: list[dict], layout: _Layout) -> Any:
    """Rows ``{column: value}`` as one sparse CasADi matrix (structural zeros left out)."""
    triplets = [
        (r, c, v) for r, form in enumerate(forms) for c, v in form.items() if not is_exact_zero(v)
    ]
    return _casadi_matrix(kind, triplets, (len(forms), layout.width))


#: a replayed pivot must stay at least this fraction of the largest coefficient of its
#: unknown over the caller's bounds: growth of at most 101 per contested step, ten times
#: below the threshold the pivots are chosen with (Duff, Erisman and Reid 2017, sec. 5.3,
#: give 0.01 to 0.1 as the usual thresholds; from memory)
MIN_PIVOT_RATIO = 0.01
#: with more bounded parts acting on contested pivots, the check takes each at its bounds
#: alone and all at their low and all at their high bounds instead of every corner
_MAX_CORNER_PARTS = 8


@dataclass
class _PivotFailure:
    corner: dict[str, float]
    equation: str
    ratio: float


def _checked_bounds(
    bounds: Mapping[str, tuple[float, float]], variables: Mapping[str, Any]
) -> dict[str, tuple[float, float]]:
    _refuse_unknown(bounds, variables, "a variable, so it takes no bounds", "variables")
    box = {}
    for name, (low, high) in bounds.items():
        low, high = float(low), float(high)
        if not (math.isfinite(low) and math.isfinite(high) and low <= high):
            raise CompileError(
                "out_of_range",
                f"the bounds of {name} must be finite with low <= high, got ({low}, {high})",
                location=("parts", name),
            )
        box[name] = (low, high)
    return box


def _centre(low: float, high: float) -> float:
    """The middle of a bound on a log scale where it is positive (part values spread over
    decades), else the arithmetic middle."""
    return math.sqrt(low * high) if low > 0.0 else 0.5 * (low + high)


def _numeric_order(
    topology: Topology, values: Mapping[str, Any], probes: tuple[tuple[str, str], ...]
) -> list[tuple[int, int]]:
    """The pivots the numeric elimination chooses at ``values``."""
    eq = assemble(topology, values, probes=probes)
    try:
        return _eliminated(eq).pivots  # no budget: never None
    except SingularEquations:
        raise _singular_error(eq) from None


def _box_failure(
    topology: Topology,
    values: Mapping[str, Any],
    probes: tuple[tuple[str, str], ...],
    order: Sequence[tuple[int, int]],
    contested: dict[int, list[Any]],
    box: dict[str, tuple[float, float]],
) -> _PivotFailure | None:
    """The first corner of ``box`` where a contested pivot of ``order`` falls below
    ``MIN_PIVOT_RATIO`` of its column (``None``: none does)."""
    import casadi

    entries = [v for column in contested.values() for v in column if isinstance(v, casadi.SX)]
    if not entries or not box:
        return None
    acting_names = {s.name() for s in casadi.symvar(casadi.vertcat(*entries))}
    acting = [name for name in box if name in acting_names]
    for corner in _corners(acting, box):
        eq = assemble(topology, {**values, **corner}, probes=probes)
        try:
            _eliminated(eq, order=order, min_ratio=MIN_PIVOT_RATIO)
        except UnstablePivot as exc:
            return _PivotFailure(corner, eq.row_labels[exc.row], exc.ratio)
        except SingularEquations as exc:
            return _PivotFailure(corner, f"unknown {exc.column}", 0.0)
    return None


def _corners(names: list[str], box: dict[str, tuple[float, float]]) -> Iterator[dict[str, float]]:
    if len(names) <= _MAX_CORNER_PARTS:
        for choice in itertools.product(*(box[name] for name in names)):
            yield dict(zip(names, choice, strict=True))
        return
    yield {name: box[name][0] for name in names}
    yield {name: box[name][1] for name in names}
    for name in names:
        for bound in box[name]:
            yield {name: bound}


def _unstable_error(failure: _PivotFailure) -> CompileError:
    at = ", ".join(f"{name} = {value:.4g}" for name, value in failure.corner.items())
    return CompileError(
        "unstable_elimination",
        f"no elimination order of the circuit equations keeps its pivots over the bounds: "
        f"the order chosen at the file's values and the one chosen at the centre of the "
        f"bounds both fail; at {at} the pivot of equation '{failure.equation}' falls to "
        f"{failure.ratio:.2g} of its column (below {MIN_PIVOT_RATIO}); narrow the bounds "
        f"of {', '.join(failure.corner)}",
        location=("parts", next(iter(failure.corner), "")),
    )


def _casadi_matrix(kind: Any, triplets: list, shape: tuple[int, int]) -> Any:
    import casadi

    merged: dict[tuple[int, int], Any] = {}
    for row, col, value in triplets:
        merged[(row, col)] = merged[(row, col)] + value if (row, col) in merged else value
    if not merged:
        return kind(*shape)
    # one sparse matrix from all nonzeros at once: assigning entries one by one makes an MX
    # graph of one node per entry (which made the derivatives of a 50-section ladder about
    # 5x slower to build and to evaluate) and costs SX a sparsity change per entry
    keys = list(merged)
    sparsity, order = casadi.Sparsity.triplet(
        shape[0], shape[1], [r for r, _ in keys], [c for _, c in keys], False
    )
    return kind(sparsity, casadi.vertcat(*[merged[keys[k]] for k in order]))
