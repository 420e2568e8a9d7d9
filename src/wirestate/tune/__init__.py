"""Closed-loop sizing of damping parts: tuning files, the CasADi/IPOPT problem, preferred
values, numeric re-verification, tolerance corners and stress reports.

Public API: :func:`load_tuning`, :func:`solve` and :class:`TuningResult`.
"""

from wirestate.spec.tuning import TuningSpec, load_tuning, parse_tuning
from wirestate.tune.solve import CAUTIONS, TuningResult, solve

__all__ = ["CAUTIONS", "TuningResult", "TuningSpec", "load_tuning", "parse_tuning", "solve"]
