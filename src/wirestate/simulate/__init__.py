"""Exact stepping and simulation: ZOH / FOH discretisation, batch runs, hybrid systems,
the co-simulation :class:`Stepper`, input waveforms and results."""

from __future__ import annotations

from collections.abc import Callable, Mapping
from importlib import import_module
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

if TYPE_CHECKING:
    from wirestate.simulate.discretize import Discretization, foh, zoh
    from wirestate.simulate.hybrid import simulate_system
    from wirestate.simulate.inputs import InputSet, Waveform, build_inputs, parse_waveform
    from wirestate.simulate.linear import (
        LinearModel,
        as_linear_model,
        propagate,
        simulate_linear,
    )
    from wirestate.simulate.results import SimulationResult
    from wirestate.simulate.stepper import Stepper

# the public names, imported on first use (PEP 562): importing one light submodule, such
# as the discretisation, must not pull in python-control through the composition layer
_LAZY = {
    "Discretization": "discretize", "foh": "discretize", "zoh": "discretize",
    "simulate_system": "hybrid", "InputSet": "inputs", "Waveform": "inputs",
    "build_inputs": "inputs", "parse_waveform": "inputs", "LinearModel": "linear",
    "as_linear_model": "linear", "propagate": "linear", "simulate_linear": "linear",
    "SimulationResult": "results", "Stepper": "stepper",
}  # fmt: skip


def __getattr__(name: str) -> Any:
    if name in _LAZY:
        return getattr(import_module(f"wirestate.simulate.{_LAZY[name]}"), name)
    raise AttributeError(f"module 'wirestate.simulate' has no attribute {name!r}")


__all__ = [
    "Discretization",
    "InputSet",
    "LinearModel",
    "SimulationResult",
    "Stepper",
    "Waveform",
    "as_linear_model",
    "build_inputs",
    "foh",
    "parse_waveform",
    "propagate",
    "simulate",
    "simulate_linear",
    "simulate_system",
    "zoh",
]


def simulate(
    model: Any,
    until: float,
    step: float,
    inputs: Mapping[str, str | float | Waveform] | None = None,
    *,
    hold: str = "zoh",
    use_defaults: bool = True,
    base: Path | None = None,
    progress: Callable[[float], None] | None = None,
    **options: Any,
) -> SimulationResult:
    """Simulate a circuit block, a ``control.StateSpace`` or a composed system.

    LTI models run by exact ZOH (or FOH with ``hold="foh"``), see
    :func:`~wirestate.simulate.linear.simulate_linear`; systems with sampled or nonlinear
    blocks by :func:`~wirestate.simulate.hybrid.simulate_system` (``options``: ``rtol``,
    ``atol``).
    """
    from wirestate.compose import ComposedSystem
    from wirestate.simulate import guards

    guards.check_tolerances(options)
    # a run that cannot fit is refused before any array is made (issue 10.10)
    nonlinear = isinstance(model, ComposedSystem) and not model.is_linear
    guards.check_run_size(model, until, step, streamable=not nonlinear)
    with np.errstate(over="ignore", invalid="ignore"):  # a non-finite run is reported below
        result = _dispatch(model, until, step, inputs, hold, use_defaults, base, progress, options)
    guards.check_finite_result(
        result.name, result.time, [result.states, result.outputs], guards.model_poles(model), step
    )
    return result


def _dispatch(model, until, step, inputs, hold, use_defaults, base, progress, options):
    from wirestate.compose import ComposedSystem
    from wirestate.errors import SimulationError
    from wirestate.simulate.hybrid import simulate_system
    from wirestate.simulate.linear import simulate_linear

    if isinstance(model, ComposedSystem) and not model.is_linear:
        if hold != "zoh":
            # the hybrid engines hold the sampled outputs by construction and take the
            # external inputs as held (ZOH engine) or exact (CVODES): no other hold exists
            other = [b.name for b in model.blocks.values() if b.category != "linear"]
            raise SimulationError(
                "invalid_field",
                f"{model.name}: hold {hold!r} applies to linear time-invariant models only; "
                f"this system has sampled or nonlinear blocks ({', '.join(other)}), which "
                "are simulated with their outputs held between samples",
            )
        return simulate_system(
            model, until, step, inputs, use_defaults=use_defaults, base=base,
            progress=progress, **options,
        )  # fmt: skip
    return simulate_linear(
        model, until, step, inputs, hold=hold, use_defaults=use_defaults, base=base,
        progress=progress, **options,
    )  # fmt: skip
