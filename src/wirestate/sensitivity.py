"""Normalised sensitivities (elasticities) of modes and DC gains to every part value.

The elasticity of a quantity ``y`` to a part value ``p`` is ``d ln y / d ln p = (p / y)
dy/dp``: the percentage change of ``y`` per percent change of ``p``, to first order. It is
dimensionless, so one table compares a capacitor with a resistor or a coupling coefficient.

Every derivative comes from CasADi's automatic differentiation through the same symbolic
compile the optimiser uses (:func:`wirestate.reduce.symbolic_state_space`, or
:meth:`wirestate.switching.SwitchedCircuit.symbolic_mode` for one mode of a switched
circuit); nothing here differentiates by finite differences, and no circuit equation is
written a second time.

Two quantities need more than differentiating an expression:

* **Eigenvalues.** CasADi cannot differentiate a non-symmetric eigen-decomposition. For a
  simple eigenvalue ``lambda`` with right and left eigenvectors ``v`` and ``w`` (``A v =
  lambda v``, ``w^H A = lambda w^H``), first-order perturbation theory gives
  ``d lambda = w^H dA v / (w^H v)`` (Wilkinson, The Algebraic Eigenvalue Problem, 1965,
  ch. 2, sec. 5-10). With ``v`` and ``w`` computed numerically at the nominal values and
  held fixed, the CasADi expression ``f(p) = w^H A(p) v / (w^H v)`` equals ``lambda`` at
  the nominal point and its AD gradient there is ``d lambda / dp`` exactly (``A(p)`` is
  differentiated by AD; the contraction with fixed vectors is linear). Natural frequency
  ``|f|`` and damping ratio ``-Re f / |f|`` written on ``f`` therefore have the right value
  and first derivatives at the nominal point, which is all an elasticity needs. These
  expressions are *not* the eigenvalue away from the nominal point.
  A repeated eigenvalue has no derivative (it splits at a rate that depends on the
  direction of the change), so repeated poles get a note instead of a number.
* **DC gains.** ``G = D - C A^-1 B`` is differentiated by AD through CasADi's linear solve.
  When ``A`` has poles at the origin the DC gain is the limit ``s -> 0`` (see
  :func:`wirestate.lti.dc_gain_limit`): entries without a limit are reported unbounded and
  get no elasticity; the finite ones equal ``D - C A^# B`` with the group inverse ``A^#``
  when the zero eigenvalue is semisimple, differentiated with the derivative of the group
  inverse at constant rank, ``dX = -X dA X + X^2 dA P + P dA X^2`` with ``P = I - A X``
  (Campbell and Meyer, Generalized Inverses of Linear Transformations, 1979, ch. 10),
  ``dA`` again by AD.

Modes are named after the states that dominate them, by participation factors ``p_kj =
|w_kj v_kj|`` normalised to sum 1 over the states (Perez-Arriaga, Verghese and Schweppe,
"Selective modal analysis with applications to electric power systems", IEEE Trans. PAS
101(9), 1982; magnitudes, the usual form for complex modes).

:func:`elasticities` is the general entry point: any CasADi function whose inputs are
part values (for example a tuning limit's value at the preferred design) gives its
elasticities the same way.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import scipy.linalg

from wirestate.equations import part_parameter
from wirestate.errors import CompileError
from wirestate.lti import ZERO_POLE_TOLERANCE, CircuitBlock, dc_gain_limit, is_regular
from wirestate.reduce import (
    check_valued_parts,
    compile_circuit,
    symbolic_state_space,
    valued_parts,
)
from wirestate.spec import CircuitSpec

#: two poles closer than this (relative to their magnitude) are taken as one repeated pole:
#: a defective double pole computes as two poles about sqrt(machine epsilon) ~ 1.5e-8
#: apart, so this catches it with margin (common practice, no source)
REPEATED_POLE_TOLERANCE = 1e-6
#: a DC gain below this times the terms that formed it is zero (round-off); the tolerance
#: of :data:`wirestate.lti.LAURENT_TOLERANCE`, for the same reason
ZERO_GAIN_TOLERANCE = 1e-9
#: a state dominates a mode when its participation is at least this fraction of the
#: largest (common practice, no source)
DOMINANT_FRACTION = 0.4
#: at most this many states name a mode
NAMING_STATES = 3
#: CasADi's linear solver for the symbolic compile: the sparse LU of CSparse, whose
#: derivatives are solves with the same factorisation. Its sparse QR ("qr") declared the
#: equations of a 1 kOhm / 100 fF RC low-pass singular (capacitor stamps ~1e-13 beside
#: conductances ~1e-3) and failed; the LU pivots on the values and gives the same
#: elasticities to 1e-15 on the bundled models
LINEAR_SOLVER = "csparse"
#: blocks with more states are refused: the Jacobian of every mode costs about n^3 per
#: part (ladders with a part per state: 100 states 2.8 s, 150 states 8.9 s, measured on 2
#: cores loaded by other work)
MAX_STATES = 150


def elasticities(
    function: Any, values: Mapping[str, float], *, by_rows: bool = False
) -> dict[str, dict[str, float | None]]:
    """Elasticities ``d ln y / d ln p`` of every output of a CasADi function of part values.

    Parameters
    ----------
    function
        A ``casadi.Function`` whose inputs are scalars named after parts (the part's value
        in SI base units) and whose outputs are the quantities, named. An output with more
        than one element gives one quantity per element, ``name[i]`` (a column) or
        ``name[i,j]``. Any function CasADi can differentiate will do: a compiled
        state-space expression, a tuning limit's value at a design, ...
    values
        Part name -> value (SI base units) for every input of ``function``; the point at
        which the elasticities are taken.
    by_rows
        Build the Jacobian from one reverse-mode gradient per output element (still one
        evaluation). For a few quantities of a long computation (a tuning's limits over a
        stepped trajectory) its derivatives are several times quicker to generate than
        those CasADi's ``jacobian`` picks (forward mode, one direction per part).

    Returns
    -------
    dict
        Quantity name -> part name -> elasticity ``(p / y) dy/dp``, computed by CasADi's
        automatic differentiation (one Jacobian). ``None`` where the quantity is zero or
        not finite at ``values`` (the elasticity does not exist there).
    """
    import casadi

    names = list(function.name_in())
    missing = [name for name in names if name not in values]
    if missing:
        raise CompileError(
            "unknown_part",
            f"no value given for {', '.join(missing)} (the function's inputs are "
            f"{', '.join(names)})",
            location=("parts", missing[0]),
        )
    for index, name in enumerate(names):
        if function.sparsity_in(index).numel() != 1:
            raise CompileError(
                "invalid_field",
                f"input {name!r} of {function.name()!r} is not a scalar part value",
                location=("parts", name),
            )
    symbols = [casadi.MX.sym(name) for name in names]
    outputs = function(*symbols)
    if not isinstance(outputs, list | tuple):
        outputs = [outputs]
    labels: list[str] = []
    for index, out in enumerate(outputs):
        labels.extend(_element_labels(function.name_out(index), out.shape))
    stacked = casadi.vertcat(*[casadi.vec(out) for out in outputs])
    inputs = casadi.vertcat(*symbols)
    if by_rows:
        rows = [casadi.gradient(stacked[i], inputs).T for i in range(stacked.shape[0])]
        derivative = casadi.vertcat(*rows)
    else:
        derivative = casadi.jacobian(stacked, inputs)
    jacobian = casadi.Function("elasticity_jacobian", symbols, [stacked, derivative])
    point = [float(values[name]) for name in names]
    try:
        y, J = (np.array(m, dtype=float) for m in jacobian(*point))
    except RuntimeError:
        # CasADi stops when a linear solve meets a singular or non-finite matrix
        raise CompileError(
            "non_finite_result",
            "the derivatives cannot be evaluated at these part values (a linear solve met a "
            "singular matrix or numbers beyond double precision); check for part values "
            "that are zero or many decades from the others",
            location=("parts",),
        ) from None
    y = y.reshape(-1)
    J = J.reshape(len(y), len(names))
    result: dict[str, dict[str, float | None]] = {}
    for row, label in enumerate(labels):
        with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
            row_values = J[row] * np.asarray(point) / y[row]
        if y[row] == 0.0 or not np.all(np.isfinite(row_values)):
            # zero, or a derivative beyond double precision: no elasticity to give
            result[label] = dict.fromkeys(names)
            continue
        result[label] = {name: float(row_values[k]) for k, name in enumerate(names)}
    return result


def _element_labels(name: str, shape: tuple[int, int]) -> list[str]:
    rows, cols = shape
    if rows * cols == 1:
        return [name]
    if cols == 1:
        return [f"{name}[{i}]" for i in range(rows)]
    return [f"{name}[{i},{j}]" for j in range(cols) for i in range(rows)]  # column-major


# -- modes --------------------------------------------------------------------------------


@dataclass
class Mode:
    """One pole (one per conjugate pair) with its eigenvectors and name.

    Attributes
    ----------
    eigenvalue
        The pole (rad/s); for a pair, the one with positive imaginary part.
    right, left
        Right and left eigenvectors, scaled so that ``left^H right = 1``.
    participation
        Participation of each state, normalised to sum 1.
    name
        The dominant states joined by ``/`` (``"i_Lf/v_Cbus"``), made unique.
    repeated
        ``True`` when another pole lies within :data:`REPEATED_POLE_TOLERANCE`.
    at_origin
        ``True`` for a pole at ``s = 0`` (within the tolerance
        :func:`wirestate.lti.dc_gain_limit` uses, so both agree).
    """

    eigenvalue: complex
    right: np.ndarray
    left: np.ndarray
    participation: np.ndarray
    name: str = ""
    repeated: bool = False
    at_origin: bool = False

    @property
    def is_real(self) -> bool:
        return self.eigenvalue.imag == 0.0


def modes_of(A: np.ndarray, states: Sequence[str]) -> list[Mode]:
    """Poles of ``A`` with eigenvectors, participation factors and names, slowest first.

    One entry per real pole and per conjugate pair. Participation factors ``|w_k v_k|``
    (``w^H v = 1``), normalised to sum 1 (Perez-Arriaga, Verghese and Schweppe 1982). The
    name lists the states whose participation is at least :data:`DOMINANT_FRACTION` of the
    largest, at most :data:`NAMING_STATES`, most participating first; modes with the same
    name get ``#2``, ``#3`` in order of natural frequency.
    """
    A = np.asarray(A, dtype=float)
    if A.shape[0] == 0:
        return []
    # LAPACK's eigen-solver with left vectors returns wrong eigenvalues for a matrix whose
    # norm is near the overflow range (a 1e-300 F capacitor gave -1.5e138 for -1e297): scale
    # by a power of two (exact) to a norm near 1 first; eigenvectors do not change
    norm = float(np.abs(A).max())
    shift = 2.0 ** round(math.log2(norm)) if norm > 0 and math.isfinite(norm) else 1.0
    eigenvalues, left, right = scipy.linalg.eig(A / shift, left=True, right=True)
    eigenvalues = eigenvalues * shift
    scale = max(np.abs(eigenvalues).max(), np.finfo(float).tiny)
    # the threshold of lti.dc_gain_limit, on the same balanced matrix, so that a pole this
    # module calls "at the origin" is one that makes a DC gain a limit there
    balanced = scipy.linalg.matrix_balance(A, permute=False)[0]
    origin = ZERO_POLE_TOLERANCE * np.abs(balanced).sum(axis=0).max()
    if is_regular(A):
        # dc_gain_limit tests this first: a stiff block's slowest pole (aux_buck's v_Cout,
        # -1.2e3 /s beside a norm of 7e14 /s) is below the threshold but not at the origin
        origin = 0.0
    found: list[Mode] = []
    for j, lam in enumerate(eigenvalues):
        if lam.imag < 0:
            continue
        # a pair whose imaginary part is round-off of a real pole is the real pole (a few
        # machine epsilons of the largest pole; common practice, no source)
        if lam.imag <= 1e-14 * scale:
            lam = complex(lam.real, 0.0)
        v, w = right[:, j], left[:, j]
        if lam.imag == 0.0:
            v, w = v.real.astype(complex), w.real.astype(complex)
        w = w / np.conj(np.vdot(w, v))  # now w^H v = 1
        weight = np.abs(w * v)
        participation = weight / weight.sum()
        others = np.delete(eigenvalues, j)
        gap = np.abs(others - lam).min(initial=np.inf)
        repeated = bool(gap <= REPEATED_POLE_TOLERANCE * max(abs(lam), scale * 1e-12))
        at_origin = bool(abs(lam) <= origin)
        if at_origin:
            lam = 0j
            repeated = bool(np.sum(np.abs(eigenvalues) <= origin) > 1)
        found.append(
            Mode(complex(lam), v, w, participation, repeated=repeated, at_origin=at_origin)
        )
    found.sort(key=lambda m: (abs(m.eigenvalue), m.eigenvalue.imag))
    _name_modes(found, list(states))
    return found


def _name_modes(found: list[Mode], states: list[str]) -> None:
    counts: dict[str, int] = {}
    for mode in found:
        order = np.argsort(-mode.participation, kind="stable")
        top = mode.participation[order[0]]
        chosen = [
            states[k]
            for k in order[:NAMING_STATES]
            if mode.participation[k] >= DOMINANT_FRACTION * top
        ]
        base = "/".join(chosen)
        counts[base] = counts.get(base, 0) + 1
        mode.name = base if counts[base] == 1 else f"{base}#{counts[base]}"


def first_order_eigenvalue(A: Any, mode: Mode) -> tuple[Any, Any]:
    """Real and imaginary parts of ``w^H A v`` for a mode's fixed eigenvectors.

    ``A`` is a CasADi expression of part values whose value at the nominal point has this
    eigenvalue. The result equals the eigenvalue there, and its first derivatives are the
    eigenvalue's (``d lambda = w^H dA v`` with ``w^H v = 1``; Wilkinson 1965, ch. 2). Use it
    only for first derivatives at the nominal point, and only for a simple eigenvalue.
    """
    import casadi

    vr, vi = mode.right.real, mode.right.imag
    wr, wi = mode.left.real, mode.left.imag
    Avr, Avi = casadi.mtimes(A, casadi.DM(vr)), casadi.mtimes(A, casadi.DM(vi))
    # w^H A v = (wr - i wi)^T A (vr + i vi)
    real = casadi.dot(casadi.DM(wr), Avr) + casadi.dot(casadi.DM(wi), Avi)
    imag = casadi.dot(casadi.DM(wr), Avi) - casadi.dot(casadi.DM(wi), Avr)
    return real, imag


# -- the circuit's quantities -----------------------------------------------------------------


@dataclass
class Quantity:
    """One row of the sensitivity table.

    Attributes
    ----------
    name
        ``"natural frequency, mode i_Lf/v_Cbus"``, ``"damping ratio, mode ..."`` or
        ``"DC gain v_bus/Vbat"`` (output per input).
    kind
        ``"natural_frequency"``, ``"damping_ratio"`` or ``"dc_gain"``.
    value
        The quantity at the nominal part values (SI units).
    unit
        Its unit (``"rad/s"``, ``"1"``, ``"V/A"``...).
    elasticity
        Part name -> ``d ln y / d ln p``; ``None`` where it does not exist (see ``note``).
    note
        Why there is no number, or what a number means (empty when nothing to say).
    """

    name: str
    kind: str
    value: float
    unit: str
    elasticity: dict[str, float] | None
    note: str = ""


@dataclass
class Sensitivities:
    """Elasticities of a block's modes and DC gains to its part values."""

    block: str
    parts: list[str]
    values: dict[str, float]
    quantities: list[Quantity]
    notes: list[str] = field(default_factory=list)

    def to_dict(self) -> dict[str, dict[str, float]]:
        """Quantity name -> part name -> elasticity, for every quantity that has them."""
        return {q.name: dict(q.elasticity) for q in self.quantities if q.elasticity is not None}

    def quantity_notes(self) -> dict[str, str]:
        """Quantity name -> note, for the quantities that carry one."""
        return {q.name: q.note for q in self.quantities if q.note}

    def ranking(self) -> list[tuple[str, float, str]]:
        """``(part, largest |elasticity|, the quantity where it occurs)``, largest first."""
        best: dict[str, tuple[float, str]] = {part: (0.0, "") for part in self.parts}
        for q in self.quantities:
            for part, value in (q.elasticity or {}).items():
                if abs(value) > best[part][0]:
                    best[part] = (abs(value), q.name)
        ranked = [(part, size, where) for part, (size, where) in best.items()]
        ranked.sort(key=lambda row: -row[1])
        return ranked


