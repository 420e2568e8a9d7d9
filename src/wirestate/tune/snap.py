"""Preferred values for the continuous optimum: stage 5 of the chain.

Input: the :class:`~wirestate.tune.optimise.SolverResult`. Output: a :class:`SnappedDesign`.
Each design variable is snapped to its neighbouring values of an IEC 60063 series (three
either side when every tolerance corner must pass); every combination (at most 2**8, or
each variable alone beyond that) is evaluated in one batch, with the tolerance corners of
those that meet every limit at nominal values in a second batch. The feasible combination
with the lowest objective is kept (when corners must pass, the cheapest that passes every
corner, the one nearest the continuous optimum among equals).
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np

from wirestate.tune import preferred
from wirestate.tune.evaluation import Evaluation
from wirestate.tune.margins import margin_rows, margin_table
from wirestate.tune.objective import objective_value

if TYPE_CHECKING:
    from wirestate.tune.optimise import SolverResult
    from wirestate.tune.problem import Problem

MAX_SNAP_VARIABLES = 8
#: candidates whose tolerance corners are evaluated in one batch, in turn (the cheapest
#: candidate usually passes)
CORNER_BATCHES = (1, 3, 8, 32, 256, 65536)


@dataclass
class SnappedDesign:
    """The chosen preferred values and how they were chosen.

    ``values`` the preferred values; ``feasible`` whether they meet every limit at nominal
    values; ``objective`` their normalised objective; ``rows`` their margins (parametric
    evaluation); ``candidates`` how many combinations were evaluated.
    """

    series: str
    values: dict[str, float]
    feasible: bool
    objective: float
    rows: list[dict[str, Any]]
    candidates: int
    notes: list[str] = field(default_factory=list)


def combinations(
    problem: Problem, optimum: dict[str, float], series: str, count: int = 1
) -> list[dict[str, float]]:
    """Combinations of preferred values around ``optimum`` inside the variable bounds:
    every combination up to :data:`MAX_SNAP_VARIABLES` variables, else each variable moved
    alone from the nearest values."""
    names = list(optimum)
    options = []
    for name in names:
        if count == 1:
            choices = sorted(set(preferred.neighbours(optimum[name], series)))
        else:
            choices = preferred.candidates(optimum[name], series, count=count)
        var = problem.spec.variables[name]
        inside = [c for c in choices if var.min * (1 - 1e-12) <= c <= var.max * (1 + 1e-12)]
        options.append(inside or [preferred.snap(optimum[name], series)])
    if len(names) <= MAX_SNAP_VARIABLES:
        return [dict(zip(names, combo, strict=True)) for combo in itertools.product(*options)]
    nearest = {n: preferred.snap(optimum[n], series) for n in names}
    combos = [nearest]
    for i, name in enumerate(names):
        for c in options[i]:
            if c != nearest[name]:
                combos.append({**nearest, name: c})
    return combos


def corner_points(problem: Problem, values: dict[str, float]) -> list[dict[str, float]]:
    """Part values at every tolerance corner around ``values`` (the design variables)."""
    _, factors = problem.tolerance_corners()
    return [problem.corner_values(values, f) for f in factors]


def _log_distance(values: dict[str, float], optimum: dict[str, float]) -> float:
    return sum(math.log(values[n] / optimum[n]) ** 2 for n in optimum)


def snap(
    problem: Problem,
    solution: SolverResult,
    series: str,
    start: Evaluation,
    scales: tuple[list[float], float],
    say: Callable[[str], None],
) -> SnappedDesign:
    """The preferred values for ``solution``; see the module docstring."""
    spec = problem.spec
    robust = (spec.stress.corners_must_pass or spec.solver.robust) and spec.stress.tolerance_corners
    combos = combinations(problem, solution.values, series, count=3 if robust else 1)
    say(f"snapping to {series}: {len(combos)} combinations of neighbouring values")
    batch = problem.evaluate(combos)
    table = margin_table(problem, batch, start)
    objective = np.atleast_1d(objective_value(problem, batch, scales))
    nominal_ok = table.feasible
    worst = np.nan_to_num(np.min(table.relative, axis=1, initial=np.inf), nan=-np.inf)
    notes = []
    order = list(range(len(combos)))
    # with three values either side, several combinations can share the least objective
    # (a capacitance objective ignores the resistor): the one nearest the continuous
    # optimum (log distance) is kept among them
    ranked = sorted(
        (i for i in order if nominal_ok[i]),
        key=lambda i: (objective[i], _log_distance(combos[i], solution.values)),
    )
    passing = None
    if robust and ranked and not problem.tolerance_corners()[0]:
        passing = ranked[0]
    elif robust and ranked:
        survivors = _screened(problem, combos, ranked, solution.corners, start)
        passing = _first_passing(problem, combos, survivors, start)
    if passing is not None:
        best = passing
    elif ranked:
        best = min((i for i in order if nominal_ok[i]), key=lambda i: objective[i])
        if robust:
            notes.append(
                f"no combination of the nearby {series} values meets every limit at every "
                "tolerance corner; the best one that meets them at nominal values is reported"
            )
    else:
        best = max(order, key=lambda i: worst[i])
        notes.append(
            f"no combination of neighbouring {series} values meets every limit; the "
            "least-violating one is reported"
        )
    return SnappedDesign(
        series=series,
        values=combos[best],
        feasible=bool(np.any(nominal_ok)),
        objective=float(objective[best]),
        rows=margin_rows(problem, table, best),
        candidates=len(combos),
        notes=notes,
    )


def _screened(
    problem: Problem, combos: list[dict], ranked: list[int], corners: list[dict], start: Evaluation
) -> list[int]:
    """The candidates of ``ranked`` (in order) that meet every limit at the corners the
    optimiser found binding: a cheap first test before all corners are evaluated."""
    if not corners:
        return ranked
    points = [problem.corner_values(combos[i], f) for i in ranked for f in corners]
    table = margin_table(problem, problem.evaluate(points), start)
    passes = table.feasible.reshape(len(ranked), -1).all(axis=1)
    return [i for i, ok in zip(ranked, passes, strict=True) if ok]


def _first_passing(
    problem: Problem, combos: list[dict], ranked: list[int], start: Evaluation
) -> int | None:
    """The first combination of ``ranked`` whose every tolerance corner meets every limit;
    the corners of a few candidates at a time are evaluated in one batch."""
    first = 0
    for size in CORNER_BATCHES:
        chunk = ranked[first : first + size]
        first += size
        if not chunk:
            return None
        points = [corner for i in chunk for corner in corner_points(problem, combos[i])]
        table = margin_table(problem, problem.evaluate(points), start)
        passes = table.feasible.reshape(len(chunk), -1).all(axis=1)
        if np.any(passes):
            return chunk[int(np.argmax(passes))]
    return None
