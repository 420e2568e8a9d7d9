"""Sparse Gaussian elimination of the stamped circuit equations, in plain Python.

The stamped system ``M w + N k = 0`` (unknowns ``w``, knowns ``k = [x; u; du]``, see
:mod:`wirestate.equations`) is very sparse, and for the circuits wirestate is made for
(filters, ladders, cable and winding models) so is its solution: a node potential or a
state derivative depends on a few neighbouring states only. Eliminating one unknown at a
time on the rows held as dictionaries therefore costs time in proportion to the entries
actually created, which is linear in the circuit size for ladder-like circuits, while a
solve with a general sparse LU costs one triangular solve per known column (quadratic).

Pivots follow the Markowitz strategy restricted to one column, with threshold partial
pivoting (Duff, Erisman and Reid, Direct Methods for Sparse Matrices, 2nd ed., 2017,
secs. 5.3 and 10.2): the unknown in the fewest active rows is eliminated next, by the
shortest of its rows whose coefficient is at least ``PIVOT_THRESHOLD`` times the largest
in that column. The threshold bounds the growth of entries per step by ``1 + 1/u``; the
short rows keep fill, and with it round-off mixed into structurally zero results, low,
so results that are exactly zero stay exactly zero (the same effect SuperLU's fill-reducing
ordering has), also when part values lie many decades apart.

The pivots are chosen on numbers, and the sequence is returned (:attr:`Elimination.pivots`).
Given back as ``order``, the same function *replays* it: the same operations in the same
sequence, on rows whose coefficients may be CasADi expressions. This is how the symbolic
compile (:func:`wirestate.reduce.symbolic_from_equations`) gets the numeric compile's
elimination, operation for operation, so both agree to the last bit at the values the
pivots were chosen at. A replay on numbers with ``min_ratio`` checks that the recorded
pivots stay usable at other part values.

When the elimination creates more entries than ``budget`` (a circuit whose solution is
dense, such as a resistive mesh joining every capacitor), it gives up and returns ``None``;
the caller then uses a general sparse LU, which is faster for dense results.
"""

from __future__ import annotations

import heapq
import math
from collections.abc import Iterator, Sequence
from dataclasses import dataclass, field
from typing import Any

#: a pivot must be at least this fraction of the largest entry of its column (common
#: choice 0.1; Duff, Erisman and Reid 2017, sec. 5.3)
PIVOT_THRESHOLD = 0.1

LinearRow = dict[int, Any]


class SingularEquations(Exception):
    """No usable pivot is left for unknown ``column`` (the equations are singular)."""

    def __init__(self, column: int) -> None:
        super().__init__(f"no pivot for unknown {column}")
        self.column = column


class UnstablePivot(Exception):
    """A replayed pivot fell below ``min_ratio`` of the largest coefficient of its unknown.

    Attributes ``step``, ``row``, ``column`` (the pivot) and ``ratio`` (its size relative
    to the column's largest entry, 0 when it vanished).
    """

    def __init__(self, step: int, row: int, column: int, ratio: float) -> None:
        super().__init__(f"pivot {step} (row {row}, unknown {column}) is {ratio:.3g} of its column")
        self.step, self.row, self.column, self.ratio = step, row, column, ratio


@dataclass
class Elimination:
    """The result of :func:`eliminate`.

    Attributes
    ----------
    solution
        ``solution[j] = {known index: coefficient}`` with ``w_j = sum(coefficient * k)``.
    pivots
        ``(row, unknown)`` in elimination order; pass it as ``order`` to replay.
    contested
        Step -> the coefficients of that step's unknown in every row that still had it,
        the pivot first, for the steps where more than one row had it. Only there could
        other part values have asked for another pivot: where one row is left, the pivot is
        the whole column of the remaining equations, so it can vanish only where those are
        singular.
    """

    solution: list[LinearRow]
    pivots: list[tuple[int, int]]
    contested: dict[int, list[Any]] = field(default_factory=dict)


def is_exact_zero(value: Any) -> bool:
    """True for the number 0 and for a CasADi expression that is zero by its structure.

    A CasADi expression is never dropped for being zero at some values only: it may not be
    zero at others.
    """
    if isinstance(value, float | int):
        return value == 0.0
    return bool(value.is_zero())


