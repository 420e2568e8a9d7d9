"""The tuning case compiled once into one CasADi function of part values.

:class:`ParametricLoop` takes the circuit's matrices from
:class:`wirestate.parametric.ParametricCircuit` (topology, state choice, stamps and
elimination fixed once), closes the case's loop around them with the algebra of
:mod:`wirestate.tune.closed_loop`, discretises it by the Taylor exponential of
:mod:`wirestate.tune.expm` (squarings chosen over the whole box of part values the run
may visit) and wraps everything the limits need -- the loop over one sample, the output
maps between samples, the continuous loop, the initial state, the steady outputs and the
energy forms -- as SX expressions in one function. That function is

* evaluated numerically for many rows of part values at once (:meth:`evaluate`:
  ``Function.map``, then every trajectory stepped together), which is how the exchange,
  snapping, tolerance corners, Monte Carlo yield and sweeps evaluate, and
* called on CasADi symbols by the NLP (:meth:`symbolic`), so its derivatives are
  generated once and reused by every problem of the run.
"""

from __future__ import annotations

import itertools
import math
from typing import TYPE_CHECKING, Any

import numpy as np

from wirestate.parametric import ParametricCircuit, batch_call
from wirestate.spec.circuit import part_parameter
from wirestate.tune import expm as cexpm
from wirestate.tune.closed_loop import held_pair, loop_matrices
from wirestate.tune.evaluation import (
    Evaluation,
    _part_row,
    energy_gramian,
    energy_parts,
    held_quadratic,
    initial_and_steady,
    outputs_between,
    step_batch,
)
from wirestate.tune.exponential import held_exponential

if TYPE_CHECKING:
    from wirestate.tune.problem import Problem


def default_box(problem: Problem, parameters: list[str]) -> dict[str, tuple[float, float]]:
    """Values each parameter may take in a tuning run: a design variable its bounds, a
    toleranced part its nominal value, each widened by the part's tolerance (corners)."""
    parts = problem.base_circuit.parts
    box = {}
    for name in parameters:
        tol = float(getattr(parts[name], "tolerance", None) or 0.0)
        low, high = problem.bounds.get(name, (problem.nominal[name], problem.nominal[name]))
        box[name] = (low * (1.0 - tol), high * (1.0 + tol))
    return box


def box_points(box: dict[str, tuple[float, float]]) -> np.ndarray:
    """Points of the box at which the exponential's argument is bounded: every vertex (up
    to 8 free parameters), otherwise 256 log-uniform random points (fixed seed); rows x
    parameters in the order of ``box``."""
    names = list(box)
    free = [n for n in names if box[n][0] != box[n][1]]
    if len(free) <= 8:
        vertices = [
            dict(zip(free, c, strict=True)) for c in itertools.product(*[box[n] for n in free])
        ]
        return np.array([[v.get(n, box[n][0]) for n in names] for v in vertices])
    rng = np.random.default_rng(0)
    logs = [rng.uniform(math.log(lo), math.log(hi), 256) for lo, hi in box.values()]
    return np.exp(np.column_stack(logs))


def _norms(A: Any, B: Any, h: float) -> Any:
    """``(||M h||_1, ||M h||_inf)`` of ``M = [[A, B], [0, 0]]`` (CasADi)."""
    import casadi

    M = casadi.fabs(casadi.horzcat(A, B)) * h
    one = casadi.mmax(casadi.sum1(M))
    infinity = casadi.mmax(casadi.sum2(M))
    return casadi.vertcat(one, infinity)


def part_nominal_value(problem: Problem, name: str) -> float:
    """A parameter's nominal value: a resistor's, capacitor's or inductor's from
    ``problem.nominal``, any other part's primary value (a gain, a coupling) from the file."""
    if name in problem.nominal:
        return problem.nominal[name]
    part = problem.circuit.parts[name]
    return float(getattr(part, part_parameter(part.kind)))


#: largest ``states + inputs`` of the circuit whose loop is built as SX (else as MX)
SX_SIZE = 16


