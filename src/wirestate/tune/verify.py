"""Re-verification of the chosen values: stage 6 of the chain.

Input: the chosen part values (:class:`~wirestate.tune.snap.SnappedDesign`). Output: a
:class:`Verification`. Every limit is re-verified at the chosen values through the
independent numeric path (:meth:`Problem.numeric`: the numeric compile and scipy's
exponential, not the optimiser's CasADi elimination and Taylor exponential), then at every
tolerance corner in one parametric batch. The parametric batch also holds the nominal
point, and its margins must agree with the independent ones (to 1e-6 of each bound);
otherwise the corners are evaluated one by one through the independent path as well.
The stress report and the response envelope over the corners come from the same
evaluations.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np

from wirestate.errors import WirestateError
from wirestate.tune.evaluation import Evaluation
from wirestate.tune.margins import limit_margins, margin_rows, margin_table
from wirestate.tune.problem import VALUE_UNITS
from wirestate.tune.snap import corner_points
from wirestate.tune.stress import stress_report

if TYPE_CHECKING:
    from wirestate.tune.problem import Problem

#: parametric and independent margins at the same point agree to this fraction of the bound
AGREEMENT = 1e-6


@dataclass
class Verification:
    """Margins at the chosen values and at their worst tolerance corner, stress, and the
    response envelope over the corners.

    ``rows`` per limit: the margin rows of :func:`~wirestate.tune.margins.limit_margins`
    plus ``margin_worst_corner``, ``relative_margin_worst_corner`` and ``worst_corner``
    (part values, ``{}`` when the nominal values are the worst). ``envelope`` holds
    ``corner_low`` and ``corner_high`` (outputs x samples, the pointwise extremes over the
    corners), ``None`` without toleranced parts.
    """

    rows: list[dict[str, Any]]
    stress: list[dict[str, Any]]
    corners_checked: int
    toleranced: list[str]
    evaluation: Evaluation
    #: SI unit of each toleranced part's value
    part_units: dict[str, str] = field(default_factory=dict)
    envelope: dict[str, np.ndarray] | None = None
    notes: list[str] = field(default_factory=list)

    @property
    def tightest(self) -> dict[str, Any] | None:
        """The limit with the least relative margin at its worst corner."""
        if not self.rows:
            return None
        t = min(self.rows, key=lambda r: r["relative_margin_worst_corner"])
        keys = ("name", "margin", "margin_worst_corner", "relative_margin_worst_corner",
                "worst_corner", "unit")  # fmt: skip
        return {**{k: t[k] for k in keys}, "worst_corner_units": self.part_units}


def verify(
    problem: Problem,
    values: dict[str, float],
    start: Evaluation,
    say: Callable[[str], None],
) -> Verification:
    """Re-verify ``values`` (the design variables); see the module docstring."""
    independent = problem.numeric(values)
    nominal = limit_margins(problem, independent, start)
    rows = [dict(r, margin_worst_corner=r["margin"], worst_corner={}) for r in nominal]
    toleranced, _ = problem.tolerance_corners()
    checked, envelope, notes = 0, None, []
    if problem.spec.stress.tolerance_corners and toleranced:
        corners = corner_points(problem, values)
        say(f"tolerance corners: {len(corners)} ({', '.join(toleranced)})")
        per_corner, batch, note = _corner_margins(problem, values, corners, nominal, start)
        notes += note
        for corner, corner_rows in zip(corners, per_corner, strict=True):
            for row, corner_row in zip(rows, corner_rows, strict=True):
                if corner_row["margin"] < row["margin_worst_corner"]:
                    row["margin_worst_corner"] = corner_row["margin"]
                    row["worst_corner"] = {n: corner[n] for n in toleranced}
        checked = len(corners)
        say(f"corners checked: {checked}/{checked}")
        if batch is not None:
            with np.errstate(invalid="ignore"):
                Y = np.asarray(batch.Y)[1:]
                envelope = {"corner_low": np.min(Y, axis=0), "corner_high": np.max(Y, axis=0)}
    for row in rows:
        size = abs(row["bound"]) or 1.0
        row["relative_margin_worst_corner"] = row["margin_worst_corner"] / size
    return Verification(
        rows=rows,
        stress=stress_report(problem, independent),
        corners_checked=checked,
        toleranced=list(toleranced),
        evaluation=independent,
        envelope=envelope,
        notes=notes,
        part_units={n: _value_unit(problem, n) for n in toleranced},
    )


def _value_unit(problem: Problem, name: str) -> str:
    part = problem.base_circuit.parts.get(name)
    return VALUE_UNITS.get(getattr(part, "kind", ""), "")


def _corner_margins(
    problem: Problem,
    values: dict[str, float],
    corners: list[dict[str, float]],
    nominal: list[dict[str, Any]],
    start: Evaluation,
) -> tuple[list[list[dict[str, Any]]], Evaluation | None, list[str]]:
    """Margin rows at every corner: one parametric batch holding the nominal point too,
    checked against the independent margins there; one by one through the independent
    path if they disagree."""
    batch = problem.evaluate([problem.corner_values(values, {})] + corners)
    table = margin_table(problem, batch, start)
    check = margin_rows(problem, table, 0)
    gap = max(
        (
            abs(a["margin"] - b["margin"]) / (abs(a["bound"]) or 1.0)
            for a, b in zip(nominal, check, strict=True)
        ),
        default=0.0,
    )
    if np.isfinite(gap) and gap <= AGREEMENT:
        return [margin_rows(problem, table, i) for i in range(1, len(corners) + 1)], batch, []
    per_corner = []
    for corner in corners:
        try:
            per_corner.append(limit_margins(problem, problem.numeric(corner), start))
        except WirestateError:
            per_corner.append([dict(r, margin=np.inf) for r in nominal])
    note = (
        f"the parametric evaluation differed from the independent one by {gap:.1e} of a "
        "bound; every corner was re-verified through the independent path"
    )
    return per_corner, None, [note]
