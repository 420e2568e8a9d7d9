"""The tuning report: stage 7 of the chain.

Input: the stages' outputs (solver result, snapped design, verification). Output: a
:class:`TuningResult`, whose :meth:`~TuningResult.to_dict` is the JSON report (SI base
units) and whose ``responses`` feed the figure.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np

from wirestate.tune import limits as measures
from wirestate.tune.evaluation import Evaluation
from wirestate.tune.margins import FEASIBILITY_TOLERANCE
from wirestate.tune.problem import CURRENT_PREFIX, VALUE_UNITS
from wirestate.tune.stress import over_ratings
from wirestate.units import format_quantity

if TYPE_CHECKING:
    from wirestate.tune.optimise import SolverResult
    from wirestate.tune.problem import Problem

CAUTIONS = (
    "Models are idealised (lumped, linear, no parasitics beyond those modelled, no "
    "temperature or ageing effects).",
    "Verify part ratings, pulse-energy capability and thermal design on the real hardware.",
    "Defer to local electrical codes and licensed professional practice.",
)


@dataclass
class TuningResult:
    """Outcome of :func:`wirestate.tune.solve`; :meth:`to_dict` gives the JSON report."""

    name: str
    series: str
    feasible: bool
    variables: dict[str, dict[str, Any]]
    limits: list[dict[str, Any]]
    tightest: dict[str, Any] | None
    stress: list[dict[str, Any]]
    solver: dict[str, Any]
    objective: dict[str, float]
    corners_checked: int
    toleranced_parts: list[str]
    notes: list[str] = field(default_factory=list)
    cautions: tuple[str, ...] = CAUTIONS
    responses: dict[str, Any] = field(default_factory=dict, repr=False)
    #: the verdict (:func:`verdict`): status, exit status, what failed, one line
    verdict: dict[str, Any] = field(default_factory=dict)
    #: the elasticities of every limit's value at the preferred values
    #: (:func:`sensitivity_section`); empty when there are no preferred values
    sensitivity: dict[str, Any] = field(default_factory=dict)

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready report; every number in SI base units."""
        return {
            "name": self.name,
            "series": self.series,
            "feasible": bool(self.feasible),
            "variables": {k: dict(v) for k, v in self.variables.items()},
            "limits": [dict(x) for x in self.limits],
            "tightest": None if self.tightest is None else dict(self.tightest),
            "stress": [dict(x) for x in self.stress],
            "solver": dict(self.solver),
            "objective": dict(self.objective),
            "corners_checked": self.corners_checked,
            "toleranced_parts": list(self.toleranced_parts),
            "notes": list(self.notes),
            "cautions": list(self.cautions),
            "verdict": dict(self.verdict),
            **self.sensitivity,
        }


def variable_rows(
    problem: Problem, optimum: dict[str, float], chosen: dict[str, float] | None
) -> dict[str, dict[str, Any]]:
    """Per design variable: optimum, preferred value, start, bounds, unit, tolerance."""
    start = problem.start_values()
    out = {}
    for name in problem.variables:
        part = problem.base_circuit.parts[name]
        var = problem.spec.variables[name]
        # without a snapped design (the optimiser failed) there is no preferred value
        out[name] = {
            "optimum": float(optimum[name]),
            "preferred": None if chosen is None else float(chosen[name]),
            "snapped": chosen is not None,
            "start": float(start[name]),
            "min": float(var.min),
            "max": float(var.max),
            "unit": VALUE_UNITS[part.kind],
            "tolerance": getattr(part, "tolerance", None),
        }
    return out


def solver_figures(solution: SolverResult) -> dict[str, Any]:
    """The solver part of the report."""
    return {
        "status": solution.status,
        "iterations": solution.iterations,
        "seconds": solution.seconds,
        "squarings": solution.squarings,
        "truncation_bound": solution.truncation_bound,
        "constraint_violation": solution.constraint_violation,
        **solution.stats,
    }


def responses(
    problem: Problem,
    start: Evaluation,
    chosen: Evaluation,
    optimum: Evaluation,
    envelope: dict[str, np.ndarray] | None = None,
) -> dict[str, Any]:
    """The data of the tuning figure: every limited output at the start, the optimum and
    the chosen values (outputs x samples), with the limits and impedance curves; with
    toleranced parts, ``corner_low`` and ``corner_high`` (the same shape as ``preferred``:
    the pointwise extremes over the tolerance corners at the chosen values)."""
    spec = problem.spec
    watched = [lim.output for lim in spec.limits if lim.output] + [
        CURRENT_PREFIX + lim.part for lim in spec.limits if lim.part
    ]
    names = list(dict.fromkeys(watched))
    out: dict[str, Any] = {
        "times": problem.times,
        "outputs": names,
        "index": {name: problem.outputs.index(name) for name in names},
        "start": start.Y,
        "preferred": chosen.Y,
        "optimum": optimum.Y,
        "units": problem.units,
        "limits": [lim.model_dump() for lim in spec.limits],
        "final": {},
        "impedance": [],
    }
    if envelope is not None:
        out.update(envelope)
    for name in names:
        i = problem.outputs.index(name)
        out["final"][name] = {"start": float(start.Y[i, -1]), "preferred": float(chosen.Y[i, -1])}
    for lim in spec.limits:
        if lim.kind == "output_impedance":
            omegas = measures.frequency_grid(lim, 2)
            out["impedance"].append(
                {
                    "name": lim.label,
                    "frequency": omegas / (2 * math.pi),
                    "start": measures.impedance_magnitude(start, problem, lim, omegas),
                    "preferred": measures.impedance_magnitude(chosen, problem, lim, omegas),
                    "max": float(lim.max),
                }
            )
    return out


