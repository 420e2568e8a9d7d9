"""The whole job behind ``wirestate tune``: the chain of stages, in order.

1. :mod:`~wirestate.tune.problem`: the tuning file resolved, checked and compiled
   (with its :mod:`~wirestate.tune.schedule` and :mod:`~wirestate.tune.parametric` loop);
2. :mod:`~wirestate.tune.optimise` (on :mod:`~wirestate.tune.formulation`): the continuous
   optimum by IPOPT, with the exchange over corners and samples;
3. :mod:`~wirestate.tune.snap`: preferred values of an IEC 60063 series;
4. :mod:`~wirestate.tune.verify`: the independent re-verification, the tolerance corners
   and the stress report;
5. :mod:`~wirestate.tune.report`: the :class:`TuningResult`.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

from wirestate.errors import TuningError
from wirestate.spec.tuning import TuningSpec
from wirestate.tune import preferred
from wirestate.tune.margins import is_feasible, limit_margins, margin_rows, margin_table
from wirestate.tune.objective import objective_value, start_scales
from wirestate.tune.optimise import CONVERGED, SolverResult, solve_nlp
from wirestate.tune.problem import Problem
from wirestate.tune.report import (
    CAUTIONS,
    TuningResult,
    failure_verdict,
    responses,
    run_notes,
    sensitivity_section,
    solver_figures,
    variable_rows,
    verdict,
)
from wirestate.tune.snap import corner_points, snap
from wirestate.tune.stress import stress_report
from wirestate.tune.switched import solve_switched
from wirestate.tune.switched_problem import is_switched_tuning
from wirestate.tune.verify import verify

__all__ = ["CAUTIONS", "TuningResult", "limit_margins", "solve", "stress_report"]


def _check_series(series: str) -> str:
    preferred.series_mantissas(series)
    return series.upper()


def solve(
    spec: TuningSpec,
    series: str = "E24",
    progress: Callable[[str], None] | None = None,
    *,
    file: str | None = None,
    system: Any = None,
) -> TuningResult:
    """Size the design variables of ``spec``; see the module docstring.

    Parameters
    ----------
    spec
        A tuning specification (:func:`wirestate.tune.load_tuning`).
    series
        IEC 60063 series for the preferred values: E6, E12, E24, E48 or E96.
    progress
        Called with one line of text per step (solver iterations, corners checked).
    system
        A composed system built in Python (:func:`wirestate.compose.compose`) to tune
        instead of a file; ``spec.tuning.block`` names its circuit block.

    Returns
    -------
    TuningResult
        ``verdict`` says whether every limit holds at the preferred values, at every
        tolerance corner and within every rating (``feasible``: at the preferred values;
        when no combination of neighbouring preferred values meets every limit, the
        least-violating one is reported).

    Raises
    ------
    TuningError
        ``infeasible_limits`` when the optimiser finds no point inside every limit (the
        message lists the limits that fail at the least-violation point and the design
        variables on their bounds; the report is attached as ``error.result``);
        ``solver_failed`` when it stops without converging.
    """
    series = _check_series(series)
    if system is None and is_switched_tuning(spec):
        # issue 12: limits on switching transients, the mode-sequence exchange
        return solve_switched(spec, series, progress, file=file)
    say = progress or (lambda _message: None)
    problem = Problem(spec, file=file, system=system)
    spec = problem.spec
    say(
        f"{spec.name}: {len(problem.variables)} design variables, {len(spec.limits)} limits, "
        f"{problem.n_steps} steps of {problem.step:g} s"
    )
    start = problem.evaluate([problem.start_values()])
    solution = solve_nlp(
        problem,
        progress=progress,
        max_iterations=spec.solver.max_iterations,
        tolerance=spec.solver.tolerance,
        robust=spec.solver.robust,
        start_evaluation=start,
    )
    say(
        f"solver: {solution.status} after {solution.iterations} iterations "
        f"({solution.seconds:.2f} s)"
    )
    notes = run_notes(problem, solution)
    optimum = problem.numeric(solution.values)
    optimum_rows = limit_margins(problem, optimum, start)
    if solution.status not in CONVERGED:
        notes = _stopped(problem, solution, optimum_rows, start, notes, series, optimum, file)
    scales = start_scales(problem, start)
    snapped = snap(problem, solution, series, start, scales, say)
    verification = verify(problem, snapped.values, start, say)
    return _report(problem, solution, snapped, verification, (start, optimum, optimum_rows),
                   scales, notes)  # fmt: skip


def _report(
    problem: Problem,
    solution: SolverResult,
    snapped: Any,
    verification: Any,
    evaluations: tuple[Any, Any, list[dict[str, Any]]],
    scales: tuple[list[float], float],
    notes: list[str],
) -> TuningResult:
    """The :class:`TuningResult` of a tuning that reached preferred values;
    ``evaluations`` holds the start, the optimum and the optimum's margin rows."""
    start, optimum, optimum_rows = evaluations
    limits = [
        {**row, "margin_at_optimum": at_optimum["margin"]}
        for at_optimum, row in zip(optimum_rows, verification.rows, strict=True)
    ]
    return TuningResult(
        name=problem.spec.name,
        series=snapped.series,
        feasible=snapped.feasible,
        variables=variable_rows(problem, solution.values, snapped.values),
        limits=limits,
        tightest=verification.tightest,
        stress=verification.stress,
        solver=solver_figures(solution),
        objective={
            "start": objective_value(problem, start.row(0), scales),
            "optimum": objective_value(problem, optimum, scales),
            "preferred": snapped.objective,
        },
        corners_checked=verification.corners_checked,
        toleranced_parts=verification.toleranced,
        notes=notes + snapped.notes + verification.notes,
        responses=responses(
            problem, start.row(0), verification.evaluation, optimum, verification.envelope
        ),
        verdict=verdict(limits, verification.stress, verification.corners_checked, snapped.series),
        sensitivity=sensitivity_section(problem, snapped.values, start),
    )


