"""The nonlinear program for IPOPT: stage 3 of the chain.

Input: a :class:`~wirestate.tune.problem.Problem` and an :class:`ActiveSet` (the points --
nominal values and tolerance corners -- and, per point and limit, the rows imposed).
Output: a :class:`Formulation`, the CasADi NLP with its bounds and starting point.

Two formulations of the same problem:

* **condensed** (used when the loop is stable at the starting point): the only unknowns
  are the design variables; the trajectory ``x[k+1] = Phi(p) x[k] + Gamma(p) v[k]`` is an
  expression of them (the states eliminated, as in condensing the QPs of multiple
  shooting: Bock and Plitt 1984, below), computed only up to the last sample a row of
  that point needs;
* **multiple shooting** (Bock and Plitt, "A multiple shooting algorithm for direct
  solution of optimal control problems", IFAC 1984): the state at every sample is an
  unknown, divided by its largest magnitude along the starting trajectory, and the
  dynamics are equality constraints (defects); an energy limit gets a running-energy state
  so that no constraint row sums over the whole horizon.

Both use design variables on a logarithmic scale, ``value = lo * (hi / lo) ** q`` with
``q in [0, 1]``; one epigraph variable when the peak output impedance is minimised; each
imposed row divided by the size of its bound; a two-sided band as one row with two bounds.
Every point's matrices come from one call of the compiled parametric loop
(:class:`~wirestate.tune.parametric.ParametricLoop`), so the derivative functions CasADi
generates for it are built once and reused by every NLP of the run.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np

from wirestate.tune import limits as measures
from wirestate.tune.evaluation import Evaluation
from wirestate.tune.objective import objective_terms
from wirestate.tune.parametric import resolve_states

if TYPE_CHECKING:
    from wirestate.tune.problem import Problem

FORMULATIONS = ("auto", "condensed", "multiple_shooting")


@dataclass
class ActiveSet:
    """What the NLP imposes: ``points`` (corner factor mappings, ``{}`` = nominal values,
    always first) and ``rows[(point, limit)]``: the row positions of that limit imposed at
    that point (``None``: every row; absent: the limit is not imposed there)."""

    points: list[dict[str, float]]
    rows: dict[tuple[int, int], np.ndarray | None] = field(default_factory=dict)

    def count(self) -> int:
        """Pairs (point, limit) imposed."""
        return len(self.rows)


@dataclass
class Formulation:
    """A CasADi NLP ready for ``nlpsol`` (``nlp``: ``x``, ``f``, ``g``) with its bounds."""

    nlp: dict[str, Any]
    x0: np.ndarray
    lbx: np.ndarray
    ubx: np.ndarray
    lbg: np.ndarray
    ubg: np.ndarray
    kind: str
    variables: list[str]
    bounds: dict[str, tuple[float, float]]
    #: per constraint row, ``(point factors, limit index, row)`` for a limit's row (the same
    #: key in the next round's NLP), ``None`` for other rows
    keys: list[Any] = field(default_factory=list)

    @property
    def unknowns(self) -> int:
        return int(self.nlp["x"].numel())

    @property
    def constraints(self) -> int:
        return int(self.nlp["g"].numel())

    def values(self, x: np.ndarray) -> dict[str, float]:
        """Design-variable values from a solution vector (clipped into the box)."""
        return values_of(self.variables, self.bounds, np.asarray(x).ravel()[: len(self.variables)])


def scaled(variables: list[str], bounds: dict, point: dict[str, float]) -> np.ndarray:
    """``q`` in [0, 1] of each variable's value on its logarithmic scale."""
    return np.array(
        [
            math.log(point[n] / bounds[n][0]) / math.log(bounds[n][1] / bounds[n][0])
            for n in variables
        ]
    )


def values_of(variables: list[str], bounds: dict, q: np.ndarray) -> dict[str, float]:
    """Values of the design variables at scaled ``q`` (clipped into [0, 1])."""
    return {
        n: float(bounds[n][0] * (bounds[n][1] / bounds[n][0]) ** min(max(q[i], 0.0), 1.0))
        for i, n in enumerate(variables)
    }


