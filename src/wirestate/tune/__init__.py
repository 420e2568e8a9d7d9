"""Closed-loop sizing of damping parts: tuning files, the CasADi/IPOPT problem, preferred
values, numeric re-verification, tolerance corners and stress reports.

Public API: :func:`load_tuning`, :func:`solve` and :class:`TuningResult`. The chain of
stages behind :func:`solve` is described in ``DEVELOPERS.md`` (Tuning).
"""

from wirestate.spec.tuning import TuningSpec, load_tuning, parse_tuning
from wirestate.tune.report import CAUTIONS, TuningResult
from wirestate.tune.solve import solve

__all__ = ["CAUTIONS", "TuningResult", "TuningSpec", "load_tuning", "parse_tuning", "solve"]