def circuit_sensitivities(
    spec: CircuitSpec,
    *,
    parts: Sequence[str] | None = None,
    switched_mode: Mapping[str, bool] | None = None,
) -> Sensitivities:
    """Elasticities of every mode's natural frequency and damping ratio and of every DC
    gain of a circuit to its part values.

    Parameters
    ----------
    spec
        The validated circuit model; the elasticities are taken at its part values.
    parts
        The parts to differentiate by (default: every part with a value, see
        :func:`valued_parts`).
    switched_mode
        For a circuit with switches or diodes: device name -> conducting, for the mode to
        analyse (devices not named are off). By default the mode with every device off,
        the block :func:`wirestate.reduce.compile_circuit` gives.

    Returns
    -------
    Sensitivities
        One :class:`Quantity` per natural frequency and damping ratio (one per real pole
        and per conjugate pair, slowest first) and per DC gain (outputs by inputs).

    Notes
    -----
    See the module docstring for the methods: AD through the symbolic compile, the
    first-order eigenvalue perturbation (Wilkinson 1965), the derivative of the group
    inverse for DC gains of blocks with poles at the origin (Campbell and Meyer 1979),
    participation factors for mode names (Perez-Arriaga, Verghese and Schweppe 1982).
    """
    import casadi

    names = list(valued_parts(spec) if parts is None else parts)
    check_valued_parts(spec, names)
    values = {
        name: float(getattr(spec.parts[name], part_parameter(spec.parts[name].kind)))
        for name in names
    }
    symbols = {name: casadi.MX.sym(name) for name in names}
    block, symbolic, notes = _compile_both(spec, symbols, switched_mode)
    quantities: list[Quantity] = []
    expressions: dict[str, Any] = {}
    modes = modes_of(block.A, block.states)
    for mode in modes:
        quantities.extend(_mode_quantities(mode, symbolic.A, expressions, names))
    at_origin = sum(mode.at_origin for mode in modes)
    quantities.extend(_dc_gain_quantities(block, symbolic, expressions, at_origin))
    if expressions:
        function = casadi.Function(
            "sensitivity_quantities",
            list(symbols.values()),
            list(expressions.values()),
            names,
            list(expressions),
        )
        found = elasticities(function, values)
        for q in quantities:
            if q.name in expressions:
                q.elasticity = found[q.name]  # type: ignore[assignment]
    for q in quantities:
        if q.elasticity is not None and any(v is None for v in q.elasticity.values()):
            q.elasticity = None
            q.note = q.note or (
                "zero at these part values: its elasticity does not exist"
                if q.value == 0.0
                else "its derivative leaves the range of double precision at these part "
                "values (values many decades apart): no elasticity"
            )
    return Sensitivities(spec.name, names, values, quantities, notes)


