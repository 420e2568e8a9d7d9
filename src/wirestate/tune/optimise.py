"""IPOPT on the formulated NLP, with an exchange over corners and samples: stage 4.

Input: a :class:`~wirestate.tune.problem.Problem`. Output: a :class:`SolverResult` (the
continuous optimum, or the least-violation point, with IPOPT's status and figures).

Most rows never bind: of the thousands of samples a limit covers, only those where its
signal peaks matter, and of the tolerance corners only a few. So the NLP starts with, per
limit, the point (nominal values or a corner) that is worst at the start, and at each
imposed point only the samples where each limit's signal peaks (and their neighbours).
After each solve every sample of every limit at every point is checked numerically in
one batch (:meth:`Problem.evaluate`); the violated peaks join the NLP (a violated corner
brings its peaks of every limit), which is solved again from the last optimum. When
nothing is violated the point is feasible for the full problem and optimal for a
relaxation of it, hence optimal for the full problem: the exchange method of
semi-infinite programming (Hettich and Kortanek, SIAM Review 35(3), 1993). A test checks
that it lands on the optimum of the NLP that imposes every row.

IPOPT (Wachter and Biegler, Math. Programming 106, 2006) gets exact first derivatives by
algorithmic differentiation (CasADi chooses forward or reverse mode by the shape of each
Jacobian: reverse for few rows and many variables) and a limited-memory quasi-Newton
(L-BFGS) Hessian: IPOPT's own for multiple shooting, and for the condensed formulation
the dense one of :mod:`wirestate.tune.quasi_newton`, formed from the derivatives IPOPT
asked for and kept from one round to the next (IPOPT's own costs it twice the time per
iteration and starts empty in every round). The trajectory and the exponential are
CasADi functions whose first derivatives are written out (:mod:`wirestate.tune.recursion`,
:mod:`wirestate.tune.exponential`); they have no second derivatives, so there is no
exact-Hessian option (at 16 variables it had cost four times SLSQP's whole time).
"""

from __future__ import annotations

import time
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np

from wirestate.tune import limits as measures
from wirestate.tune.evaluation import Evaluation
from wirestate.tune.formulation import (
    FORMULATIONS,
    ActiveSet,
    Formulation,
    bound_size,
    formulate,
    scaled,
    values_of,
)
from wirestate.tune.margins import margin_table
from wirestate.tune.quasi_newton import LimitedMemoryHessian, hooked_options

if TYPE_CHECKING:
    from wirestate.tune.problem import Problem

