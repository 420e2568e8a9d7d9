"""A circuit compiled once, with chosen part values left as parameters.

:func:`wirestate.reduce.compile_circuit` re-analyses a circuit file for every set of part
values: pydantic validation, the topology and normal tree, the stamps and a sparse LU.
When the same circuit is evaluated at many part values (tolerance corners, preferred-value
candidates, Monte Carlo samples, optimiser iterations) only the values change, so
:class:`ParametricCircuit` does that analysis once: the topology, the state choice, the
stamps and the elimination are fixed, and the chosen part values enter as the parameters
of one CasADi function built by :func:`wirestate.reduce.symbolic_state_space`, the same
stamping and elimination code as the numeric compile (there is no second copy of the
circuit equations): the numeric compile's pivots are replayed on the parameters, checked
over the values the caller will evaluate at (``bounds``). The function is

* evaluated numerically for a batch of parameter rows at once (``Function.map``), which
  gives new matrices without touching the file, and
* called on CasADi symbols (SX or MX) by the optimiser, so that its derivatives are
  generated once per function and reused by every problem built on it.

A test checks it against the numeric compile at random part values.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np

from wirestate.lti import CircuitBlock
from wirestate.reduce import check_valued_parts, compile_circuit, symbolic_state_space
from wirestate.spec import CircuitSpec
from wirestate.spec.circuit import part_parameter

#: the matrices of the compiled block, in the order the function returns them
MATRICES = ("A", "B", "C", "D")


class ParametricCircuit:
    """``A, B, C, D`` of a circuit as one CasADi function of chosen part values.

    Parameters
    ----------
    spec
        The validated circuit (its values are the nominal values of every part).
    parameters
        Names of the parts whose primary value (resistance, capacitance, inductance,
        gain...) is a parameter, in the order of the function's input vector (SI units).
    bounds
        Parameter -> ``(low, high)``: the values the function will be evaluated at. The
        elimination's pivots are checked over this box and chosen again, or the compile
        refused (``unstable_elimination``), where one would become too small (see
        :func:`wirestate.reduce.symbolic_from_values`). Without it nothing is checked.

    Attributes
    ----------
    block
        The numeric compile at the nominal values: names, units, shifted states.
    nominal
        The nominal parameter vector (the circuit file's values).
    """

    def __init__(
        self,
        spec: CircuitSpec,
        parameters: Sequence[str],
        bounds: Mapping[str, tuple[float, float]] | None = None,
    ) -> None:
        import casadi

        self.spec = spec
        self.parameters = list(parameters)
        check_valued_parts(spec, self.parameters)
        self.block: CircuitBlock = compile_circuit(spec)
        self.nominal = np.array(
            [float(getattr(spec.parts[n], part_parameter(spec.parts[n].kind))) for n in parameters]
        )
        p = casadi.SX.sym("p", len(self.parameters))
        ss = symbolic_state_space(
            spec, {n: p[i] for i, n in enumerate(self.parameters)}, bounds=bounds
        )
        self.function = casadi.Function(
            f"{spec.name}_state_space", [p], [ss.A, ss.B, ss.C, ss.D], ["p"], list(MATRICES)
        )

    def state_space(self, values: Mapping[str, Any]) -> tuple[Any, Any, Any, Any]:
        """``(A, B, C, D)`` as CasADi expressions of ``values`` (part name -> SX, MX or
        number; parameters not given take their nominal value)."""
        import casadi

        vector = casadi.vertcat(
            *[values.get(n, float(v)) for n, v in zip(self.parameters, self.nominal, strict=True)]
        )
        return tuple(self.function(vector))  # type: ignore[return-value]

    def matrices(self, rows: np.ndarray) -> dict[str, np.ndarray]:
        """The matrices at each row of ``rows`` (rows x parameters, SI units).

        Returns ``name -> array (rows, r, c)`` for ``A, B, C, D``; a row where the circuit
        has no solution holds NaN or inf (the caller decides what that means).
        """
        rows = np.atleast_2d(np.asarray(rows, dtype=float))
        return batch_call(self.function, rows, MATRICES)


def batch_call(function: Any, rows: np.ndarray, names: Sequence[str]) -> dict[str, np.ndarray]:
    """Evaluate a one-input CasADi function at every row of ``rows`` (``Function.map``).

    Returns ``name -> array (rows, r, c)`` for each output.
    """
    count = rows.shape[0]
    outputs = function.map(count)(rows.T)
    if not isinstance(outputs, list | tuple):
        outputs = [outputs]
    return {name: _split(np.array(out), count) for name, out in zip(names, outputs, strict=True)}


def _split(stacked: np.ndarray, rows: int) -> np.ndarray:
    """A mapped CasADi output (r x (c * rows), blocks side by side) as rows x r x c."""
    r, total = stacked.shape
    c = total // rows if rows else 0
    return stacked.reshape(r, rows, c).transpose(1, 0, 2)