class _Builder:
    """Collects decision variables and constraint rows."""

    def __init__(self) -> None:
        self.g: list[Any] = []
        self.keys: list[Any] = []
        self.lbg: list[float] = []
        self.ubg: list[float] = []
        self.x: list[Any] = []
        self.x0: list[np.ndarray] = []
        self.lbx: list[np.ndarray] = []
        self.ubx: list[np.ndarray] = []

    def add(self, expr: Any, lower: float, upper: float, keys: list | None = None) -> None:
        """Rows ``lower <= expr <= upper``; ``keys`` name them across rounds (warm starts)."""
        import casadi

        expr = casadi.vec(expr)
        self.g.append(expr)
        self.lbg.extend([lower] * expr.numel())
        self.ubg.extend([upper] * expr.numel())
        self.keys.extend(keys if keys is not None else [None] * expr.numel())

    def unknown(self, symbol: Any, start: np.ndarray, low: float, high: float) -> None:
        import casadi

        self.x.append(casadi.vec(symbol))
        self.x0.append(np.asarray(start, dtype=float).ravel())
        size = int(symbol.numel())
        self.lbx.append(np.full(size, low))
        self.ubx.append(np.full(size, high))


def formulate(
    problem: Problem,
    active: ActiveSet,
    start: Evaluation,
    guess: dict[str, float],
    guesses: Evaluation,
    *,
    kind: str,
) -> Formulation:
    """Build the NLP of ``problem`` imposing ``active``; see the module docstring.

    ``start`` is the numeric evaluation at the nominal starting values (it defines the
    limits' step directions and scalings and normalises the objective); ``guess`` the
    design variables to start from and ``guesses`` the numeric evaluation of every active
    point there (initial states of multiple shooting). ``kind`` is ``"condensed"`` or
    ``"multiple_shooting"``.
    """
    import casadi

    names = problem.variables
    bounds = problem.bounds
    loop = problem.parametric()
    builder = _Builder()
    q = casadi.MX.sym("q", len(names))
    builder.unknown(q, scaled(names, bounds, guess), 0.0, 1.0)
    values = {n: bounds[n][0] * (bounds[n][1] / bounds[n][0]) ** q[i] for i, n in enumerate(names)}
    nominal_ev = None
    evaluations: list[Evaluation] = []
    for index, factors in enumerate(active.points):
        point_values = problem.corner_values(values, factors)
        limits = {j: pos for (p, j), pos in active.rows.items() if p == index}
        guess_ev = None
        if kind == "condensed":
            horizon = _horizon(problem, limits, index == 0)
            ev = loop.symbolic(point_values, horizon=horizon, deferred=True)
        else:
            guess_ev = guesses.row(index)
            ev = _shooting(problem, loop, point_values, guess_ev, builder, index)
        if index == 0:
            nominal_ev = ev
        evaluations.append(ev)
        point = tuple(sorted(factors.items()))
        for j, positions in sorted(limits.items()):
            _impose(problem, (point, j), ev, start, positions, kind, builder, guess_ev)
    f = _objective(problem, nominal_ev, start, builder)
    f, g = resolve_states([f, casadi.vertcat(*builder.g)], evaluations)
    return Formulation(
        nlp={"x": casadi.vertcat(*builder.x), "f": f, "g": g},
        x0=np.concatenate(builder.x0),
        lbx=np.concatenate(builder.lbx),
        ubx=np.concatenate(builder.ubx),
        lbg=np.array(builder.lbg),
        ubg=np.array(builder.ubg),
        kind=kind,
        variables=list(names),
        bounds=dict(bounds),
        keys=builder.keys,
    )