Progress = Callable[[str], None] | None
#: IPOPT statuses taken as converged
CONVERGED = ("Solve_Succeeded", "Solved_To_Acceptable_Level")
INFEASIBLE = ("Infeasible_Problem_Detected", "Restoration_Failed")
#: a row counts as violated when it exceeds its bound by more than this many times the
#: solver's tolerance, as a fraction of the bound. IPOPT meets its rows to its tolerance
#: in its own scaled form, which left rows exceeding their bounds by 1.2e-8 to 1.8e-8 at
#: a tolerance of 1e-8 (measured on the scaling benchmark at 8 and 32 variables); at a
#: factor of 1 each such row cost a whole further round that moved nothing
EXCHANGE_FACTOR = 10.0
#: at most this many rounds of the exchange
EXCHANGE_ROUNDS = 12
FIRST_CORNERS = True
#: rows where a limit's signal peaks, imposed per point and limit at first
FIRST_PEAKS = 2
#: rows of a coarse grid (evenly spaced samples) imposed per point and limit at first,
#: besides the peaks: the discretisation method of semi-infinite programming starts from
#: a coarse grid and refines it (the discretisation methods in Hettich and Kortanek
#: 1993); on the scaling benchmark at 16 variables it took the exchange from 4 rounds to
#: 2 (nominal) and from 6 to 2 (robust)
COARSE_ROWS = 40
#: ... at least this many samples apart
COARSE_SPACING = 8
#: ... only where the limit is violated or within this relative margin of its bound at the
#: start (a limit far from its bound binds late if at all: its peaks suffice)
COARSE_MARGIN = 0.5
#: ... and at most this many per limit over the points imposed at first (shared out),
#: but no fewer than COARSE_MIN per point: the bundled system tuning imposes 6 of its 16
#: corners at first, where 40 rows per point and limit doubled its solver time
COARSE_BUDGET = 120
COARSE_MIN = 8
#: violated peaks added per point and limit in one round (the worst first)
ADDED_PEAKS = 4
#: ... and, with them, every sample of that point and limit within this fraction of the
#: bound (the ADDED_BAND_ROWS nearest to it at most). On the scaling
#: benchmark it took the exchange from 3-5 rounds to 2 at 4 to 32 variables (nominal:
#: 4 variables 0.31 -> 0.26 s, 32 variables 2.3 -> 1.4 s; robust 32: 13 -> 7 s)
ADDED_BAND = 0.01
ADDED_BAND_ROWS = 200
#: samples either side of a peak imposed with it (a peak moves as the values change)
NEIGHBOURS = 2
#: IPOPT options for a later round, started from the last optimum and its multipliers
#: with a small barrier parameter, so that it does not first move back into the interior
WARM_START = {
    "ipopt.warm_start_init_point": "yes",
    "ipopt.mu_init": 1e-6,
    "ipopt.warm_start_bound_push": 1e-9,
    "ipopt.warm_start_bound_frac": 1e-9,
    "ipopt.warm_start_slack_bound_push": 1e-9,
    "ipopt.warm_start_slack_bound_frac": 1e-9,
    "ipopt.warm_start_mult_bound_push": 1e-9,
}
#: IPOPT's tolerance in the first round of the exchange (when looser than the run's): its
#: optimum only shows which rows bind, and the next round, warm, refines it (inexact
#: early relaxations, as in the exchange methods of Hettich and Kortanek 1993). On the
#: scaling benchmark 39 -> 30 iterations at 4 variables, 74 -> 65 at 32 (nominal); a
#: problem whose first round leaves nothing violated is solved once more, warm
FIRST_ROUND_TOLERANCE = 1e-4
#: the largest barrier parameter IPOPT may use in the condensed formulation (and its
#: first value there). On the scaling benchmark, against IPOPT's default (start 0.1,
#: ceiling 1e5): 4 variables 30 -> 25 iterations, 32 variables 65 -> 55 (nominal); 16
#: variables robust 66 -> 39; the same optima. Values from 0.005 to 0.02 did about as well
BARRIER_MAX = 0.01
#: a later round starts at the first of these fractions of the way from the last optimum
#: back to the start at which every imposed row holds with a relative slack of
#: RESTART_SLACK (an interior point near the optimum; IPOPT's warm start from the optimum
#: itself, where the new rows are violated, took several times more iterations)
RESTART_STEPS = (0.05, 0.1, 0.2, 0.35, 0.5, 0.75)
RESTART_SLACK = 1e-3
#: a limit imposed whole (energy, poles) joins a point only once it is this close to its
#: bound (relative margin below 0.5) there, or violated
WHOLE_LIMIT_MARGIN = 0.5


@dataclass
class SolverResult:
    """The outcome of :func:`solve_nlp` (design-variable values in SI units)."""

    values: dict[str, float]
    status: str
    success: bool
    iterations: int
    objective: float
    seconds: float
    squarings: int
    truncation_bound: float
    constraint_violation: float
    stats: dict[str, Any] = field(default_factory=dict)
    #: the tolerance corners (factor mappings) the optimiser imposed at the end: the ones
    #: that bind, which the snapping tries first
    corners: list[dict[str, float]] = field(default_factory=list)

    @property
    def converged(self) -> bool:
        return self.status in CONVERGED


#: the former name
NlpSolution = SolverResult


def is_stable_discrete(Phi: np.ndarray) -> bool:
    """True when every eigenvalue of the one-sample transition matrix lies inside the unit
    circle (with a margin of 1e-9 for round-off)."""
    return bool(np.max(np.abs(np.linalg.eigvals(Phi))) < 1.0 - 1e-9)