def _check_size(block: CircuitBlock) -> None:
    if block.n_states > MAX_STATES:
        raise CompileError(
            "block_too_large",
            f"sensitivities of every mode are computed for blocks of up to {MAX_STATES} "
            f"states; this block has {block.n_states} (reduce it first, or compute "
            "elasticities of chosen quantities with wirestate.sensitivity.elasticities)",
            location=("circuit",),
        )


def _compile_both(
    spec: CircuitSpec, symbols: dict[str, Any], switched_mode: Mapping[str, bool] | None
) -> tuple[CircuitBlock, Any, list[str]]:
    """The numeric block and its symbolic twin (the same compile with CasADi values)."""
    from wirestate.switching import is_switched

    if not is_switched(spec):
        if switched_mode:
            raise CompileError(
                "unknown_part",
                f"switched_mode names {', '.join(switched_mode)}, but the circuit has no "
                "switch or diode",
                location=("parts", next(iter(switched_mode))),
            )
        block = compile_circuit(spec)
        _check_size(block)
        return block, symbolic_state_space(spec, symbols, linear_solver=LINEAR_SOLVER), []
    from wirestate.switching import SwitchedCircuit

    circuit = SwitchedCircuit(spec)
    devices = [d.name for d in circuit.devices]
    chosen = dict(switched_mode or {})
    unknown = [name for name in chosen if name not in devices]
    if unknown:
        raise CompileError(
            "unknown_part",
            f"{unknown[0]!r} is not a switch or diode (devices: {', '.join(devices)})",
            location=("parts", unknown[0]),
        )
    on = tuple(bool(chosen.get(name, False)) for name in devices)
    mode = circuit.mode(on)
    n_y, n_u = len(circuit.outputs), len(circuit.inputs)
    block = CircuitBlock(
        name=spec.name,
        A=mode.A,
        B=mode.B,
        C=mode.C,
        D=mode.D,
        states=circuit.states,
        inputs=circuit.inputs,
        outputs=circuit.outputs,
        units=circuit.units,
    )
    _check_size(block)
    full = circuit.symbolic_mode(on, symbols, linear_solver=LINEAR_SOLVER)
    full.B, full.C, full.D = full.B[:, :n_u], full.C[:n_y, :], full.D[:n_y, :n_u]
    note = f"switched circuit: the mode with {circuit.describe(on)}"
    return block, full, [note]


