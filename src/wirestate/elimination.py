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

When the elimination creates more entries than ``budget`` (a circuit whose solution is
dense, such as a resistive mesh joining every capacitor), it gives up and returns ``None``;
the caller then uses a general sparse LU, which is faster for dense results.
"""

from __future__ import annotations

import heapq
from collections.abc import Sequence

#: a pivot must be at least this fraction of the largest entry of its column (common
#: choice 0.1; Duff, Erisman and Reid 2017, sec. 5.3)
PIVOT_THRESHOLD = 0.1

LinearRow = dict[int, float]


class SingularEquations(Exception):
    """No usable pivot is left for unknown ``column`` (the equations are singular)."""

    def __init__(self, column: int) -> None:
        super().__init__(f"no pivot for unknown {column}")
        self.column = column


def eliminate(
    rows: Sequence[LinearRow],
    known: Sequence[LinearRow],
    n_unknowns: int,
    *,
    budget: int,
) -> list[LinearRow] | None:
    """Solve ``M w + N k = 0`` for every unknown as a linear form of the knowns.

    Parameters
    ----------
    rows
        Row ``i`` of ``M`` as ``{unknown index: coefficient}`` (square: one row per unknown).
    known
        Row ``i`` of ``N`` as ``{known index: coefficient}``.
    n_unknowns
        Number of unknowns (columns of ``M``).
    budget
        Most entries (of the factors and of the solution) to create before giving up.

    Returns
    -------
    list of dict or None
        ``solution[j] = {known index: coefficient}`` with ``w_j = sum(coefficient * k)``;
        ``None`` when the budget was exceeded.

    Raises
    ------
    SingularEquations
        When some unknown has no non-zero coefficient left in the remaining rows.
    """
    R = [dict(row) for row in rows]
    K = [dict(row) for row in known]
    column_rows: list[set[int]] = [set() for _ in range(n_unknowns)]
    for i, row in enumerate(R):
        for j in row:
            column_rows[j].add(i)
    heap = [(len(members), j) for j, members in enumerate(column_rows)]
    heapq.heapify(heap)
    done = [False] * n_unknowns
    pivots: list[tuple[int, int]] = []
    entries = sum(len(row) + len(k) for row, k in zip(R, K, strict=True))
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
        pivots.append((p, j))
        pivot_row, pivot_known = R[p], K[p]
        pivot = pivot_row[j]
        for k in pivot_row:
            column_rows[k].discard(p)
        touched = set(pivot_row)
        for i in members:
            if i == p:
                continue
            row, row_known = R[i], K[i]
            factor = row.pop(j) / pivot
            for k, v in pivot_row.items():
                if k == j:
                    continue
                if k in row:
                    new = row[k] - factor * v
                    if new == 0.0:  # exact cancellation: the entry is structurally gone
                        del row[k]
                        column_rows[k].discard(i)
                    else:
                        row[k] = new
                else:
                    row[k] = -factor * v
                    column_rows[k].add(i)
                    entries += 1
            for k, v in pivot_known.items():
                new = row_known.get(k, 0.0) - factor * v
                if k not in row_known:
                    entries += 1
                row_known[k] = new
            if entries > budget:
                return None
        members.clear()
        for k in touched:
            if not done[k]:
                heapq.heappush(heap, (len(column_rows[k]), k))
    if len(pivots) < n_unknowns:  # pragma: no cover - every column is popped once
        raise SingularEquations(next(j for j in range(n_unknowns) if not done[j]))
    # back substitution in reverse pivot order: every other unknown in a pivot row was
    # pivoted later, so its form is known by then
    solution: list[LinearRow] = [{} for _ in range(n_unknowns)]
    for p, j in reversed(pivots):
        row = R[p]
        pivot = row[j]
        form = {k: -v / pivot for k, v in K[p].items() if v != 0.0}
        for k, v in row.items():
            if k == j:
                continue
            factor = v / pivot
            for c, w in solution[k].items():
                form[c] = form.get(c, 0.0) - factor * w
        solution[j] = form
        entries += len(form)
        if entries > budget:
            return None
    return solution
