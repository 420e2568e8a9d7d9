"""One switching period's mode sequence as CasADi expressions of part values.

A switched converter in periodic steady state passes, every period ``T``, through a fixed
sequence of modes (see :mod:`wirestate.switching`): within mode ``k`` it is affine,
``dx/dt = A_k x + B_k u + f_k``. With the augmented state ``z = [x; 1]`` and
``Z_k = [[A_k, B_k u + f_k], [0, 0]]`` a mode of length ``tau_k`` maps ``z -> exp(Z_k tau_k) z``.
The period starts at a carrier start (the modulator turns the switch on), the switch turns
off at ``duty * T``, and the diodes change mode at *located* times: each is an unknown
``t_j`` with the equation "the diode's voltage reaches its forward voltage at ``t_j``"
(the same margin the switched engine's root finding uses). The steady state is the fixed
point of the period map, ``z_0 = [[Phi, gamma]] z_0``, so ``x_0 = (I - Phi)^-1 gamma``,
and a sampled PI with integral action driving the modulator holds its measurement on the
reference at every carrier start - one more equation, whose unknown is the duty.

Every matrix comes from :meth:`~wirestate.switching.SwitchedCircuit.symbolic_mode` (the one
stamping and elimination path), every exponential from
:func:`wirestate.tune.expm.expm_minus_identity` (squarings on ``exp(X) - I``).
Energies are exact integrals of quadratic forms of the state, ``int_0^tau z z^T dt``, by
Van Loan's block exponential ("Computing integrals involving the matrix exponential", IEEE
Trans. Automatic Control 23(3), 1978) on a step ``h = tau / 2^s`` small enough for the
Taylor series, then ``s`` doublings ``G(2h) = G(h) + E(h) G(h) E(h)^T`` (no exponential of
``+A`` over a long step, so stiff modes - a switch's milliohms across picofarads, rates
near -1e11 /s - stay finite).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from wirestate.spec.tuning import Limit
from wirestate.switching import SwitchedCircuit
from wirestate.tune.expm import THETA, expm_minus_identity, squarings_for_norm

__all__ = ["Boundary", "PeriodSequence", "SequenceModel", "build_sequence_model"]

#: stress samples per mode outside the limit windows
STRESS_SAMPLES = 24
#: room on a mode's matrix norm and on its length for the values the optimiser visits
NORM_ROOM = 1.5
DURATION_ROOM = 1.5
#: a mode ended by a located event may grow to this many times its length at the run
LOCATED_ROOM = 5.0


@dataclass(frozen=True)
class Boundary:
    """A mode change inside the period: ``part`` changes (``"on -> off"``); ``located``
    diode events have unknown times, the switch's turn-off sits at ``duty * T``."""

    part: str
    change: str
    located: bool
    time: float  # from the carrier start (s), at the simulation it was taken from


@dataclass(frozen=True)
class PeriodSequence:
    """Modes ``modes[0..K-1]`` of one period and the ``K - 1`` boundaries between them."""

    modes: tuple[tuple[bool, ...], ...]
    boundaries: tuple[Boundary, ...]
    period: float
    duty: float

    def signature(self) -> tuple:
        """What must stay the same for the sequence to count as settled."""
        return (self.modes, tuple((b.part, b.change, b.located) for b in self.boundaries))

    def describe(self, times: Any = None) -> str:
        """``"D1 off at 0.197 ns; Q1 off at 2607 ns; ..."`` (``times``: the boundaries'
        times to show, default those of the run)."""
        times = [b.time for b in self.boundaries] if times is None else list(times)
        return "; ".join(
            f"{b.part} {b.change.split(' -> ')[1]} at {t * 1e9:.4g} ns"
            for b, t in zip(self.boundaries, times, strict=True)
        )