class ParametricLoop:
    """One tuning case as a function of the values of ``parameters``; see the module
    docstring.

    Parameters
    ----------
    problem
        The validated case.
    parameters
        Parts whose values are inputs of the function (in this order); every other part
        keeps its nominal value.
    box
        ``part -> (low, high)``: the values the function will be evaluated at; the number
        of squarings makes the exponential accurate over this whole box.
    """

    def __init__(
        self, problem: Problem, parameters: list[str], box: dict[str, tuple[float, float]]
    ) -> None:
        self.problem = problem
        self.parameters = list(parameters)
        self.box = {n: (float(box[n][0]), float(box[n][1])) for n in self.parameters}
        self.nominal_row = np.array(
            [part_nominal_value(problem, n) for n in self.parameters], dtype=float
        )
        self.energy_parts = energy_parts(problem)
        self._functions: dict[str, Any] | None = None
        #: times this copy built its CasADi functions (a pickled copy starts again at 0)
        self.builds = 0

    # pickled for worker processes without the CasADi functions: each builds them once
    def __getstate__(self) -> dict[str, Any]:
        state = dict(self.__dict__)
        state["_functions"] = None
        state["builds"] = 0
        return state

    # -- building -------------------------------------------------------------------------

    @property
    def function(self) -> Any:
        """The CasADi function ``p -> loop matrices`` (outputs named, see :attr:`keys`)."""
        return self._compiled()["loop"]

    @property
    def keys(self) -> list[str]:
        return self._compiled()["keys"]

    @property
    def squarings(self) -> int:
        """Squarings of the zero-order hold's Taylor exponential."""
        return self._compiled()["squarings"]

    @property
    def truncation_bound(self) -> float:
        return cexpm.truncation_bound(self.squarings)

    def compile(self) -> ParametricLoop:
        """Build the CasADi functions now (they are otherwise built on first use)."""
        self._compiled()
        return self

    def _compiled(self) -> dict[str, Any]:
        if self._functions is None:
            self._functions = self._build()
            self.builds += 1
        return self._functions

    def _build(self) -> dict[str, Any]:
        import casadi

        problem = self.problem
        # the box also bounds where the replayed elimination's pivots must hold
        circuit = ParametricCircuit(problem.circuit, self.parameters, self.box)
        # small loops as SX (scalar graphs, the fastest to evaluate); large ones as MX,
        # whose matrix products stay single nodes (an SX exponential of a 24-state loop
        # has 170 000 scalar operations and its derivatives are slow to generate)
        size = circuit.block.A.shape[0] + circuit.block.B.shape[1]
        kind = casadi.SX if size <= SX_SIZE else casadi.MX
        p = kind.sym("p", len(self.parameters))
        A1, B1, C1, D1 = circuit.function(p)
        h = problem.output_step
        # the hold's argument [[A, B], [0, 0]] h over the box: one vectorised evaluation
        A, B = held_pair(problem, A1, B1, C1, D1)
        norm_fn = casadi.Function("step_norms", [p], [_norms(A, B, h)])
        points = np.vstack([self.nominal_row, box_points(self.box)])
        norms = np.array(norm_fn.map(points.shape[0])(points.T))
        norms = norms[:, np.all(np.isfinite(norms), axis=0)]
        one, infinity = (float(np.max(r, initial=0.0)) for r in norms)
        # doubled to cover the points between those evaluated; the energy forms use a
        # block [[-M^T, Q], [0, M]] whose 1-norm is bounded by both norms of M plus Q's
        squarings = cexpm.squarings_for_norm(2.0 * one)
        gramian_squarings = cexpm.squarings_for_norm(
            2.0 * max(one, infinity) + 2.0 * h * A.shape[0]
        )

        # large loops take the exponential as one function with its derivatives in numpy,
        # every direction at once (kept here: CasADi holds no reference to a callback)
        callbacks: dict[tuple[int, int], Any] = {}

        def exponential(s: int) -> Any:
            if kind is not casadi.MX:
                return lambda X: cexpm.expm(X, s)

            def held(X: Any) -> Any:
                key = (X.shape[0], s)
                if key not in callbacks:
                    callbacks[key] = held_exponential(*key)
                return callbacks[key](X)

            return held

        def zoh(A: Any, B: Any) -> tuple[Any, Any]:
            return cexpm.zoh(A, B, h, squarings, exponential=exponential(squarings))

        m = loop_matrices(problem, A1, B1, C1, D1, zoh)
        x0, steady = initial_and_steady(problem, m["Phi"], m["Gamma"], m["maps"])
        named = {"Phi": m["Phi"], "Gamma": m["Gamma"]}
        for j, (Cj, Dj) in enumerate(m["maps"]):
            named[f"C_{j}"], named[f"D_{j}"] = Cj, Dj
        named.update(A=m["A"], B=m["B"], Cc=m["Cc"], Dc=m["Dc"], x0=x0, steady=steady)
        keys = list(named)
        function = casadi.Function("tuning_loop", [p], [kind(named[k]) for k in keys], ["p"], keys)
        energies = self._energies(m, p, h, exponential(gramian_squarings))
        energy = None
        if energies:
            energy = casadi.Function("tuning_energy", [p], list(energies.values()), ["p"],
                                     list(energies))  # fmt: skip
        return {
            "loop": function, "keys": keys, "squarings": squarings, "circuit": circuit,
            "energy": energy, "callbacks": callbacks,
        }  # fmt: skip

    def _energies(self, m: dict, p: Any, h: float, exponential: Any) -> dict[str, Any]:
        """``energy_<part>``: the quadratic form of :func:`held_quadratic` per resistor."""
        import casadi

        from wirestate.tune.problem import CURRENT_PREFIX

        if not self.energy_parts:
            return {}
        Ap, Bp, Cp, Dp = m["part"]
        kind = type(p)
        held = [(kind(z), kind(w)) for z, w in m["held"]]
        out = {}
        nominal = casadi.Function("part_rows", [p], [casadi.horzcat(Cp, Dp)])(self.nominal_row)
        rows = np.array(nominal)
        for part in self.energy_parts:
            row = _part_row(m["part_outputs"], CURRENT_PREFIX + part)
            q = casadi.horzcat(Cp[row, :], Dp[row, :]).T
            # q is scaled to unit size at the nominal values, so that the Gramian block
            # of the exponential is no larger than the hold's (its squarings suffice)
            scale = float(np.linalg.norm(rows[row])) or 1.0
            W = energy_gramian(Ap, Bp, q / scale, h, exponential)
            out[f"energy_{part}"] = held_quadratic(W, held) * scale**2
        return out

    def states(self, V: np.ndarray, columns: Any = None) -> Any:
        """The CasADi function ``(Phi, Gamma, x0) -> X[:, columns]`` of
        :func:`~wirestate.tune.recursion.state_samples`, kept by this loop (CasADi holds no
        reference to a Python callback, so the loop keeps each one for the run)."""
        from wirestate.tune.recursion import state_samples

        V = np.asarray(V, dtype=float)
        columns = np.arange(V.shape[1]) if columns is None else np.asarray(columns, dtype=int)
        cache = self._compiled().setdefault("states", {})
        key = (V.shape, V.tobytes(), columns.tobytes())
        if key not in cache:
            cache[key] = state_samples(self.function.size1_out(0), V, columns)
        return cache[key]

    def pole_rows(self, limit: Any, vector: Any, rho: float) -> Any:
        """The Routh-Hurwitz rows of a pole limit
        (:func:`wirestate.tune.limits.routh_rows`, time scale ``rho``) at the part values
        ``vector``, through one SX function per limit and run."""
        import casadi

        from wirestate.tune.limits import routh_rows

        cache = self._compiled().setdefault("poles", {})
        key = (limit.kind, limit.min, limit.max)
        if key not in cache:
            kind = casadi.MX if self.function.is_a("MXFunction") else casadi.SX
            p = kind.sym("p", len(self.parameters))
            scale = kind.sym("rho")
            out = dict(zip(self.keys, self.function(p), strict=True))
            ev = Evaluation(out["Phi"], None, None, None, out["A"], None, None, None, {}, True)
            rows = routh_rows(limit, ev, self.problem, scale)
            cache[key] = casadi.Function("pole_rows", [p, scale], [rows])
        return cache[key](vector, rho)

    # -- evaluating -----------------------------------------------------------------------

    def rows(self, points: list[dict[str, float]]) -> np.ndarray:
        """Rows x parameters from part-value mappings (missing parts: nominal)."""
        out = np.tile(self.nominal_row, (len(points), 1))
        for i, point in enumerate(points):
            for j, name in enumerate(self.parameters):
                if name in point:
                    out[i, j] = float(point[name])
        return out

    def evaluate(self, rows: np.ndarray) -> Evaluation:
        """The case at every row of ``rows`` (rows x :attr:`parameters`, SI units), as a
        numeric batch; rows where the circuit has no solution hold NaN."""
        rows = np.atleast_2d(np.asarray(rows, dtype=float))
        out = batch_call(self.function, rows, self.keys)
        energy = self._compiled()["energy"]
        if energy is not None:
            out.update(batch_call(energy, rows, [f"energy_{p}" for p in self.energy_parts]))
        problem = self.problem
        V = problem.schedule.inputs
        m = problem.substeps
        maps = [(out[f"C_{j}"], out[f"D_{j}"]) for j in range(m)]
        X = step_batch(out["Phi"], out["Gamma"], out["x0"][:, :, 0], V)
        with np.errstate(over="ignore", invalid="ignore"):
            Y = outputs_between(maps, X, V)
        values = {n: np.full(rows.shape[0], v) for n, v in problem.nominal.items()}
        values.update({n: rows[:, j] for j, n in enumerate(self.parameters)})
        columns = problem.schedule.steady_columns
        extra = {
            "Cc": out["Cc"], "Dc": out["Dc"], "x0": out["x0"][:, :, 0], "maps": maps,
            "steady": {k: out["steady"][:, :, i] for i, k in enumerate(columns)},
            "energy": {p: out[f"energy_{p}"] for p in self.energy_parts},
        }  # fmt: skip
        return Evaluation(
            out["Phi"], out["Gamma"], out["C_0"], out["D_0"], out["A"], out["B"], X, Y,
            values, False, extra, V, m,
        )  # fmt: skip

    def symbolic(
        self,
        values: dict[str, Any],
        *,
        X: Any = None,
        horizon: int | None = None,
        deferred: bool = False,
    ) -> Evaluation:
        """The case with part values as CasADi expressions (missing parts: nominal).

        ``X`` gives the states (multiple shooting); otherwise they are eliminated (the
        states of :meth:`states`, as in condensing the QPs of multiple shooting: Bock and
        Plitt, IFAC 1984) up to sample ``horizon``.
        ``deferred=True`` leaves them as a placeholder symbol (``extra["deferred"]``) for
        :func:`resolve_states` to replace, once the rows are built, by the samples the rows
        use only.
        """
        import casadi

        vector = casadi.vertcat(
            *[
                values.get(n, float(v))
                for n, v in zip(self.parameters, self.nominal_row, strict=True)
            ]
        )
        compiled = self._compiled()
        out = dict(zip(self.keys, self.function(vector), strict=True))
        problem = self.problem
        V = problem.schedule.inputs
        pending = None
        steps = V.shape[1] - 1 if horizon is None else int(horizon)
        if X is None and deferred:
            X = casadi.MX.sym("X_deferred", out["Phi"].shape[0], steps + 1)
            pending = (self, X, out["Phi"], out["Gamma"], out["x0"], V[:, : steps + 1])
        elif X is None:
            X = self.states(V[:, : steps + 1])(out["Phi"], out["Gamma"], out["x0"])
        columns = problem.schedule.steady_columns
        maps = [(out[f"C_{j}"], out[f"D_{j}"]) for j in range(problem.substeps)]
        extra = {
            "Cc": out["Cc"], "Dc": out["Dc"], "x0": out["x0"], "maps": maps,
            "steady": {k: out["steady"][:, i] for i, k in enumerate(columns)},
            "energy": _Energies(compiled["energy"], vector, self.energy_parts),
            "loop": self, "p": vector, "deferred": pending,
        }  # fmt: skip
        all_values = {**problem.nominal, **values}
        return Evaluation(
            out["Phi"], out["Gamma"], out["C_0"], out["D_0"], out["A"], out["B"], X, None,
            all_values, True, extra, V, problem.substeps,
        )  # fmt: skip


