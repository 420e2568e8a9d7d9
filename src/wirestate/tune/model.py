"""Former home of the tuning case; the names now live in the stages of the chain.

``TuningModel`` is :class:`wirestate.tune.problem.Problem` and ``Evaluation`` is
:class:`wirestate.tune.evaluation.Evaluation`; kept so that code written against the
earlier layout keeps working.
"""

from wirestate.tune.evaluation import Evaluation
from wirestate.tune.problem import (
    COMMAND_PREFIX,
    CURRENT_PREFIX,
    MAX_CORNER_PARTS,
    VOLTAGE_PREFIX,
    Problem,
)

TuningModel = Problem

__all__ = [
    "COMMAND_PREFIX",
    "CURRENT_PREFIX",
    "Evaluation",
    "MAX_CORNER_PARTS",
    "TuningModel",
    "VOLTAGE_PREFIX",
]