@dataclass
class SequenceModel:
    """The CasADi function of one period's sequence and how to read it.

    ``function(values, duty, located) -> (equations, rows, quantities, boundary_states,
    times)``, ``stress_function(...) -> (stress, row_times)`` (samples x part currents and
    voltages; the time of each row from the carrier start, NaN for a row over the period):
    ``values`` the part values of :attr:`parts` (SI), ``duty`` the
    switch's on fraction, ``located`` the length of each mode that a located event ends,
    relative to its length in the run the sequence came from (1 there).
    ``rows`` stacks every limit's rows, ``row_slices[label]`` picks them, with
    ``row_bounds[label] = (lower, upper)`` arrays.
    """

    function: Any
    stress_function: Any
    parts: list[str]
    sequence: PeriodSequence
    located: list[int]  # boundary indices with an unknown time
    row_slices: dict[str, slice]
    row_bounds: dict[str, tuple[np.ndarray, np.ndarray]]
    quantity_names: list[str]
    stress_names: list[str]
    squarings: int
    n_states: int
    outputs: dict[str, int] = field(default_factory=dict)


def _probe_rows(circuit: SwitchedCircuit) -> dict[str, int]:
    """Output row of every name a limit may use in the symbolic mode's outputs: the file's
    outputs, ``i_``/``v_`` of each device, and the extra probes (``i_``/``v_`` of parts)."""
    rows = {name: k for k, name in enumerate(circuit.outputs)}
    n_y, n_d = len(circuit.outputs), len(circuit.devices)
    for k, d in enumerate(circuit.devices):
        rows.setdefault(f"i_{d.name}", n_y + k)
        rows.setdefault(f"v_{d.name}", n_y + n_d + k)
    for k, (what, part) in enumerate(circuit.extra_probes):
        rows.setdefault(("i_" if what == "current" else "v_") + part, n_y + 2 * n_d + k)
    return rows


class _Builder:
    """Builds the expressions of one :class:`SequenceModel` (see module docstring)."""

    def __init__(self, circuit, sequence, parts, u, nominal, measure, gain, reference):
        import casadi

        self.ca = casadi
        self.circuit = circuit
        self.seq = sequence
        self.T = sequence.period
        sx_values = casadi.SX.sym("values", len(parts))
        self.values = casadi.MX.sym("values", len(parts))
        self.duty = casadi.MX.sym("duty")
        self.located = [k for k, b in enumerate(sequence.boundaries) if b.located]
        self.theta = casadi.MX.sym("located", len(self.located))
        self.rows_of = _probe_rows(circuit)
        self.measure = (measure, gain, reference)
        variables = {p: sx_values[i] for i, p in enumerate(parts)}
        u1 = np.append(np.asarray(u, dtype=float), 1.0)
        self.modes = []
        self.squarings = 0
        for on in sequence.modes:
            ss = circuit.symbolic_mode(on, variables)
            n = ss.A.shape[0]
            Z = casadi.SX.zeros(n + 1, n + 1)
            Z[:n, :n] = ss.A
            Z[:n, n] = casadi.mtimes(ss.B, u1)
            rows = casadi.horzcat(ss.C, casadi.mtimes(ss.D, u1))
            # a mode's matrices are scalar expressions (SX, from the elimination), wrapped
            # in one function and called on MX: everything after - exponentials, doublings,
            # the steady state - is matrix operations on MX, a graph of ~6 000 nodes where
            # scalar SX made ~500 000 instructions; derivatives of it are generated in
            # 0.2 s instead of 5 s and evaluated faster
            mode = casadi.Function("mode", [sx_values], [Z, rows])
            self.modes.append(mode(self.values))
        self.n = self.modes[0][0].shape[0] - 1
        # squarings from the numeric matrices at the nominal values (a factor 4 of room
        # for the values the optimiser visits)
        numeric = casadi.Function("Z", [self.values], [m[0] for m in self.modes])
        self.norms = [NORM_ROOM * float(np.abs(np.array(Z)).sum(axis=0).max()) for Z in
                      numeric(np.asarray(nominal, dtype=float))]  # fmt: skip

    # -- times ------------------------------------------------------------------------------
    def boundary_times(self) -> list[Any]:
        """Start of every mode and the period end, as expressions (s)."""
        times = [0.0]
        nominal = _nominal_times(self.seq)
        for k, b in enumerate(self.seq.boundaries):
            if b.located:
                # located: the length of the mode it ends, relative to that at the run
                length = nominal[k + 1] - nominal[k]
                times.append(times[-1] + self.theta[self.located.index(k)] * length)
            else:
                times.append(self.duty * self.T)
        times.append(self.T)
        return times

    # -- one mode: flow and quadratic integral -----------------------------------------------
    def flow(self, k: int, tau: Any, z0: Any, bound: float) -> tuple[Any, Any]:
        """``(exp(Z tau) z0, int_0^tau z z^T dt)`` of mode ``k`` from ``z0``."""
        ca = self.ca
        Z = self.modes[k][0]
        m = self.n + 1
        scale = max(self.norms[k], 1.0 / self.T) * bound
        s = squarings_for_norm(scale, THETA)
        self.squarings = max(self.squarings, s)
        h = tau / 2.0**s
        block = ca.MX.zeros(2 * m, 2 * m)
        block[:m, :m] = -Z
        block[:m, m:] = ca.mtimes(z0, z0.T)
        block[m:, m:] = Z.T
        # E = I + W: the doublings square W (see expm_minus_identity), so the slow rates
        # keep their digits beside the stiff ones
        F = expm_minus_identity(block * h, 0)
        W = F[m:, m:].T
        identity = ca.DM.eye(m)
        G = ca.mtimes(identity + W, F[:m, m:])
        for _ in range(s):
            E = identity + W
            G = G + ca.mtimes([E, G, E.T])
            W = 2 * W + ca.mtimes(W, W)
        return z0 + ca.mtimes(W, z0), G

    def samples(self, k: int, z0: Any, length: Any, count: int, bound: float) -> list[Any]:
        """``count + 1`` states from ``z0`` evenly over ``length`` of mode ``k``."""
        ca = self.ca
        Z = self.modes[k][0]
        s = squarings_for_norm(max(self.norms[k], 1.0 / self.T) * bound / count, THETA)
        step = ca.DM.eye(self.n + 1) + expm_minus_identity(Z * (length / count), s)
        out = [z0]
        for _ in range(count):
            out.append(ca.mtimes(step, out[-1]))
        return out

    def row(self, k: int, name: str) -> Any:
        return self.modes[k][1][self.rows_of[name], :]