def _horizon(problem: Problem, limits: dict[int, Any], nominal: bool) -> int:
    """The last sample a condensed point needs: the latest row imposed there, or the whole
    horizon where a limit or the objective sums over it."""
    last = 0
    whole = problem.n_steps
    if nominal and _objective_needs_trajectory(problem):
        return whole
    for j, positions in limits.items():
        limit = problem.spec.limits[j]
        samples = measures.limit_samples(limit, problem)
        if limit.kind == "energy":
            return whole
        if samples is None:
            continue
        chosen = samples if positions is None else samples[np.asarray(positions, dtype=int)]
        if len(chosen):
            last = max(last, -(-int(np.max(chosen)) // problem.substeps))
    return min(last, whole)


def _objective_needs_trajectory(problem: Problem) -> bool:
    objective = problem.spec.objective
    return bool(objective.resistor_energy or objective.ise)


def _shooting(problem, loop, values, guess_ev, builder, index) -> Evaluation:
    """A multiple-shooting point: its scaled states as unknowns, the defects as rows."""
    import casadi

    n_x, samples = len(problem.states), problem.n_steps + 1
    scale = np.max(np.abs(guess_ev.X), axis=1)
    scale = np.where(scale > 1e-9 * max(scale.max(), 1e-300), scale, max(scale.max(), 1.0))
    Xs = casadi.MX.sym(f"X{index}", n_x, samples)
    X = casadi.mtimes(casadi.diag(casadi.DM(scale)), Xs)
    ev = loop.symbolic(values, X=X)
    V = casadi.DM(problem.schedule.inputs)
    inv_scale = casadi.diag(casadi.DM(1.0 / scale))
    defects = X[:, 1:] - casadi.mtimes(ev.Phi, X[:, :-1]) - casadi.mtimes(ev.Gamma, V[:, :-1])
    builder.add(casadi.mtimes(inv_scale, defects), 0.0, 0.0)
    builder.add(casadi.mtimes(inv_scale, X[:, 0] - ev.extra["x0"]), 0.0, 0.0)
    builder.unknown(Xs, (guess_ev.X / scale[:, None]).ravel(order="F"), -np.inf, np.inf)
    return ev


def _impose(problem, key, ev, start, positions, kind, builder, guess_ev) -> None:
    """Impose one limit at one point (the rows at ``positions``); ``key`` is (point, limit
    index)."""
    import casadi

    limit = problem.spec.limits[key[1]]
    if limit.kind in measures.POLE_KINDS:
        # Routh-Hurwitz entries of a normalised polynomial: order one, strictly negative
        ((entries, _, _),) = measures.ranges(limit, problem, ev, start)
        builder.add(entries, -casadi.inf, -1e-9, [(*key, i) for i in range(entries.numel())])
        return
    if limit.kind == "energy" and kind == "multiple_shooting":
        _running_energy(problem, limit, ev, builder, guess_ev)
        return
    bound = bound_size(limit)
    for expr, lower, upper in measures.ranges(limit, problem, ev, start, positions):
        count = int(expr.numel())
        rows = range(count) if positions is None else [int(p) for p in positions]
        builder.add(
            expr / bound,
            -casadi.inf if lower is None else lower / bound,
            casadi.inf if upper is None else upper / bound,
            [(*key, r) for r in rows],
        )


def _running_energy(problem, limit, ev, builder, guess_ev) -> None:
    """A running-energy state keeps every row local in time (a dense row summing over all
    samples would make the constraint Jacobian expensive to form)."""
    import casadi

    steps = problem.n_steps
    energy_scale = abs(float(limit.max)) or 1.0
    Es = casadi.MX.sym(f"E_{limit.part}", steps + 1)
    E = Es * energy_scale
    V = casadi.DM(problem.schedule.inputs[:, :steps])
    Z = casadi.vertcat(ev.X[:, :steps], V)
    Q = ev.extra["energy"][limit.part]
    increments = ev.values[limit.part] * casadi.sum1(Z * casadi.mtimes(Q, Z)).T
    builder.add((E[1:] - E[:-1] - increments) / energy_scale, 0.0, 0.0)
    builder.add(Es[0], 0.0, 0.0)
    builder.add(Es[-1] - float(limit.max) / energy_scale, -casadi.inf, 0.0)
    Zg = np.vstack([guess_ev.X[:, :steps], problem.schedule.inputs[:, :steps]])
    Qg = guess_ev.extra["energy"][limit.part]
    running = np.concatenate([[0.0], np.cumsum(np.einsum("ik,ij,jk->k", Zg, Qg, Zg))])
    builder.unknown(Es, running * guess_ev.values[limit.part] / energy_scale, -np.inf, np.inf)


def _objective(problem: Problem, ev: Evaluation, start: Evaluation, builder: _Builder) -> Any:
    """The objective at the nominal point, each term divided by its start value."""
    import casadi

    from wirestate.tune.objective import start_scales

    terms, start_peak = start_scales(problem, start)
    f: Any = 0
    for (weight, value), ref in zip(objective_terms(problem, ev), terms, strict=True):
        f = f + weight * value / ref
    if problem.spec.objective.peak_impedance:
        tau = casadi.MX.sym("tau")
        for lim in problem.spec.limits:
            if lim.kind == "output_impedance":
                z = measures.impedance_magnitude(ev, problem, lim, measures.frequency_grid(lim))
                builder.add(z / start_peak - tau, -casadi.inf, 0.0)
        f = f + problem.spec.objective.peak_impedance * tau
        builder.unknown(tau, np.array([1.0]), 0.0, np.inf)
    return f


def bound_size(limit: Any) -> float:
    """The size each row of a limit is divided by: its bound (1 for a zero bound)."""
    for value in (limit.max, limit.min, limit.band if not isinstance(limit.band, tuple) else None):
        if value is not None and value != 0:
            return abs(float(value))
    return 1.0
