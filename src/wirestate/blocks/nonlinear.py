"""User nonlinear continuous blocks, given as CasADi expressions."""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass, field

import numpy as np

from wirestate.errors import ModelFileError


@dataclass
class NonlinearBlock:
    """A continuous block ``dx/dt = f(x, u)``, ``y = g(x, u)`` for the CasADi integrators.

    Parameters
    ----------
    name
        Block name.
    inputs, outputs, states
        Signal and state names.
    dynamics
        ``dynamics(x, u) -> (dxdt, y)`` building CasADi expressions from the symbolic state
        ``x`` and input ``u`` (column vectors). Use CasADi operations (``casadi.fmin``,
        ``casadi.tanh``, ...), not numpy.
    x0
        Initial state (default zeros).
    feedthrough
        Whether any output depends directly on an input (used for loop checks); default
        ``True`` (the safe assumption).
    units
        Unit of each signal name.
    """

    name: str
    inputs: Sequence[str]
    outputs: Sequence[str]
    states: Sequence[str]
    dynamics: Callable
    x0: np.ndarray | None = None
    feedthrough: bool = True
    units: dict[str, str] = field(default_factory=dict)

    def __post_init__(self) -> None:
        self.inputs = list(self.inputs)
        self.outputs = list(self.outputs)
        self.states = list(self.states)
        self.x0 = (
            np.zeros(len(self.states)) if self.x0 is None else np.asarray(self.x0, dtype=float)
        )
        if self.x0.shape != (len(self.states),):
            raise ModelFileError(
                "state_size_mismatch",
                f"x0 has {self.x0.size} entries for {len(self.states)} states",
                location=("blocks", self.name, "x0"),
            )

    @property
    def has_feedthrough(self) -> bool:
        return bool(self.feedthrough)

    def initial_state(self) -> np.ndarray:
        return np.array(self.x0, dtype=float)

    def casadi_dynamics(self, x, u):
        """``(dx/dt, y)`` as CasADi expressions (calls the user's function)."""
        return self.dynamics(x, u)
