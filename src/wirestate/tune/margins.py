"""Every limit's value and margin at numeric evaluations (one point or a batch).

The margin is the least distance to the bound over every sample (frequency, pole), in the
limit's own unit, positive where the limit holds. The optimiser's exchange, the snapping,
the tolerance corners, the yield and the sweeps all read their margins here, so a margin
means the same everywhere.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np

from wirestate.spec.tuning import Limit
from wirestate.tune import limits as measures
from wirestate.tune.evaluation import Evaluation

if TYPE_CHECKING:
    from wirestate.tune.problem import Problem

#: unit of a limit's value and margin by kind (others: the unit of the output they name)
LIMIT_UNITS = {
    "overshoot": "1",
    "settling": "1",
    "damping_ratio": "1",
    "pole_real_part": "1/s",
    "output_impedance": "ohm",
    "peak_current": "A",
    "energy": "J",
}
#: a margin of -1e-7 of the bound is rounding, not a violation
FEASIBILITY_TOLERANCE = 1e-7


def limit_unit(problem: Problem, limit: Limit) -> str:
    """The SI unit of a limit's value and margin (``"1"`` for fractions and ratios)."""
    if limit.kind in LIMIT_UNITS:
        return LIMIT_UNITS[limit.kind]
    return problem.units.get(limit.output, "") if limit.output else ""


def limit_bound(limit: Limit) -> float:
    """The bound a limit's margin is measured against."""
    if limit.kind in ("minimum", "damping_ratio"):
        return float(limit.min)
    if limit.kind == "settling":
        return float(limit.band)
    return float(limit.max)


@dataclass
class MarginTable:
    """Values and margins of every limit at every row of a batch (rows x limits)."""

    value: np.ndarray
    margin: np.ndarray
    bound: np.ndarray

    @property
    def relative(self) -> np.ndarray:
        """Margins divided by the size of their bound (the margin itself for a zero
        bound)."""
        size = np.where(self.bound != 0, np.abs(self.bound), 1.0)
        return self.margin / size

    @property
    def feasible(self) -> np.ndarray:
        """Rows that meet every limit (to the rounding allowance); NaN rows fail."""
        relative = np.nan_to_num(self.relative, nan=-np.inf)
        return np.all(relative >= -FEASIBILITY_TOLERANCE, axis=1)


def margin_table(
    problem: Problem, ev: Evaluation, start: Evaluation, *, fine: bool = True
) -> MarginTable:
    """Margins of every limit at every row of a numeric batch ``ev``.

    ``start`` (the evaluation at the starting point) fixes the direction of steps, as in
    the optimiser; ``fine`` evaluates impedance limits on a grid four times denser than the
    optimiser's, so a peak between the optimiser's frequencies is not missed.
    """
    batch = ev.batch()
    rows = batch.rows or 1
    limits = problem.spec.limits
    value = np.full((rows, len(limits)), np.nan)
    margin = np.full_like(value, np.nan)
    for j, limit in enumerate(limits):
        value[:, j], margin[:, j] = _one_limit(problem, limit, batch, start, fine)
    return MarginTable(value, margin, np.array([limit_bound(lim) for lim in limits]))


def _one_limit(
    problem: Problem, limit: Limit, ev: Evaluation, start: Evaluation, fine: bool
) -> tuple[np.ndarray, np.ndarray]:
    with np.errstate(all="ignore"):
        if limit.kind in measures.POLE_KINDS:
            return measures.pole_margin(limit, ev, problem)
        if limit.kind == "output_impedance" and fine:
            grid = measures.frequency_grid(limit, 4)
            peak = np.max(measures.impedance_magnitude(ev, problem, limit, grid), axis=-1)
            return peak, limit.max - peak
        vectors = measures.excess(limit, problem, ev, start)
        worst = np.max(np.column_stack([_row_max(v) for v in vectors]), axis=1)
    return value_from_excess(limit, worst), -worst


def value_from_excess(limit: Limit, worst: Any) -> Any:
    """A path, energy or impedance limit's value from its largest excess over its bound
    (:func:`wirestate.tune.limits.excess`; numbers or CasADi expressions): the least
    sample of a minimum, the largest deviation of a settling band, else the largest
    sample."""
    if limit.kind == "minimum":
        return limit.min - worst
    if limit.kind == "settling":
        return limit.band + worst
    return limit.max + worst


def _row_max(vector: Any) -> np.ndarray:
    """Per row of a batch: the largest entry of a rows x K array (a per-row scalar as is)."""
    vector = np.asarray(vector, dtype=float)
    return vector if vector.ndim == 1 else np.max(vector, axis=-1)


def limit_margins(
    problem: Problem, ev: Evaluation, start: Evaluation, *, fine: bool = True
) -> list[dict[str, Any]]:
    """Margin of every limit at one numeric evaluation (positive = met), in the limit's
    unit: rows with ``name, kind, bound, value, margin, relative_margin, unit``."""
    table = margin_table(problem, ev, start, fine=fine)
    return margin_rows(problem, table, 0)


def margin_rows(problem: Problem, table: MarginTable, row: int) -> list[dict[str, Any]]:
    """The rows of :func:`limit_margins` for row ``row`` of a :class:`MarginTable`."""
    relative = table.relative
    return [
        {
            "name": limit.label,
            "kind": limit.kind,
            "bound": float(table.bound[j]),
            "value": float(table.value[row, j]),
            "margin": float(table.margin[row, j]),
            "relative_margin": float(relative[row, j]),
            "unit": limit_unit(problem, limit),
        }
        for j, limit in enumerate(problem.spec.limits)
    ]


def is_feasible(rows: list[dict[str, Any]]) -> bool:
    """True when every row of :func:`limit_margins` holds (to the rounding allowance)."""
    return all(r["relative_margin"] >= -FEASIBILITY_TOLERANCE for r in rows)