def points_of(problem: Problem, robust: bool, corner_factors: list | None) -> list[dict]:
    """The points the limits hold at: the nominal values, and every tolerance corner when
    robust (or the given corners)."""
    if not robust:
        return [{}]
    toleranced, factors = problem.tolerance_corners()
    if corner_factors is not None:
        factors = list(corner_factors)
    return [{}] + (factors if toleranced else [])


def solve_nlp(
    problem: Problem,
    *,
    progress: Progress = None,
    max_iterations: int = 300,
    tolerance: float = 1e-8,
    formulation: str = "auto",
    robust: bool = False,
    corner_factors: list[dict[str, float]] | None = None,
    start: dict[str, float] | None = None,
    rows: str = "exchange",
    start_evaluation: Evaluation | None = None,
) -> SolverResult:
    """The continuous optimum of ``problem``; see the module docstring.

    Parameters
    ----------
    formulation
        ``"condensed"``, ``"multiple_shooting"`` or ``"auto"`` (condensed when the loop is
        stable at the starting point at every point, multiple shooting otherwise).
    robust
        Impose every limit at every tolerance corner too (or at ``corner_factors`` only).
    start
        Starting values of the design variables (default: the problem's start).
    rows
        ``"exchange"`` (peaks first, violated rows added) or ``"all"`` (every row and every
        point imposed at once, as a reference).
    start_evaluation
        The numeric evaluation at the starting values, when the caller has it already.
    """
    if formulation not in FORMULATIONS:
        raise ValueError(f"internal: unknown formulation {formulation!r}")
    t0 = time.perf_counter()
    nominal_start = problem.start_values()
    begin = {**nominal_start, **(start or {})}
    start_ev = start_evaluation or problem.evaluate([nominal_start])
    exchange = Exchange(problem, points_of(problem, robust, corner_factors), start_ev, tolerance)
    # the nominal point at the nominal start is the start evaluation itself
    same = len(exchange.points) == 1 and begin == nominal_start
    at_start = start_ev if same else exchange.evaluate(begin)
    if formulation == "auto":
        stable = all(is_stable_discrete(at_start.Phi[i]) for i in range(len(exchange.points)))
        formulation = "condensed" if stable else "multiple_shooting"
    # multiple shooting starts where the loop is unstable: there most of a coarse grid is
    # violated by far, and IPOPT did worse with it (it ran out of iterations)
    exchange.coarse = formulation == "condensed"
    active = exchange.everything() if rows == "all" else exchange.first(at_start)
    run = _Runner(problem, progress, max_iterations, tolerance)
    rounds, settled, last, last_x = 0, False, None, None
    # the first round's optimum only tells which rows bind: solved to a loose tolerance
    loose = max(tolerance, FIRST_ROUND_TOLERANCE) if rows != "all" else tolerance
    refine = False
    while True:
        rounds += 1
        if robust or rows != "all":
            run.say_round(rounds, active, exchange)
        if last is not None and not refine and formulation == "condensed":
            # the next start from the new NLP's own rows (no simulation of the candidates)
            used = exchange.subset(active, at_start)
            nlp = formulate(problem, used[0], start_ev, begin, used[1], kind=formulation)
            nlp.x0 = restart_on_rows(nlp, last_x, problem.spec.limits)
        else:
            if last is None:
                here = begin
            elif refine:
                # after a loose round that left nothing violated, its optimum is a fine start
                here = last
            else:
                here = exchange.restart(begin, last, active)
            # the states along the start trajectory seed multiple shooting only
            shooting = formulation == "multiple_shooting" and here is not begin
            used = exchange.subset(active, exchange.evaluate(here) if shooting else at_start)
            nlp = formulate(problem, used[0], start_ev, here, used[1], kind=formulation)
        was_loose = rounds == 1 and loose > tolerance
        outcome = run.solve(nlp, loose if was_loose else tolerance)
        last, last_x, at_optimum = outcome["values"], outcome["x"], None
        if not outcome["converged"] or rows == "all" or rounds >= EXCHANGE_ROUNDS:
            break
        at_optimum = exchange.evaluate(outcome["values"])
        grown, violated = exchange.grow(active, at_optimum)
        settled = violated == 0
        if (settled or grown is None) and not was_loose:
            break
        # a loose round that found nothing violated is solved again, to the tolerance
        refine = grown is None
        active = grown if grown is not None else active
    final = at_optimum if at_optimum is not None else exchange.evaluate(last)
    return run.result(outcome, nlp, exchange, active, (rounds, settled, final), t0, formulation,
                      robust)  # fmt: skip


