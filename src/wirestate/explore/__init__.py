"""Many evaluations of one tuning case: tolerance Monte Carlo (yield) and design sweeps,
on Dask (``dask.distributed``).

Public API: :func:`tolerance_yield` -> :class:`YieldResult`, :func:`sweep` ->
:class:`SweepResult`, :func:`wilson_interval`, and the evaluator interface
:class:`MarginEvaluator` (margins of every limit at a batch of part values).
"""

from wirestate.explore.evaluate import MarginEvaluator, Margins
from wirestate.explore.montecarlo import YieldResult, tolerance_yield
from wirestate.explore.statistics import wilson_interval
from wirestate.explore.sweep import SweepResult, parse_grid, sweep

__all__ = [
    "MarginEvaluator",
    "Margins",
    "SweepResult",
    "YieldResult",
    "parse_grid",
    "sweep",
    "tolerance_yield",
    "wilson_interval",
]
