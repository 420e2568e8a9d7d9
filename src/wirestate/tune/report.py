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
from wirestate.tune.problem import CURRENT_PREFIX, VALUE_UNITS

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
        out[name] = {
            "optimum": float(optimum[name]),
            "preferred": float((chosen or optimum)[name]),
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
            "sampled loop poles: the optimiser tests the discrete loop (a real-part limit "
            "exactly, through |z| < exp(sigma T); a damping-ratio limit on its Tustin "
            "equivalent); the verification uses s = ln(z) / T"
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