def _mode_quantities(
    mode: Mode, A: Any, expressions: dict[str, Any], names: list[str]
) -> list[Quantity]:
    import casadi

    lam = mode.eigenvalue
    wn_name = f"natural frequency, mode {mode.name}"
    zeta_name = f"damping ratio, mode {mode.name}"
    wn = abs(lam)
    zeta = -lam.real / wn if wn > 0 else math.nan
    if mode.at_origin:
        note = "pole at the origin: natural frequency 0 and no damping ratio, no elasticity"
        return [Quantity(wn_name, "natural_frequency", 0.0, "rad/s", None, note)]
    if mode.repeated:
        note = (
            "repeated pole (another pole within a relative 1e-6, as with two identical "
            "sections): an eigenvalue derivative does not exist there, so no elasticity"
        )
        return [
            Quantity(wn_name, "natural_frequency", wn, "rad/s", None, note),
            Quantity(zeta_name, "damping_ratio", zeta, "1", None, note),
        ]
    real, imag = first_order_eigenvalue(A, mode)
    magnitude = casadi.sqrt(real**2 + imag**2)
    expressions[wn_name] = magnitude
    out = [Quantity(wn_name, "natural_frequency", wn, "rad/s", None)]
    if mode.is_real:
        zero = dict.fromkeys(names, 0.0)
        note = (
            "real pole: natural frequency |p|, damping ratio "
            f"{'1' if zeta > 0 else '-1'} by definition, so its elasticity is 0"
        )
        out.append(Quantity(zeta_name, "damping_ratio", zeta, "1", zero, note))
    elif zeta == 0.0:
        note = "undamped pair: damping ratio 0, its elasticity does not exist"
        out.append(Quantity(zeta_name, "damping_ratio", 0.0, "1", None, note))
    else:
        expressions[zeta_name] = -real / magnitude
        out.append(Quantity(zeta_name, "damping_ratio", zeta, "1", None))
    return out