def _stopped(
    problem: Problem,
    solution: SolverResult,
    optimum_rows: list[dict[str, Any]],
    start: Any,
    notes: list[str],
    series: str,
    optimum: Any,
    file: str | None,
) -> list[str]:
    """A solver that stopped without converging: go on when its last point meets every
    limit (at every corner when robust), else raise with the least-violation report."""
    check_rows = error_rows = optimum_rows
    if problem.spec.solver.robust:
        check_rows = _worst_over_corners(problem, solution.values, optimum_rows, start)
        error_rows = [
            dict(
                row,
                margin_worst_corner=worst["margin"],
                relative_margin_worst_corner=worst["relative_margin"],
                worst_corner=worst["worst_corner"],
            )
            for row, worst in zip(optimum_rows, check_rows, strict=True)
        ]
    if is_feasible(check_rows):
        return notes + [
            f"the solver stopped with {solution.status}, but its last point meets every limit "
            "in the numeric verification"
        ]
    judged = failure_verdict(problem, solution.status, solution.values, error_rows)
    code = "infeasible_limits" if judged["status"] == "infeasible" else "solver_failed"
    values = ", ".join(f"{k} = {v:.4g}" for k, v in solution.values.items())
    error = TuningError(
        code,
        judged["summary"].replace("least-violation point:", f"least-violation point ({values}):"),
        file=file,
        location=("limits",),
    )
    error.result = TuningResult(  # type: ignore[attr-defined]
        name=problem.spec.name,
        series=series,
        feasible=False,
        variables=variable_rows(problem, solution.values, None),
        limits=[
            {**row, "margin_at_optimum": at_optimum["margin"]}
            for at_optimum, row in zip(optimum_rows, error_rows, strict=True)
        ],
        tightest=None,
        stress=[],
        solver=solver_figures(solution),
        objective={},
        corners_checked=0,
        toleranced_parts=[],
        notes=notes,
        responses=responses(problem, start.row(0), optimum, optimum),
        verdict=judged,
    )
    raise error


def _worst_over_corners(
    problem: Problem, values: dict[str, float], nominal_rows: list[dict[str, Any]], start: Any
) -> list[dict[str, Any]]:
    """Per limit, the row of least relative margin over the nominal values and every
    tolerance corner, with that corner."""
    worst = [dict(r, worst_corner={}) for r in nominal_rows]
    toleranced, _ = problem.tolerance_corners()
    if not toleranced:
        return worst
    corners = corner_points(problem, values)
    table = margin_table(problem, problem.evaluate(corners), start)
    for index, corner in enumerate(corners):
        for j, row in enumerate(margin_rows(problem, table, index)):
            if row["relative_margin"] < worst[j]["relative_margin"]:
                worst[j] = dict(row, worst_corner={n: corner[n] for n in toleranced})
    return worst