def build_sequence_model(
    circuit: SwitchedCircuit,
    sequence: PeriodSequence,
    parts: list[str],
    nominal: list[float],
    inputs: np.ndarray,
    limits: list[Limit],
    *,
    measure: str,
    gain: float,
    reference: float,
    energy_parts: list[str],
    stress_parts: list[str],
) -> SequenceModel:
    """Compile one period's mode sequence into a :class:`SequenceModel`.

    Parameters
    ----------
    circuit
        The switched circuit, with probes for every part whose current or voltage a limit,
        the objective or the stress report needs (``extra_probes``).
    sequence
        The modes and boundaries of one period (from a numeric switched run).
    parts, nominal
        The part values that are inputs of the function, and values at which the
        number of squarings is chosen.
    inputs
        The circuit's inputs (gates included; they do not enter a mode's equations).
    limits
        The switched limits (:data:`wirestate.spec.tuning.SWITCHED_LIMIT_KINDS`).
    measure, gain, reference
        The loop: ``gain * measure`` (a circuit output at the carrier start) equals
        ``reference`` in steady state.
    energy_parts
        Parts whose energy per period (``int v i dt``, absorbed) is a quantity.
    stress_parts
        Parts whose peak current and voltage are sampled for the stress report.
    """
    import casadi as ca

    b = _Builder(circuit, sequence, parts, inputs, nominal, measure, gain, reference)
    times = b.boundary_times()
    taus = [times[k + 1] - times[k] for k in range(len(sequence.modes))]
    nominal_times = _nominal_times(sequence)
    longest = [
        min(sequence.period,
            (LOCATED_ROOM if k < len(sequence.boundaries) and sequence.boundaries[k].located
             else DURATION_ROOM) * (nominal_times[k + 1] - nominal_times[k]))
        for k in range(len(taus))
    ]  # fmt: skip
    boundary_states, Gs = _steady_period(b, taus, longest)
    equations = _period_equations(b, circuit, sequence, boundary_states)

    def energy(part: str) -> Any:
        """The energy a part absorbs per period, ``int v i dt``, over every mode."""
        total = 0
        for k, G in enumerate(Gs):
            total = total + ca.mtimes([b.row(k, f"v_{part}"), G, b.row(k, f"i_{part}").T])
        return total

    quantity_names = [f"energy_{part}" for part in energy_parts]
    quantities = [energy(part) for part in energy_parts]
    rows, stress_samples = _limit_table(b, limits, times, boundary_states, energy)
    for k, tau in enumerate(taus):
        for z_k in b.samples(k, boundary_states[k], tau, STRESS_SAMPLES, longest[k])[1:-1]:
            stress_samples.append((k, z_k))
    stress_names = [f"{what}_{part}" for part in stress_parts for what in ("i", "v")]
    stress = [
        ca.vertcat(*[ca.mtimes(b.row(k, name), z_k) for k, z_k in stress_samples])
        for name in stress_names
    ]
    function, stress_function = _period_functions(
        b, equations, rows, quantities, boundary_states, times, stress
    )
    return SequenceModel(
        function=function,
        stress_function=stress_function,
        parts=list(parts),
        sequence=sequence,
        located=b.located,
        row_slices=rows["slices"],
        row_bounds=rows["bounds"],
        quantity_names=quantity_names,
        stress_names=stress_names,
        squarings=b.squarings,
        n_states=b.n,
        outputs=b.rows_of,
    )


