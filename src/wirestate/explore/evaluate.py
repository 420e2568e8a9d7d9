"""Margins of every limit of a tuning file at many sets of part values: the evaluator
behind the tolerance Monte Carlo and the design sweeps.

:class:`MarginEvaluator` is the only place where this package touches the tuning code. Its
interface is one call, :meth:`MarginEvaluator.evaluate`, taking a batch of part values
(samples x parts) and returning every limit's margin (samples x limits); everything else
in :mod:`wirestate.explore` works on those arrays.

How it evaluates (compile once, re-evaluate many times):

1. once per process, the loop matrices of the tuning case (the zero-order hold of the
   closed loop, its output maps, the continuous loop, the initial state) are built as
   CasADi ``SX`` expressions of the chosen part values by
   :meth:`wirestate.tune.model.TuningModel.symbolic` (the same circuit compile the
   optimiser uses, :func:`wirestate.reduce.symbolic_state_space`; the hold by Taylor
   scaling and squaring, :mod:`wirestate.tune.expm`, with enough squarings for the whole
   range of values, :meth:`~wirestate.tune.model.TuningModel.squarings`) and wrapped in one
   CasADi function;
2. per batch, that function is evaluated for every row at once (``Function.map``), the
   trajectories ``x[k+1] = Phi x[k] + Gamma v[k]`` of all rows are stepped together, and
   each row's margins come from :func:`wirestate.tune.solve.limit_margins`, the same code
   that verifies a tuning, so a margin here is the margin ``wirestate tune`` prints.

:meth:`MarginEvaluator.evaluate_plain` is the plain reference: one numeric compile, one
simulation (:meth:`~wirestate.tune.model.TuningModel.numeric`) and the same margins per
row; tests check the two agree.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from wirestate.errors import WirestateError
from wirestate.tune.model import Evaluation, TuningModel
from wirestate.tune.nlp import start_values
from wirestate.tune.solve import limit_margins

#: parts whose value a sample can change
VALUE_KINDS = ("resistor", "capacitor", "inductor")
#: unit of each value kind (SI)
KIND_UNITS = {"resistor": "ohm", "capacitor": "F", "inductor": "H"}
#: a limit counts as met when its margin is at least this fraction of its bound below zero,
#: the rounding allowance of the tuning's own verification
FEASIBILITY_TOLERANCE = 1e-7


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
    """Margins of every limit of ``spec`` at batches of part values.

    Parameters
    ----------
    model
        The tuning case (:class:`wirestate.tune.model.TuningModel` of a tuning file).
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
        model: TuningModel,
        parts: Sequence[str],
        ranges: Mapping[str, tuple[float, float]],
        *,
        fixed: Mapping[str, float] | None = None,
    ) -> None:
        self.model = model
        self.parts = list(parts)
        self.fixed = {k: float(v) for k, v in (fixed or {}).items() if k not in self.parts}
        self.ranges = {p: (float(ranges[p][0]), float(ranges[p][1])) for p in self.parts}
        # the limits' step directions come from the tuning's starting point, exactly as in
        # the tuning's own verification
        self._start = self.model.numeric(start_values(self.model))
        centre = {p: 0.5 * (lo + hi) for p, (lo, hi) in self.ranges.items()}
        rows = limit_margins(self.model, self.model.numeric({**self.fixed, **centre}), self._start)
        self.limits = [LimitInfo(r["name"], r["kind"], r["bound"], r["unit"]) for r in rows]
        box = {**{k: (v, v) for k, v in self.fixed.items()}, **self.ranges}
        self.squarings = self.model.squarings(box, {**self.fixed, **centre})
        self._function: Any = None
        #: times this copy built its compiled function (one per process, see prepare)
        self.compilations = 0

    # pickled for worker processes without the CasADi function: each process builds it
    # once, on its first batch
    def __getstate__(self) -> dict[str, Any]:
        state = dict(self.__dict__)
        state["_function"] = None
        state["compilations"] = 0
        return state

    @property
    def symbols(self) -> list[str]:
        """Parameters of the compiled function: the varied parts, then the fixed ones."""
        return self.parts + list(self.fixed)

    def prepare(self) -> MarginEvaluator:
        """Build the compiled loop-matrix function now (once per process) rather than on
        the first batch; returns ``self``."""
        self._compiled()
        return self

    def _compiled(self) -> Any:
        if self._function is None:
            import casadi

            p = casadi.SX.sym("p", len(self.symbols))
            values = {name: p[i] for i, name in enumerate(self.symbols)}
            matrices = self.model.symbolic(values, self.squarings)
            self._keys = [k for k in matrices if k != "steady"]
            self.compilations += 1
            self._function = casadi.Function(
                "loop_matrices", [p], [matrices[k] for k in self._keys]
            )
        return self._function

    def evaluate(self, values: np.ndarray) -> Margins:
        """Margins of every limit at each row of ``values`` (rows x :attr:`parts`, SI)."""
        values = np.atleast_2d(np.asarray(values, dtype=float))
        rows = values.shape[0]
        function = self._compiled()
        fixed = np.array(list(self.fixed.values()), dtype=float)
        params = np.hstack([values, np.tile(fixed, (rows, 1))]).T
        outputs = function.map(rows)(params)
        if not isinstance(outputs, list | tuple):
            outputs = [outputs]
        stacked = {k: _split(np.array(o), rows) for k, o in zip(self._keys, outputs, strict=True)}
        X = self._trajectories(stacked["Phi"], stacked["Gamma"], stacked["x0"][:, :, 0])
        margin = np.full((rows, len(self.limits)), np.nan)
        relative = np.full_like(margin, np.nan)
        model = self.model
        for i in range(rows):
            maps = [(stacked["C"][i], stacked["D"][i])] + [
                (stacked[f"C_sub{j}"][i], stacked[f"D_sub{j}"][i]) for j in range(1, model.substeps)
            ]
            ev = Evaluation(
                stacked["Phi"][i], stacked["Gamma"][i], stacked["C"][i], stacked["D"][i],
                stacked["A"][i], stacked["B"][i], X[i],
                model._outputs_between(maps, X[i], model.schedule),
                {**model.nominal, **self.fixed, **dict(zip(self.parts, values[i], strict=True))},
                False, {"Cc": stacked["Cc"][i], "Dc": stacked["Dc"][i]},
            )  # fmt: skip
            self._fill(margin, relative, i, ev)
        return Margins(margin, relative)

    def evaluate_plain(self, values: np.ndarray) -> Margins:
        """The reference: per row one numeric compile and simulation
        (:meth:`TuningModel.numeric`) and the same margins. Slow; for tests and benchmarks."""
        values = np.atleast_2d(np.asarray(values, dtype=float))
        margin = np.full((values.shape[0], len(self.limits)), np.nan)
        relative = np.full_like(margin, np.nan)
        for i, row in enumerate(values):
            try:
                ev = self.model.numeric({**self.fixed, **dict(zip(self.parts, row, strict=True))})
            except WirestateError:
                continue
            self._fill(margin, relative, i, ev)
        return Margins(margin, relative)

    def _fill(self, margin: np.ndarray, relative: np.ndarray, i: int, ev: Evaluation) -> None:
        if not (np.all(np.isfinite(ev.Phi)) and np.all(np.isfinite(ev.X))):
            return  # no solution at these values: the row stays NaN (counted as failing)
        try:
            rows = limit_margins(self.model, ev, self._start)
        except np.linalg.LinAlgError:
            return
        margin[i] = [r["margin"] for r in rows]
        relative[i] = [r["relative_margin"] for r in rows]

    def _trajectories(self, Phi: np.ndarray, Gamma: np.ndarray, x0: np.ndarray) -> np.ndarray:
        """States (rows x states x samples) of every row, stepped together: the recursion
        of :meth:`TuningModel.numeric` with a batch axis in front."""
        V = self.model.schedule
        steps = self.model.n_steps
        W = np.einsum("rij,jk->kir", Gamma, V[:, :steps])  # step x state x row
        P = Phi.transpose(1, 2, 0)  # state x state x row: one broadcast product per step
        X = np.empty((steps + 1, Phi.shape[1], Phi.shape[0]))
        X[0] = x0.T
        with np.errstate(over="ignore", invalid="ignore"):
            for k in range(steps):
                X[k + 1] = (P * X[k][None, :, :]).sum(axis=1) + W[k]
        return X.transpose(2, 1, 0)


def _split(stacked: np.ndarray, rows: int) -> np.ndarray:
    """A mapped CasADi output (r x (c * rows), blocks side by side) as rows x r x c."""
    r, total = stacked.shape
    c = total // rows
    return stacked.reshape(r, rows, c).transpose(1, 0, 2)


def value_parts(model: TuningModel) -> dict[str, Any]:
    """The parts of the tuning's circuit that have a value a sample can change."""
    return {n: p for n, p in model.base_circuit.parts.items() if p.kind in VALUE_KINDS}