def _dc_gain_quantities(
    block: CircuitBlock, symbolic: Any, expressions: dict[str, Any], at_origin: int
) -> list[Quantity]:

    if not block.inputs or not block.outputs:
        return []
    A0, B0, C0, D0 = block.A, block.B, block.C, block.D
    limit = dc_gain_limit(A0, B0, C0, D0)
    gain, X0, why_none = _gain_expression(block.A, symbolic, at_origin)
    magnitude = np.abs(D0) + np.abs(C0) @ np.abs(X0) @ np.abs(B0)
    out = []
    for i, output in enumerate(block.outputs):
        for j, source in enumerate(block.inputs):
            name = f"DC gain {output}/{source}"
            unit = f"{block.units.get(output, '?')}/{block.units.get(source, '?')}"
            value = float(limit[i, j])
            if not math.isfinite(value):
                note = (
                    "unbounded: a pole at s = 0 that this input drives and this output sees "
                    "(no DC gain, so no elasticity)"
                )
                out.append(Quantity(name, "dc_gain", value, unit, None, note))
            elif abs(value) <= ZERO_GAIN_TOLERANCE * magnitude[i, j] or value == 0.0:
                note = "zero DC gain: its elasticity does not exist"
                out.append(Quantity(name, "dc_gain", 0.0, unit, None, note))
            elif gain is None:
                out.append(Quantity(name, "dc_gain", value, unit, None, why_none))
            else:
                expressions[name] = gain[i, j]
                out.append(Quantity(name, "dc_gain", value, unit, None))
    return out


