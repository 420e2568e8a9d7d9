"""Former home of the NLP; it now lives in :mod:`wirestate.tune.formulation` (the
problem) and :mod:`wirestate.tune.optimise` (IPOPT and the exchange). Kept so that code
written against the earlier layout keeps working."""

from __future__ import annotations

from wirestate.tune.formulation import FORMULATIONS
from wirestate.tune.objective import objective_terms, peak_impedance
from wirestate.tune.optimise import NlpSolution, is_stable_discrete, solve_nlp
from wirestate.tune.problem import Problem


def start_values(problem: Problem) -> dict[str, float]:
    """The starting point (:meth:`Problem.start_values`)."""
    return problem.start_values()


__all__ = [
    "FORMULATIONS",
    "NlpSolution",
    "is_stable_discrete",
    "objective_terms",
    "peak_impedance",
    "solve_nlp",
    "start_values",
]