class _Energies(dict):
    """The energy forms of a symbolic evaluation, each built on first use (the Gramian
    exponentials are the largest part of the compiled loop)."""

    def __init__(self, function: Any, vector: Any, parts: list[str]) -> None:
        super().__init__()
        self._function, self._vector, self._parts = function, vector, parts

    def __missing__(self, part: str) -> Any:
        outputs = self._function(self._vector)
        outputs = outputs if isinstance(outputs, list | tuple) else [outputs]
        self.update(zip(self._parts, outputs, strict=True))
        return dict.__getitem__(self, part)


def resolve_states(expressions: list[Any], evaluations: list[Evaluation]) -> list[Any]:
    """``expressions`` with the deferred states of ``evaluations`` (see
    :meth:`ParametricLoop.symbolic`) replaced by the samples they use, stepped by
    :meth:`ParametricLoop.states` (the rest are structural zeros, never read)."""
    import casadi

    pending = [ev.extra["deferred"] for ev in evaluations if ev.extra.get("deferred")]
    if not pending:
        return expressions
    every = casadi.vertcat(*[casadi.vec(e) for e in expressions])
    symbols, definitions = [], []
    for loop, Xs, Phi, Gamma, x0, V in pending:
        n = Xs.shape[0]
        pattern = casadi.jacobian_sparsity(every, casadi.vec(Xs))
        used = np.unique(np.asarray(pattern.get_col(), dtype=int) // n)
        full = casadi.MX(n, Xs.shape[1])
        if used.size:
            full[:, used.tolist()] = loop.states(V, used)(Phi, Gamma, x0)
        symbols.append(Xs)
        definitions.append(full)
    # graph_substitute keeps the nodes of the expressions (substitute copies them, and the
    # loop function, called once for the rows and once for the states, ran twice)
    return casadi.graph_substitute(expressions, symbols, definitions)