def _gain_expression(A0: np.ndarray, symbolic: Any, at_origin: int) -> tuple[Any, np.ndarray, str]:
    """``D - C X B`` as a CasADi expression with the right value and first derivatives,
    the numeric ``X`` at the nominal point, and why there is no expression (if so)."""
    import casadi

    n = A0.shape[0]
    if n == 0:
        return symbolic.D, np.zeros((0, 0)), ""
    if at_origin == 0:
        solved = casadi.solve(symbolic.A, symbolic.B, LINEAR_SOLVER)
        return symbolic.D - casadi.mtimes(symbolic.C, solved), np.linalg.inv(A0), ""
    inverse = group_inverse(A0, at_origin)
    if inverse is None:
        why = (
            "poles at the origin in a chain (a capacitor or inductor integrating the output "
            "of another): the DC gain's derivative is not computed there"
        )
        return None, np.zeros_like(A0), why
    X0, P = inverse
    change = symbolic.A - casadi.DM(A0)
    # X + dX to first order, dX the derivative of the group inverse at constant rank
    # (Campbell and Meyer 1979, ch. 10); its value at the nominal point is X0
    X0_squared = casadi.DM(X0 @ X0)
    X = (
        casadi.DM(X0)
        - casadi.mtimes([casadi.DM(X0), change, casadi.DM(X0)])
        + casadi.mtimes([X0_squared, change, casadi.DM(P)])
        + casadi.mtimes([casadi.DM(P), change, X0_squared])
    )
    return symbolic.D - casadi.mtimes([symbolic.C, X, symbolic.B]), X0, ""