def run_notes(problem: Problem, solution: SolverResult) -> list[str]:
    """What the reader of the report needs to know about how the numbers were made."""
    spec = problem.spec
    stats = solution.stats
    notes = [
        f"zero-order hold by Taylor scaling and squaring ({solution.squarings} squarings), "
        f"truncation bound {solution.truncation_bound:.1e} relative",
        "time-domain limits are checked at the samples of the scenario step; energies are "
        "exact integrals of the piecewise solution between them",
    ]
    if "rows_total" in stats:
        notes.append(
            f"the optimiser imposed {stats['rows_imposed']} of {stats['rows_total']} limit rows "
            f"(where each limit's signal peaks), chosen by an exchange in "
            f"{stats['exchange_rounds']} round(s); every row was checked after each solve"
        )
    if problem.sampled and problem.substeps > 1:
        notes.append(
            f"the controllers sample every {problem.step:g} s; the limits are checked every "
            f"{problem.output_step:g} s in between (continuous part advanced exactly, "
            "controller outputs held)"
        )
    if problem.system_loop is not None and problem.system_loop.output_ranges:
        notes.append(
            "controller output limits ("
            + ", ".join(s.split(".")[0] for s in problem.system_loop.output_ranges)
            + ") are kept as limits on the commands, so the loop never saturates and its "
            "linear model is exact"
        )
    pole_kinds = {lim.kind for lim in spec.limits} & set(measures.POLE_KINDS)
    if problem.sampled and pole_kinds:
        notes.append(
            "sampled loop poles: s = ln(z) / T for every pole z of the loop over one period, "
            "in the optimiser (a real-part limit through |z| < exp(sigma T), a damping-ratio "
            "limit on each pole) and in the verification alike"
        )
    if (
        problem.sampled
        and problem.system_loop is None
        and any(lim.kind == "output_impedance" for lim in spec.limits)
    ):
        notes.append("impedances of the sampled PI use its continuous counterpart")
    if problem.sampled and problem.system_loop is not None and spec.stress.ripple is not None:
        notes.append(
            "the ripple response holds the outputs of the sampled blocks "
            f"({', '.join(problem.system_loop.sampled)}) constant: the continuous part only"
        )
    if spec.solver.robust:
        notes.append(_robust_note(problem, stats))
    return notes


def _robust_note(problem: Problem, stats: dict[str, Any]) -> str:
    toleranced = problem.tolerance_corners()[0]
    count = stats.get("tolerance_corners_in_optimiser", 0)
    total = stats.get("tolerance_corners", count)
    outcome = (
        f"at the optimum every limit holds at all {total} of them"
        if stats.get("exchange_settled", True)
        else "the exchange stopped before every corner met every limit"
    )
    parts = ", ".join(toleranced) or "no toleranced parts"
    return (
        f"robust: limits imposed in the optimiser at the nominal values and at {count} of "
        f"{total} tolerance corners ({parts}), chosen by the exchange in "
        f"{stats.get('exchange_rounds', 1)} round(s); {outcome}"
    )


#: exit statuses of ``wirestate tune`` (README: "Tuning damping parts")
EXIT_MET = 0
EXIT_CORNERS_OR_RATINGS = 1
EXIT_NOT_MET = 2


def show_margin(value: float, kind: str, unit: str) -> str:
    """A value or margin in the limit's own unit: % for overshoot and settling (written as
    fractions of the change or final value), a bare number for a damping ratio, else the
    SI unit with a prefix."""
    if kind in ("overshoot", "settling"):
        return f"{100 * value:.3g} %"
    if unit in ("1", ""):
        return f"{value:.4g}"
    if unit == "1/s":
        return f"{value:.4g} 1/s"
    return format_quantity(value, unit)


def active_bounds(problem: Problem, values: dict[str, float]) -> list[str]:
    """``"Cd at its maximum 4.7 mF"`` for every design variable on a bound (to 1e-6 of its
    logarithmic range)."""
    out = []
    for name, (low, high) in problem.bounds.items():
        span = math.log(high / low)
        unit = VALUE_UNITS[problem.base_circuit.parts[name].kind]
        if abs(math.log(values[name] / low)) <= 1e-6 * span:
            out.append(f"{name} at its minimum {format_quantity(low, unit)}")
        elif abs(math.log(high / values[name])) <= 1e-6 * span:
            out.append(f"{name} at its maximum {format_quantity(high, unit)}")
    return out