class Exchange:
    """The points, the rows of every limit, and the choice of the rows the NLP imposes."""

    def __init__(
        self, problem: Problem, points: list[dict], start: Evaluation, solver_tolerance: float
    ) -> None:
        self.problem = problem
        self.points = points
        self.start = start
        self.limits = problem.spec.limits
        #: impose a coarse grid of rows besides the peaks at first, of this many rows
        self.coarse = True
        self.coarse_rows = COARSE_ROWS
        #: a row exceeding its bound by more than this fraction of it is violated
        self.tolerance = EXCHANGE_FACTOR * solver_tolerance

    def evaluate(self, values: dict[str, float]) -> Evaluation:
        """Every point at these design-variable values, numerically, in one batch."""
        return self.problem.evaluate([self.problem.corner_values(values, f) for f in self.points])

    def excess(self, batch: Evaluation) -> list[np.ndarray]:
        """Per limit: the relative excess (> 0: violated) of every row at every point,
        points x rows (one column for a limit imposed whole)."""
        out = []
        table = None
        for limit in self.limits:
            if measures.row_count(limit, self.problem) is None:
                if table is None:
                    table = margin_table(self.problem, batch, self.start, fine=False)
                j = self.limits.index(limit)
                out.append(-np.nan_to_num(table.relative[:, j : j + 1], nan=-np.inf))
                continue
            size = bound_size(limit)
            parts = []
            for expr, lower, upper in measures.ranges(limit, self.problem, batch, self.start):
                expr = np.asarray(expr, dtype=float)
                if upper is not None:
                    parts.append((expr - upper) / size)
                if lower is not None:
                    parts.append((lower - expr) / size)
            with np.errstate(invalid="ignore"):
                out.append(np.nan_to_num(np.maximum.reduce(parts), nan=np.inf))
        return out

    def restart(self, start: dict, optimum: dict, active: ActiveSet) -> dict[str, float]:
        """The point nearest the last optimum, on the way back to the start, at which every
        row of ``active`` holds (the start itself if none does)."""
        problem = self.problem
        names, bounds = problem.variables, problem.bounds
        q0, q1 = (scaled(names, bounds, v) for v in (start, optimum))
        used = sorted({0} | {p for p, _ in active.rows})
        # one candidate at a time: the first or second nearly always holds
        for t in RESTART_STEPS:
            candidate = values_of(names, bounds, q1 + t * (q0 - q1))
            points = [problem.corner_values(candidate, self.points[p]) for p in used]
            excess = self.excess(problem.evaluate(points))
            worst = -np.inf
            for (p, j), positions in active.rows.items():
                r = excess[j][used.index(p)]
                r = r if positions is None or r.size == 1 else r[positions]
                worst = max(worst, float(np.max(r)))
            if worst < -RESTART_SLACK:
                return candidate
        return start

    def everything(self) -> ActiveSet:
        """Every row of every limit at every point."""
        rows = {(p, j): None for p in range(len(self.points)) for j in range(len(self.limits))}
        return ActiveSet(list(self.points), rows)

    def first(self, batch: Evaluation) -> ActiveSet:
        """The nominal point and, per limit, its worst point; at each, the peaks."""
        excess = self.excess(batch)
        chosen = {0}
        if FIRST_CORNERS:
            for r in excess:
                chosen.add(int(np.argmax(np.max(r, axis=1))))
        rows: dict[tuple[int, int], Any] = {}
        # the coarse grid's rows are shared out among the points imposed at first
        self.coarse_rows = min(COARSE_ROWS, max(COARSE_MIN, COARSE_BUDGET // len(chosen)))
        for p in sorted(chosen):
            for j, r in enumerate(excess):
                self._add_peaks(rows, p, j, r[p], first=True)
        return ActiveSet(list(self.points), rows)

    def _add_peaks(self, rows: dict, p: int, j: int, r: np.ndarray, *, first: bool) -> bool:
        """Add the peaks of one limit's excess at one point; True when rows were added."""
        if measures.row_count(self.limits[j], self.problem) is None:
            # pole rows are few and keep the loop stable, so they are always imposed
            always = self.limits[j].kind in measures.POLE_KINDS
            near = r[0] > -WHOLE_LIMIT_MARGIN if first else r[0] > self.tolerance
            near = near or always
            if near and (p, j) not in rows:
                rows[(p, j)] = None
                return True
            return False
        old = rows.get((p, j))
        if (p, j) in rows and old is None:
            return False
        if first:
            new = peaks(r, FIRST_PEAKS)
            if self.coarse and r.size and np.max(r) > -COARSE_MARGIN:
                new = np.union1d(new, coarse_grid(r.size, self.coarse_rows))
        else:
            new = peaks(np.where(r > self.tolerance, r, -np.inf), ADDED_PEAKS)
            # the peaks of a violated limit move as the values change: every sample
            # within ADDED_BAND of the bound joins them, so that the next optimum does
            # not find the same peak a few samples on
            new = np.union1d(new, near_bound(r))
        merged = np.union1d(np.asarray(old if old is not None else [], dtype=int), new)
        if old is not None and len(merged) == len(old):
            return False
        rows[(p, j)] = merged.astype(int)
        return True

    def grow(self, active: ActiveSet, batch: Evaluation) -> tuple[ActiveSet | None, int]:
        """The active set with the violated rows added (``None`` when none is new) and
        the number of (point, limit) pairs still violated."""
        excess = self.excess(batch)
        rows = dict(active.rows)
        imposed = {p for p, _ in rows}
        violated, added = 0, False
        for j, r in enumerate(excess):
            worst = np.max(r, axis=1)
            violated += int(np.sum(worst > self.tolerance))
            for p in np.flatnonzero(worst > self.tolerance):
                if int(p) in imposed:
                    added |= self._add_peaks(rows, int(p), j, r[p], first=False)
            p = int(np.argmax(worst))
            if worst[p] > self.tolerance and p not in imposed:
                imposed.add(p)
                for k, rk in enumerate(excess):
                    self._add_peaks(rows, p, k, rk[p], first=True)
                    self._add_peaks(rows, p, k, rk[p], first=False)
                added = True
        return (ActiveSet(active.points, rows) if added else None), violated

    def subset(self, active: ActiveSet, batch: Evaluation) -> tuple[ActiveSet, Evaluation]:
        """The active set restricted to its imposed points (the nominal point always
        first), and the evaluation rows of those points."""
        used = sorted({0} | {p for p, _ in active.rows})
        where = {p: i for i, p in enumerate(used)}
        rows = {(where[p], j): pos for (p, j), pos in active.rows.items()}
        picked = batch.take(used)
        return ActiveSet([active.points[p] for p in used], rows), picked

    def row_counts(self, active: ActiveSet) -> tuple[int, int]:
        """Rows imposed and rows in all (every sample of every limit at every point)."""
        total = imposed = 0
        for j, limit in enumerate(self.limits):
            count = measures.row_count(limit, self.problem) or 1
            total += count * len(self.points)
            for (_point, k), pos in active.rows.items():
                if k == j:
                    imposed += count if pos is None else len(pos)
        return imposed, total


def restart_on_rows(nlp: Formulation, last: np.ndarray, limits: list) -> np.ndarray:
    """The start of a condensed round (what :meth:`Exchange.restart` finds by simulation):
    the first of :data:`RESTART_STEPS` on the way from the last optimum ``last`` back to
    the NLP's start ``nlp.x0`` at which each limit row holds with a relative slack of
    :data:`RESTART_SLACK` and each other row holds, by the NLP's own row function (the
    rows are the limits' excesses over their bounds, divided by the bounds); the start
    itself if none does."""
    import casadi

    rows = casadi.Function("restart_rows", [nlp.nlp["x"]], [nlp.nlp["g"]])
    slack = np.array([
        RESTART_SLACK if key is not None and limits[key[1]].kind not in measures.POLE_KINDS
        else 0.0 for key in nlp.keys
    ])  # fmt: skip
    x1, x0 = np.asarray(last, dtype=float), np.asarray(nlp.x0, dtype=float)
    if x1.shape != x0.shape:
        return x0
    for t in RESTART_STEPS:
        x = np.clip(x1 + t * (x0 - x1), nlp.lbx, nlp.ubx)
        g = np.array(rows(x)).ravel()
        with np.errstate(invalid="ignore"):
            holds = (g <= nlp.ubg - slack) & (g >= nlp.lbg + slack)
        if np.all(holds):
            return x
    return x0


def coarse_grid(size: int, rows: int = 0) -> np.ndarray:
    """Evenly spaced positions of ``size`` rows (the first and last included): about
    ``rows`` (default :data:`COARSE_ROWS`), at least :data:`COARSE_SPACING` apart."""
    count = min(rows or COARSE_ROWS, size // COARSE_SPACING + 1)
    if count >= size:
        return np.arange(size)
    return np.unique(np.linspace(0, size - 1, count).round().astype(int))


def near_bound(r: np.ndarray, band: float = ADDED_BAND, most: int = ADDED_BAND_ROWS) -> np.ndarray:
    """Positions (sorted) where the relative excess ``r`` is within ``band`` of the bound
    (``r > -band``): the ``most`` nearest to it, or all of them if fewer."""
    r = np.asarray(r, dtype=float)
    near = np.flatnonzero(r > -band)
    return np.sort(near[np.argsort(-r[near], kind="stable")[:most]])


def peaks(r: np.ndarray, count: int) -> np.ndarray:
    """Positions of the ``count`` largest local maxima of ``r`` and their neighbours."""
    r = np.asarray(r, dtype=float)
    if r.size == 0:
        return np.array([], dtype=int)
    left = np.concatenate([[-np.inf], r[:-1]])
    right = np.concatenate([r[1:], [-np.inf]])
    local = np.flatnonzero((r >= left) & (r >= right) & np.isfinite(r))
    if local.size == 0:
        return np.array([], dtype=int)
    best = local[np.argsort(-r[local], kind="stable")[:count]]
    around = np.concatenate([best + k for k in range(-NEIGHBOURS, NEIGHBOURS + 1)])
    return np.unique(around[(around >= 0) & (around < r.size)])


class _Runner:
    """Builds the solver for each formulation and keeps the figures of every round."""

    def __init__(self, problem, progress, max_iterations, tolerance) -> None:
        self.problem = problem
        self.progress = progress
        self.options: dict[str, Any] = {
            "print_time": False,
            "ipopt.print_level": 0,
            "ipopt.sb": "yes",
            "ipopt.max_iter": max_iterations,
            "ipopt.tol": tolerance,
            # multiple shooting's defects carry rounding of order 1e-8 of the state scale
            # (products of the exponential with the states); asking for less stalls IPOPT
            # in round-off. The condensed rows have no such floor: see solve()
            "ipopt.constr_viol_tol": 1e-6,
            "ipopt.acceptable_iter": 3,
            "ipopt.mu_strategy": "adaptive",
            # approximate minimum degree ordering for MUMPS: on these KKT systems (a few
            # dense columns of design variables against many rows) it factors fastest
            "ipopt.mumps_pivot_order": 0,
            "ipopt.hessian_approximation": "limited-memory",
            # the rows are divided by their bounds and the variables scaled to [0, 1]
            # already: IPOPT's gradient-based scaling would only cost a Jacobian per solve
            "ipopt.nlp_scaling_method": "none",
            # CasADi's gradient of the Lagrangian, used only for the multipliers of
            # parameters (there are none) and built by AD of the whole NLP at every
            # construction (1.9 of 2.8 ms per round at 4 variables)
            "no_nlp_grad": True,
        }
        self.iterations = 0
        self.previous: tuple[Formulation, np.ndarray, np.ndarray] | None = None
        self.solvers: list[Any] = []
        self.hessian: LimitedMemoryHessian | None = None
        self.times = {"build": 0.0, "derivatives": 0.0, "ipopt": 0.0, "evaluations": 0.0}

    def _multipliers(self, nlp: Formulation) -> dict[str, np.ndarray]:
        """The last round's multipliers for the rows (and unknowns) this round keeps."""
        old, lam_x, lam_g = self.previous
        by_key = {k: v for k, v in zip(old.keys, lam_g, strict=True) if k is not None}
        out = {"lam_g0": np.array([by_key.get(k, 0.0) if k is not None else 0.0 for k in nlp.keys])}
        if old.unknowns == nlp.unknowns:
            out["lam_x0"] = lam_x
        return out

    def say_round(self, rounds: int, active: ActiveSet, exchange: Exchange) -> None:
        if self.progress is None:
            return
        imposed, total = exchange.row_counts(active)
        used = len({0} | {p for p, _ in active.rows})
        corners = f", {used - 1} of {len(exchange.points) - 1} tolerance corners" if len(
            exchange.points
        ) > 1 else ""  # fmt: skip
        self.progress(f"round {rounds}: {imposed} of {total} rows imposed{corners}")

    def solve(self, nlp: Formulation, tolerance: float) -> dict[str, Any]:
        import casadi

        t0 = time.perf_counter()
        options = dict(self.options)
        if tolerance > options["ipopt.tol"]:  # a loose first round
            options["ipopt.tol"] = options["ipopt.acceptable_tol"] = tolerance
        arguments = {"x0": nlp.x0, "lbx": nlp.lbx, "ubx": nlp.ubx, "lbg": nlp.lbg, "ubg": nlp.ubg}
        if self.previous is not None:
            options.update(WARM_START)
            arguments.update(self._multipliers(nlp))
        if self.progress is not None:
            options["iteration_callback"] = _iteration_report(nlp, self.progress, self.iterations)
        if nlp.kind == "condensed":
            # rows divided by their bounds, met to IPOPT's tolerance: a design variable
            # that only a flat row fixes is then as accurate as the rows
            options["ipopt.constr_viol_tol"] = options["ipopt.tol"]
            # a small, well-scaled linear system each iteration (a few design variables,
            # rows divided by their bounds, a positive definite Hessian): IPOPT's residual
            # check and iterative refinement of each step are skipped (measured on the
            # scaling benchmark: IPOPT's own time per iteration 1.28 -> 0.83 ms at 4
            # variables, 2.6 -> 2.3 ms at 32; the same iterations and optima)
            options["ipopt.fast_step_computation"] = "yes"
            # the objective is 1 at the start, the variables span [0, 1] and each row is
            # divided by its bound: a barrier parameter above BARRIER_MAX only pushes the
            # iterates back into the interior, which IPOPT's adaptive strategy did (up to
            # its default ceiling of 1e5) and then spent iterations coming back
            options["ipopt.mu_max"] = BARRIER_MAX
            options["ipopt.mu_init"] = min(options.get("ipopt.mu_init", BARRIER_MAX), BARRIER_MAX)
            # the design variables only: a dense L-BFGS matrix of our own, kept across
            # rounds (multiple shooting's states make the matrix too large)
            if self.hessian is None or self.hessian.n != nlp.unknowns:
                self.hessian = LimitedMemoryHessian(nlp.unknowns)
            self.hessian.start_round()
            hooks, keep = hooked_options(nlp.nlp, self.hessian)
            options.update(hooks)
            self.solvers.append(keep)
        t1 = time.perf_counter()
        solver = casadi.nlpsol("tune", "ipopt", nlp.nlp, options)
        # CasADi keeps the derivative functions of the compiled loop only while something
        # refers to them: the solvers of earlier rounds do, so later rounds reuse them
        self.solvers.append(solver)
        t2 = time.perf_counter()
        raw = solver(**arguments)
        t3 = time.perf_counter()
        self.previous = (nlp, np.array(raw["lam_x"]).ravel(), np.array(raw["lam_g"]).ravel())
        stats = solver.stats()
        self.iterations += int(stats.get("iter_count", 0))
        self.times["derivatives"] += t2 - t1
        self.times["ipopt"] += t3 - t2
        self.times["evaluations"] += sum(
            float(v) for k, v in stats.items() if k.startswith("t_wall_nlp_") and v is not None
        )
        self.times["build"] += t1 - t0
        status = str(stats.get("return_status", "unknown"))
        x = np.array(raw["x"]).ravel()
        return {
            "values": nlp.values(x), "x": x, "f": float(raw["f"]), "status": status,
            "success": bool(stats.get("success", False)), "converged": status in CONVERGED,
        }  # fmt: skip

    def result(self, outcome, nlp, exchange, active, ending, t0, kind, robust):
        """The :class:`SolverResult`; ``ending`` is (rounds, settled, the evaluation of
        every point at the last optimum)."""
        rounds, settled, final = ending
        loop = self.problem.parametric()
        imposed, total = exchange.row_counts(active)
        violation = (
            max(float(np.max(r)) for r in exchange.excess(final)) if exchange.limits else 0.0
        )
        stats = {
            "formulation": kind,
            "hessian": "limited_memory",
            "unknowns": nlp.unknowns,
            "constraints": nlp.constraints,
            "rows_imposed": imposed,
            "rows_total": total,
            "exchange_rounds": rounds,
            "exchange_settled": settled,
            "seconds_building_expressions": self.times["build"],
            "seconds_generating_derivatives": self.times["derivatives"],
            "seconds_in_ipopt": self.times["ipopt"],
            "seconds_in_ipopt_function_evaluations": self.times["evaluations"],
        }
        if robust:
            used = len({p for p, _ in active.rows} - {0})
            stats["tolerance_corners_in_optimiser"] = used
            stats["tolerance_corners"] = len(exchange.points) - 1
        return SolverResult(
            values=outcome["values"],
            status=outcome["status"],
            success=outcome["success"],
            iterations=self.iterations,
            objective=outcome["f"],
            seconds=time.perf_counter() - t0,
            squarings=loop.squarings,
            truncation_bound=loop.truncation_bound,
            constraint_violation=max(violation, 0.0),
            stats=stats,
            corners=[exchange.points[p] for p in sorted({p for p, _ in active.rows} - {0})],
        )


def _iteration_report(nlp: Formulation, progress: Callable[[str], None], offset: int) -> Any:
    """A CasADi iteration callback forwarding IPOPT's iterations to ``progress``."""
    import casadi

    sizes = {"x": nlp.unknowns, "g": nlp.constraints}

    class Callback(casadi.Callback):
        def __init__(self) -> None:
            casadi.Callback.__init__(self)
            self.count = offset
            self.construct("tune_progress", {})

        def get_n_in(self):
            return casadi.nlpsol_n_out()

        def get_n_out(self):
            return 1

        def get_name_in(self, i):
            return casadi.nlpsol_out(i)

        def get_name_out(self, i):
            return "ret"

        def get_sparsity_in(self, i):
            name = casadi.nlpsol_out(i)
            if name == "f":
                return casadi.Sparsity.scalar()
            if name in ("x", "lam_x"):
                return casadi.Sparsity.dense(sizes["x"])
            if name in ("g", "lam_g"):
                return casadi.Sparsity.dense(sizes["g"])
            return casadi.Sparsity(0, 0)

        def eval(self, arg):
            self.count += 1
            progress(iteration_line(self.count, float(arg[1])))
            return [0]

    return Callback()


class Transient(str):
    """A progress line that the next one replaces (an optimiser iteration): a terminal
    shows it in place; a log may keep only some."""

    transient = True


def iteration_line(count: int, objective: float) -> Transient:
    """The progress line of one optimiser iteration."""
    return Transient(f"solver iteration {count}: objective {objective:.6g}")
