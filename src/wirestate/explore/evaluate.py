"""Margins of every limit of a tuning file at many sets of part values: the evaluator
behind the tolerance Monte Carlo and the design sweeps.

:class:`MarginEvaluator` is the only place where this package touches the tuning code. Its
interface is one call, :meth:`MarginEvaluator.evaluate`, taking a batch of part values
(samples x parts) and returning every limit's margin (samples x limits); everything else
in :mod:`wirestate.explore` works on those arrays.

How it evaluates: the tuning case's shared parametric loop
(:meth:`wirestate.tune.problem.Problem.parametric`, compiled once per process over the
chosen parts and their whole range of values) evaluates a batch of rows at once, and
:func:`wirestate.tune.margins.margin_table` takes every limit's margin for every row with
the same code that verifies a tuning, so a margin here is the margin ``wirestate tune``
prints.

:meth:`MarginEvaluator.evaluate_plain` is the plain reference: one independent numeric
compile and simulation per row (:meth:`~wirestate.tune.problem.Problem.numeric`) and the
same margins; tests check the two agree.
"""

from __future__ import annotations

import uuid
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from wirestate.errors import WirestateError
from wirestate.tune.margins import FEASIBILITY_TOLERANCE, limit_margins, margin_table
from wirestate.tune.problem import VALUE_KINDS, VALUE_UNITS, Problem

#: unit of each value kind (SI)
KIND_UNITS = VALUE_UNITS


@dataclass(frozen=True)
class LimitInfo:
    """One limit of the tuning file: name, kind, bound and the unit of its margin."""

    name: str
    kind: str
    bound: float
    unit: str


@dataclass
class Margins:
    """Margins of a batch: ``margin[i, j]`` of limit ``j`` at row ``i`` in the limit's unit
    (positive = met), ``relative`` the same divided by the bound's size; NaN where the
    circuit has no solution at that row's values."""

    margin: np.ndarray
    relative: np.ndarray

    @property
    def met(self) -> np.ndarray:
        """Boolean (rows x limits): the limit holds at that row."""
        return np.nan_to_num(self.relative, nan=-np.inf) >= -FEASIBILITY_TOLERANCE


class MarginEvaluator:
    """Margins of every limit of a tuning case at batches of part values.

    Parameters
    ----------
    model
        The tuning case (:class:`wirestate.tune.problem.Problem` of a tuning file).
    parts
        The parts whose values the batches give, in column order.
    ranges
        ``part -> (low, high)``: the values the batches may hold (SI units); the zero-order
        hold is made accurate over this whole box.
    fixed
        Values of other parts that differ from the circuit file (SI units), held for
        every row (for example the preferred values of the last tuning).
    """

    def __init__(
        self,
        model: Problem,
        parts: Sequence[str],
        ranges: Mapping[str, tuple[float, float]],
        *,
        fixed: Mapping[str, float] | None = None,
    ) -> None:
        self.model = model
        #: names this evaluator in every process it is copied to (see explore.cluster)
        self.token = uuid.uuid4().hex
        self.parts = list(parts)
        self.fixed = {k: float(v) for k, v in (fixed or {}).items() if k not in self.parts}
        self.ranges = {p: (float(ranges[p][0]), float(ranges[p][1])) for p in self.parts}
        # the limits' step directions come from the tuning's starting point, exactly as in
        # the tuning's own verification
        self._start = model.evaluate([model.start_values()])
        box = {**{k: (v, v) for k, v in self.fixed.items()}, **self.ranges}
        self.loop = model.parametric(self.symbols, box)
        centre = [0.5 * (lo + hi) for lo, hi in self.ranges.values()]
        rows = limit_margins(
            model,
            model.numeric({**self.fixed, **dict(zip(self.parts, centre, strict=True))}),
            self._start,
        )
        self.limits = [LimitInfo(r["name"], r["kind"], r["bound"], r["unit"]) for r in rows]

    @property
    def symbols(self) -> list[str]:
        """Parameters of the compiled loop: the varied parts, then the fixed ones."""
        return self.parts + list(self.fixed)

    def prepare(self) -> MarginEvaluator:
        """Build the compiled loop now (once per process) rather than on the first batch;
        returns ``self``."""
        self.loop.compile()
        return self

    @property
    def compilations(self) -> int:
        """Times this copy built its compiled loop (one per process, see :meth:`prepare`;
        a pickled copy starts at 0 and builds on its own)."""
        return self.loop.builds

    @property
    def squarings(self) -> int:
        """Squarings of the Taylor exponential of the compiled loop."""
        return self.loop.squarings

    def evaluate(self, values: np.ndarray) -> Margins:
        """Margins of every limit at each row of ``values`` (rows x :attr:`parts`, SI)."""
        values = np.atleast_2d(np.asarray(values, dtype=float))
        fixed = np.array(list(self.fixed.values()), dtype=float)
        rows = np.hstack([values, np.tile(fixed, (values.shape[0], 1))])
        ev = self.loop.evaluate(rows)
        table = margin_table(self.model, ev, self._start)
        margin, relative = table.margin, table.relative
        # no solution at these values (a singular circuit or a trajectory that left the
        # floating-point range): the row stays NaN and counts as failing
        finite = np.all(np.isfinite(ev.Phi), axis=(1, 2)) & np.all(np.isfinite(ev.X), axis=(1, 2))
        margin[~finite] = np.nan
        relative[~finite] = np.nan
        return Margins(margin, relative)

    def evaluate_plain(self, values: np.ndarray) -> Margins:
        """The reference: per row one independent numeric compile and simulation
        (:meth:`Problem.numeric`) and the same margins. Slow; for tests and benchmarks."""
        values = np.atleast_2d(np.asarray(values, dtype=float))
        margin = np.full((values.shape[0], len(self.limits)), np.nan)
        relative = np.full_like(margin, np.nan)
        for i, row in enumerate(values):
            try:
                ev = self.model.numeric({**self.fixed, **dict(zip(self.parts, row, strict=True))})
            except WirestateError:
                continue
            if not (np.all(np.isfinite(ev.Phi)) and np.all(np.isfinite(ev.X))):
                continue
            rows = limit_margins(self.model, ev, self._start)
            margin[i] = [r["margin"] for r in rows]
            relative[i] = [r["relative_margin"] for r in rows]
        return Margins(margin, relative)


def value_parts(model: Problem) -> dict[str, Any]:
    """The parts of the tuning's circuit that have a value a sample can change."""
    return {n: p for n, p in model.base_circuit.parts.items() if p.kind in VALUE_KINDS}