def misses(rows: list[dict[str, Any]], key: str = "margin") -> list[str]:
    """``"bus_deviation misses by 0.21 %"`` for every row whose ``key`` margin fails."""
    out = []
    for row in rows:
        size = abs(row["bound"]) or 1.0
        if row[key] / size < -FEASIBILITY_TOLERANCE:
            shown = show_margin(-row[key], row["kind"], row["unit"])
            out.append(f"{row['name']} misses by {shown}")
    return out


def verdict(
    limits: list[dict[str, Any]], stress: list[dict[str, Any]], corners: int, series: str
) -> dict[str, Any]:
    """The verdict on the preferred values: every limit at nominal values, at every
    tolerance corner checked, and every rating; with the exit status and one line."""
    nominal = misses(limits)
    at_corners = misses(limits, "margin_worst_corner") if corners else []
    ratings = over_ratings(stress)
    if nominal:
        status, code = "not_met", EXIT_NOT_MET
        line = f"NOT every limit is met at the preferred values ({series}): " + "; ".join(nominal)
    else:
        problems = []
        if at_corners:
            problems.append(f"at the worst of {corners} tolerance corners " + "; ".join(at_corners))
        if ratings:
            problems.append("above rating: " + ", ".join(ratings))
        status = "met" if not problems else "corners_or_ratings_fail"
        code = EXIT_MET if not problems else EXIT_CORNERS_OR_RATINGS
        corner_text = f", at all {corners} tolerance corners" if corners else ""
        line = (
            f"every limit met at the preferred values{corner_text} and within every rating"
            if not problems
            else "every limit met at the preferred values, but " + "; ".join(problems)
        )
    return {
        "status": status,
        "exit_status": code,
        "limits_met": not nominal,
        "corners_met": None if not corners else not at_corners,
        "ratings_met": not ratings,
        "over_ratings": ratings,
        "summary": line,
    }


def failure_verdict(
    problem: Problem, status: str, values: dict[str, float], rows: list[dict[str, Any]]
) -> dict[str, Any]:
    """The verdict when the optimiser found no point inside every limit: infeasible
    (IPOPT proved it locally) told apart from stopped before converging."""
    from wirestate.tune.optimise import INFEASIBLE

    key = "margin_worst_corner" if rows and "margin_worst_corner" in rows[0] else "margin"
    failing = misses(rows, key)
    bounds = active_bounds(problem, values)
    if status in INFEASIBLE:
        kind, head = (
            "infeasible",
            "no point meets every limit (the optimiser found the limits infeasible)",
        )
    else:
        kind, head = "not_converged", f"the optimiser stopped without converging ({status})"
    line = f"{head}; at the least-violation point: {'; '.join(failing) or 'no limit fails'}"
    if bounds:
        line += "; active bounds: " + ", ".join(bounds)
    return {
        "status": kind,
        "exit_status": EXIT_NOT_MET,
        "limits_met": False,
        "corners_met": None,
        "ratings_met": None,
        "over_ratings": [],
        "active_bounds": bounds,
        "summary": line,
    }


def sensitivity_section(
    problem: Problem, preferred: dict[str, float], start: Evaluation
) -> dict[str, Any]:
    """The report's "most sensitive parts": per limit, the parts whose values move its value
    most at the preferred design (:func:`wirestate.tune.sensitivity.limit_sensitivities`,
    one AD evaluation through the case's own loop).

    Returns
    -------
    dict
        ``most_sensitive_parts`` (limit -> up to three ``{part, elasticity}``, largest
        ``|elasticity|`` first), ``sensitivity`` (limit -> part -> elasticity, every part
        with a value), ``sensitivity_notes`` (limit -> note; ``"design"``: where the
        elasticities were taken and how maxima over samples are differentiated) and
        ``sensitivity_active`` (limit -> the sample, frequency or mode that attains it).
        Empty, with a note under ``sensitivity_notes``, when the derivatives cannot be
        evaluated at these values.
    """
    from wirestate.errors import WirestateError
    from wirestate.tune.sensitivity import limit_sensitivities

    try:
        found = limit_sensitivities(problem, preferred, start, at="the preferred values")
    except WirestateError as exc:
        return {"sensitivity_notes": {"design": f"no elasticities: {exc.message}"}}
    except (RuntimeError, np.linalg.LinAlgError) as exc:
        # CasADi or LAPACK failing on numbers the verification accepted must not cost the
        # user the tuning itself: the section says why it is missing
        return {"sensitivity_notes": {"design": f"no elasticities: {exc}"}}
    return {
        "most_sensitive_parts": found.most_sensitive(),
        "sensitivity": found.to_dict(),
        "sensitivity_notes": {
            **found.quantity_notes(),
            "design": "; ".join([f"at {found.at}", *found.notes]),
        },
        "sensitivity_active": dict(found.active),
    }