def eliminate(
    rows: Sequence[LinearRow],
    known: Sequence[LinearRow],
    n_unknowns: int,
    *,
    budget: float = math.inf,
    order: Sequence[tuple[int, int]] | None = None,
    min_ratio: float = 0.0,
) -> Elimination | None:
    """Solve ``M w + N k = 0`` for every unknown as a linear form of the knowns.

    Parameters
    ----------
    rows
        Row ``i`` of ``M`` as ``{unknown index: coefficient}`` (square: one row per unknown).
        Coefficients are floats, or CasADi expressions when replaying ``order``.
    known
        Row ``i`` of ``N`` as ``{known index: coefficient}``.
    n_unknowns
        Number of unknowns (columns of ``M``).
    budget
        Most entries (of the factors and of the solution) to create before giving up.
    order
        Pivots ``(row, unknown)`` to replay (:attr:`Elimination.pivots` of an elimination of
        the same structure); ``None`` chooses them (Markowitz, threshold pivoting).
    min_ratio
        With ``order`` and float coefficients: refuse a pivot smaller than this fraction of
        the largest coefficient of its unknown in the remaining rows.

    Returns
    -------
    Elimination or None
        The solution and the pivots; ``None`` when the budget was exceeded.

    Raises
    ------
    SingularEquations
        When some unknown has no non-zero coefficient left in the remaining rows.
    UnstablePivot
        When a replayed pivot is below ``min_ratio`` of its column.
    """
    R = [dict(row) for row in rows]
    K = [dict(row) for row in known]
    column_rows: list[set[int]] = [set() for _ in range(n_unknowns)]
    for i, row in enumerate(R):
        for j in row:
            column_rows[j].add(i)
    if order is None:
        steps = _markowitz(R, K, column_rows)
    else:
        steps = _replay(order, R, column_rows, min_ratio)
    is_zero = is_exact_zero
    pivots: list[tuple[int, int]] = []
    contested: dict[int, list[Any]] = {}
    entries = sum(len(row) + len(k) for row, k in zip(R, K, strict=True))
    for p, j in steps:
        members = column_rows[j]
        if len(members) > 1:
            contested[len(pivots)] = [R[p][j], *(R[i][j] for i in members if i != p)]
        pivots.append((p, j))
        pivot_row, pivot_known = R[p], K[p]
        pivot = pivot_row[j]
        for k in pivot_row:
            column_rows[k].discard(p)
        for i in members:
            row, row_known = R[i], K[i]
            factor = row.pop(j) / pivot
            for k, v in pivot_row.items():
                if k == j:
                    continue
                if k in row:
                    new = row[k] - factor * v
                    if is_zero(new):  # exact cancellation: the entry is structurally gone
                        del row[k]
                        column_rows[k].discard(i)
                    else:
                        row[k] = new
                else:
                    row[k] = -factor * v
                    column_rows[k].add(i)
                    entries += 1
            for k, v in pivot_known.items():
                if k in row_known:
                    row_known[k] = row_known[k] - factor * v
                else:
                    row_known[k] = -factor * v
                    entries += 1
            if entries > budget:
                return None
        members.clear()
    if len(pivots) < n_unknowns:  # pragma: no cover - every column is pivoted once
        done = {j for _, j in pivots}
        raise SingularEquations(next(j for j in range(n_unknowns) if j not in done))
    solution = _back_substitution(R, K, pivots, budget - entries)
    return None if solution is None else Elimination(solution, pivots, contested)


def _back_substitution(
    R: list[LinearRow], K: list[LinearRow], pivots: list[tuple[int, int]], budget: float
) -> list[LinearRow] | None:
    """The solution from the eliminated rows, in reverse pivot order: every other unknown
    in a pivot row was pivoted later, so its form is known by then (``None`` past
    ``budget`` new entries)."""
    solution: list[LinearRow] = [{} for _ in pivots]
    entries = 0
    for p, j in reversed(pivots):
        row = R[p]
        pivot = row[j]
        form = {k: -v / pivot for k, v in K[p].items() if not is_exact_zero(v)}
        for k, v in row.items():
            if k == j:
                continue
            factor = v / pivot
            for c, w in solution[k].items():
                form[c] = form[c] - factor * w if c in form else -factor * w
        solution[j] = form
        entries += len(form)
        if entries > budget:
            return None
    return solution


def _markowitz(
    R: list[LinearRow], K: list[LinearRow], column_rows: list[set[int]]
) -> Iterator[tuple[int, int]]:
    """Choose the pivots one step at a time (the caller eliminates between the steps)."""
    heap = [(len(members), j) for j, members in enumerate(column_rows)]
    heapq.heapify(heap)
    done = [False] * len(column_rows)
    while heap:
        count, j = heapq.heappop(heap)
        if done[j] or count != len(column_rows[j]):
            continue  # a stale heap entry; the current count was pushed again
        members = column_rows[j]
        if len(members) == 1:  # most unknowns of a circuit: no choice to make
            p = next(iter(members))
            if R[p][j] == 0.0:  # pragma: no cover - exact zeros are dropped on creation
                raise SingularEquations(j)
        else:
            largest = max((abs(R[i][j]) for i in members), default=0.0)
            if largest == 0.0:
                raise SingularEquations(j)
            floor = PIVOT_THRESHOLD * largest
            p = min(
                (i for i in members if abs(R[i][j]) >= floor),
                key=lambda i: (len(R[i]) + len(K[i]), -abs(R[i][j])),
            )
        done[j] = True
        touched = list(R[p])  # the only columns whose counts the step changes
        yield p, j
        for k in touched:
            if not done[k]:
                heapq.heappush(heap, (len(column_rows[k]), k))


def _replay(
    order: Sequence[tuple[int, int]],
    R: list[LinearRow],
    column_rows: list[set[int]],
    min_ratio: float,
) -> Iterator[tuple[int, int]]:
    """The recorded pivots, checked on numbers against ``min_ratio``."""
    for step, (p, j) in enumerate(order):
        members = column_rows[j]
        if not members:
            raise SingularEquations(j)
        if j not in R[p]:
            raise UnstablePivot(step, p, j, 0.0)
        if min_ratio and len(members) > 1:
            largest = max(abs(R[i][j]) for i in members)
            ratio = abs(R[p][j]) / largest
            if ratio < min_ratio:
                raise UnstablePivot(step, p, j, ratio)
        yield p, j
