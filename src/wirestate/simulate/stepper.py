"""Co-simulation stepper: an external master owns time and calls :meth:`Stepper.step`.

One step with the input held over it is exact (zero-order hold, Van Loan 1978). State and
outputs come from one matrix product with the stacked matrix

``[x[k+1]; y[k+1]] = [[Ad, Bd], [C Ad, C Bd + D]] [x[k]; u[k]]``

so a call costs about what a bare ``x = Ad @ x + Bd @ u`` costs in numpy.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np

from wirestate.errors import SimulationError
from wirestate.simulate.discretize import Discretization
from wirestate.simulate.linear import as_linear_model


class Stepper:
    """Advance an LTI block one step at a time, exactly, for a master that owns time.

    Parameters
    ----------
    system
        A compiled circuit (``CircuitBlock``), a composed LTI system, or a continuous
        ``control.StateSpace``.
    dt
        Default step in s; :meth:`step` may pass another one per call (each distinct step's
        discretisation is computed once and cached).
    x0
        Initial state (default: the block's initial state).

    A circuit with switches or diodes, a system with them or with a modulator, or a
    ``modulator=`` argument gives a
    :class:`~wirestate.simulate.switched_stepper.SwitchedStepper` instead: the same
    interface, with the switching events inside each step.

    Notes
    -----
    The input passed to :meth:`step` is held constant over the step, which is exact for
    the zero-order hold. Inputs never given keep their source default (``value``) or 0.
    """

    def __new__(cls, system: Any = None, *args: Any, **kwargs: Any) -> Stepper:
        # a circuit with switches or diodes, or a modulator inside, steps with its events
        # (issue 12): the switched stepper is a subclass, so isinstance() still holds
        if cls is Stepper:
            from wirestate.simulate.switched_stepper import SwitchedStepper, is_switched_model

            if is_switched_model(system, kwargs.get("modulator")):
                return super().__new__(SwitchedStepper)
        return super().__new__(cls)

    def __init__(self, system: Any, dt: float, *, x0: Sequence[float] | None = None) -> None:
        model = as_linear_model(system)
        self.model = model
        self.name = model.name
        self.input_names = list(model.inputs)
        self.output_names = list(model.outputs)
        self.state_names = list(model.states)
        self.units = dict(model.units)
        self._n = model.n_states
        self._m = len(model.inputs)
        self._index = {name: i for i, name in enumerate(self.input_names)}
        self._disc = Discretization(model.A, model.B)
        self._stacked: dict[float, np.ndarray] = {}
        self._z = np.zeros(self._n + self._m)
        self._z[: self._n] = model.x0 if x0 is None else self._checked_state(x0)
        for name, value in model.input_defaults.items():
            if name in self._index and value is not None:
                self._z[self._n + self._index[name]] = float(value)
        self.time = 0.0
        self._select(dt)

    # -- stepping ------------------------------------------------------------------------
    def step(self, u: Sequence[float] | Mapping[str, float] | np.ndarray, dt: float | None = None):
        """Advance one step with ``u`` held over it; return the outputs at the end.

        Parameters
        ----------
        u
            Inputs in the order of :attr:`input_names`, or a mapping by input name (inputs
            not named keep their previous value).
        dt
            Step in s (default: the current step size).

        Returns
        -------
        numpy.ndarray
            Outputs ``y = C x[k+1] + D u`` in the order of :attr:`output_names` (SI units).
        """
        if dt is not None and dt != self._dt:
            self._select(dt)
        z = self._z
        n = self._n
        if hasattr(u, "keys"):
            self._set_inputs(u)
        else:
            z[n:] = u
        w = self._G @ z
        z[:n] = w[:n]
        self.time += self._dt
        return w[n:]

    def _set_inputs(self, u: Mapping[str, float]) -> None:
        for name, value in u.items():
            index = self._index.get(name)
            if index is None:
                raise SimulationError(
                    "unknown_signal",
                    f"{self.name}: no input named {name!r} "
                    f"(inputs: {', '.join(self.input_names) or 'none'})",
                    location=("inputs", name),
                )
            self._z[self._n + index] = value

    def _select(self, dt: float) -> None:
        dt = float(dt)
        G = self._stacked.get(dt)
        if G is None:
            if not (math.isfinite(dt) and dt > 0):
                raise SimulationError("invalid_step", f"the step must be positive, got {dt!r} s")
            Ad, Bd = self._disc.zoh(dt)
            C, D = self.model.C, self.model.D
            G = np.block([[Ad, Bd], [C @ Ad, C @ Bd + D]])
            if len(self._stacked) >= 64:
                self._stacked.pop(next(iter(self._stacked)))
            self._stacked[dt] = G
        self._G = G
        self._dt = dt

    # -- state access --------------------------------------------------------------------
    @property
    def dt(self) -> float:
        """The current step size (s)."""
        return self._dt

    @property
    def state(self) -> np.ndarray:
        """A copy of the state vector (order of :attr:`state_names`)."""
        return self._z[: self._n].copy()

    @state.setter
    def state(self, x: Sequence[float]) -> None:
        self._z[: self._n] = self._checked_state(x)

    @property
    def physical_state(self) -> np.ndarray:
        """Capacitor voltages and inductor currents: the state plus ``state_offset @ u``
        with the held inputs (equal to :attr:`state` unless the block has
        ``<name>_shifted`` states)."""
        x, u = self._z[: self._n], self._z[self._n :]
        offset = self.model.state_offset
        return x.copy() if offset is None else x + offset @ u

    @physical_state.setter
    def physical_state(self, values: Sequence[float]) -> None:
        """Set the state from capacitor voltages and inductor currents, with the inputs
        held now (apply the inputs first when they change)."""
        p = self._checked_state(values)
        offset = self.model.state_offset
        u = self._z[self._n :]
        self._z[: self._n] = p if offset is None else p - offset @ u

    @property
    def inputs(self) -> np.ndarray:
        """The inputs last applied (held)."""
        return self._z[self._n :].copy()

    @property
    def outputs(self) -> np.ndarray:
        """Outputs at the present state with the last inputs, ``C x + D u``."""
        x, u = self._z[: self._n], self._z[self._n :]
        return self.model.C @ x + self.model.D @ u

    def save(self) -> tuple[np.ndarray, float]:
        """A snapshot (state, held inputs, time) for :meth:`restore`."""
        return (self._z.copy(), self.time)

    def restore(self, saved: tuple[np.ndarray, float]) -> None:
        """Go back to a snapshot taken by :meth:`save` (rollback for iterative masters)."""
        z, t = saved
        if np.shape(z) != self._z.shape:
            raise SimulationError(
                "state_size_mismatch", f"{self.name}: the snapshot belongs to another block"
            )
        self._z[:] = z
        self.time = float(t)

    @property
    def feedthrough(self) -> dict[str, list[str]]:
        """For every output, the inputs that reach it directly (``D != 0``)."""
        D = self.model.D
        return {
            out: [self.input_names[j] for j in range(self._m) if D[i, j] != 0.0]
            for i, out in enumerate(self.output_names)
        }

    def _checked_state(self, x: Sequence[float]) -> np.ndarray:
        arr = np.asarray(x, dtype=float).reshape(-1)
        if arr.shape != (self._n,):
            raise SimulationError(
                "state_size_mismatch",
                f"{self.name}: expected {self._n} states ({', '.join(self.state_names)}), "
                f"got {arr.size}",
            )
        return arr