def _steady_period(b: _Builder, taus: list[Any], longest: list[float]) -> tuple[list, list]:
    """The state at every mode boundary in periodic steady state (the fixed point of the
    period map) and each mode's energy Gramian there."""
    import casadi as ca

    n = b.n
    # the period map on symbols first, for the steady state
    z_sym = ca.MX.sym("z0", n + 1)
    z = z_sym
    Gs = []
    starts = [z_sym]
    for k, tau in enumerate(taus):
        z, G = b.flow(k, tau, z, longest[k])
        starts.append(z)
        Gs.append(G)
    # z_end is affine in z0: z_end = M z0 with M its Jacobian (exact, z_end is linear)
    # (on MX the Jacobian still refers to the symbol; any value gives the same M)
    M = ca.substitute(ca.jacobian(z, z_sym), z_sym, ca.MX(np.zeros(n + 1)))
    Phi, gamma = M[:n, :n], M[:n, n]
    x0 = ca.solve(ca.MX.eye(n) - Phi, gamma)
    z0 = ca.vertcat(x0, 1.0)
    return [ca.substitute(s, z_sym, z0) for s in starts], [ca.substitute(G, z_sym, z0) for G in Gs]


def _period_equations(b: _Builder, circuit, sequence, boundary_states) -> Any:
    """The located diode margins (zero at their events) and the loop condition."""
    import casadi as ca

    measure, gain, reference = b.measure
    equations = []
    for k in b.located:
        event = sequence.boundaries[k]
        device = circuit.devices[circuit.device_index(event.part)]
        v = ca.mtimes(b.row(k, f"v_{event.part}"), boundary_states[k + 1])
        equations.append((v - device.forward_voltage) / max(abs(reference), 1.0))
    y = ca.mtimes(b.row(0, measure), boundary_states[0])
    equations.append((gain * y - reference) / max(abs(reference), 1e-12))
    return ca.vertcat(*equations)


def _limit_table(b: _Builder, limits, times, boundary_states, energy) -> tuple[dict, list]:
    """Every limit's rows (``"rows"``, ``"slices"`` and ``"bounds"`` by label, ``"times"``)
    and the stress samples: every boundary state and every sample a limit reads."""
    table: dict[str, Any] = {"rows": [], "slices": {}, "bounds": {}, "times": []}
    modes = len(b.seq.modes)
    stress_samples: list[tuple[int, Any]] = [(k, boundary_states[k]) for k in range(modes)]
    stress_samples += [(k, boundary_states[k + 1]) for k in range(modes)]
    for limit in limits:
        expr, lower, upper, samples, when = _limit_rows(b, limit, times, boundary_states, energy)
        table["times"].append(when)
        start = sum(int(r.shape[0]) for r in table["rows"])
        table["rows"].append(expr)
        table["slices"][limit.label] = slice(start, start + int(expr.shape[0]))
        table["bounds"][limit.label] = (lower, upper)
        stress_samples.extend(samples)
    return table, stress_samples