def group_inverse(A: np.ndarray, nullity: int) -> tuple[np.ndarray, np.ndarray] | None:
    """The group inverse ``A^#`` and the projector ``P = I - A A^#`` onto the null space.

    ``A^#`` exists when the zero eigenvalue is semisimple (index 1); then ``A + P`` is
    regular and ``A^# = (A + P)^-1 - P`` with ``P = V (W^T V)^-1 W^T`` from bases ``V``,
    ``W`` of the right and left null spaces (Campbell and Meyer 1979, ch. 7). ``None`` when
    the zero eigenvalue is not semisimple (``W^T V`` singular).

    Parameters
    ----------
    A
        Square matrix with ``nullity`` eigenvalues at the origin.
    nullity
        The number of eigenvalues at the origin.
    """
    n = A.shape[0]
    # a diagonal similarity (powers of 2, exact) evens out rows and columns first; the
    # group inverse is similarity-invariant
    balanced, (scale, _) = scipy.linalg.matrix_balance(A, permute=False, separate=True)
    U, _, Vt = np.linalg.svd(balanced)
    right, left = Vt[n - nullity :].T, U[:, n - nullity :]
    cross = left.T @ right
    if np.linalg.cond(cross) > 1e8:
        return None  # left and right null vectors (nearly) orthogonal: a Jordan chain
    P = right @ np.linalg.solve(cross, left.T)
    X = np.linalg.inv(balanced + P) - P
    residual = np.abs(balanced @ X @ balanced - balanced).max()
    if residual > 1e-8 * np.abs(balanced).max():
        return None
    T, T_inv = scale[:, None], 1.0 / scale[None, :]
    return T * X * T_inv, T * P * T_inv