def _period_functions(b: _Builder, equations, rows, quantities, states, times, stress):
    """The CasADi functions of one period: ``period`` (equations, rows, quantities, states,
    times) and ``stress`` (stress samples, row times: never differentiated)."""
    import casadi as ca

    def stacked(items: list[Any]) -> Any:
        return ca.vertcat(*items) if items else ca.MX.zeros(0, 1)

    inputs = [b.values, b.duty, b.theta]
    function = ca.Function(
        "period",
        inputs,
        [
            equations,
            stacked(rows["rows"]),
            stacked(quantities),
            ca.horzcat(*states),
            ca.vertcat(*[t if isinstance(t, ca.MX) else ca.MX(t) for t in times]),
        ],
        ["values", "duty", "located"],
        ["equations", "rows", "quantities", "states", "times"],
    )
    stress_function = ca.Function(
        "stress", inputs, [ca.horzcat(*stress) if stress else ca.MX.zeros(0, 1),
                           stacked(rows["times"])],
        ["values", "duty", "located"], ["stress", "row_times"],
    )  # fmt: skip
    return function, stress_function


def edge_boundary(sequence: PeriodSequence, limit: Limit) -> int:
    """Index into the mode starts (0 = carrier start) of the edge a limit's window follows."""
    if limit.edge == "turn_on":
        return 0
    for k, bd in enumerate(sequence.boundaries):
        if bd.part == limit.part and not bd.located and bd.change == "on -> off":
            return k + 1
    raise ValueError(f"no turn-off of {limit.part} in the period")


def _window(b: _Builder, limit: Limit, times, states) -> list[tuple[int, Any, Any]]:
    """``(mode, state, time)`` samples over ``within`` after the limit's edge."""
    seq = b.seq
    first = edge_boundary(seq, limit)
    nominal = _nominal_times(seq)
    start, end_nominal = nominal[first], nominal[first] + limit.within
    t_end = times[first] + limit.within
    out = []
    k = first
    while k < len(seq.modes) and nominal[k] < end_nominal:
        stop_nominal = min(nominal[k + 1], end_nominal)
        share = (stop_nominal - nominal[k]) / limit.within
        count = max(2, int(math.ceil(share * limit.points)))
        stop = times[k + 1] if nominal[k + 1] < end_nominal else t_end
        length = stop - times[k]
        zs = b.samples(k, states[k], length, count, limit.within)
        for j, z in enumerate(zs):
            if j == count and nominal[k + 1] < end_nominal:
                continue  # the next mode starts here
            out.append(
                (
                    k,
                    z,
                    times[k] + length * (j / count),
                    nominal[k] + (stop_nominal - nominal[k]) * j / count - start,
                )
            )
        k += 1
    return out


def _nominal_times(seq: PeriodSequence) -> list[float]:
    return [0.0, *(bd.time for bd in seq.boundaries), seq.period]


def _limit_rows(b: _Builder, limit: Limit, times, states, energy):
    """``(rows, lower, upper, stress samples, row times)`` of one switched limit (the
    times of window rows from the carrier start, s; NaN for a limit over the period)."""
    ca = b.ca
    inf = np.inf
    if limit.kind in ("peak_after_switching", "ring_settling"):
        window = _window(b, limit, times, states)
        values = [ca.mtimes(b.row(k, limit.output), z) for k, z, _, _ in window]
        samples = [(k, z) for k, z, _, _ in window]
        if limit.kind == "peak_after_switching":
            rows = ca.vertcat(*values)
            when = ca.vertcat(*[t for _, _, t, _ in window])
            return rows, np.full(len(values), -inf), np.full(len(values), limit.max), samples, when
        final = values[-1]
        kept = [(v - final, t) for (_, _, t, offset), v in zip(window, values, strict=True)
                if offset >= limit.by - 1e-15]  # fmt: skip
        rows = ca.vertcat(*[v for v, _ in kept])
        when = ca.vertcat(*[t for _, t in kept])
        low, high = np.full(len(kept), -limit.max), np.full(len(kept), limit.max)
        return rows, low, high, samples, when
    nan = ca.MX(np.nan)
    if limit.kind == "energy_per_period":
        return energy(limit.part), np.array([-inf]), np.array([limit.max]), [], nan
    if limit.kind == "average_power":
        return energy(limit.part) / b.T, np.array([-inf]), np.array([limit.max]), [], nan
    if limit.kind == "efficiency":
        supplied = -energy(limit.input)
        delivered = sum(energy(part) for part in limit.loads)
        return delivered / supplied, np.array([limit.min]), np.array([inf]), [], nan
    raise ValueError(f"not a switched limit kind: {limit.kind}")
