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
    from wirestate.simulate.initial import INITIAL_MODES, InitialState, start_from
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
    "SimulationResult": "results", "Stepper": "stepper", "INITIAL_MODES": "initial",
    "InitialState": "initial", "start_from": "initial",
}  # fmt: skip


def __getattr__(name: str) -> Any:
    if name in _LAZY:
        return getattr(import_module(f"wirestate.simulate.{_LAZY[name]}"), name)
    raise AttributeError(f"module 'wirestate.simulate' has no attribute {name!r}")


__all__ = [
    "INITIAL_MODES",
    "Discretization",
    "InitialState",
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
    "start_from",
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
    initial: str = "parts",
    initial_values: Mapping[str, str | float] | None = None,
    **options: Any,
) -> SimulationResult:
    """Simulate a circuit block, a ``control.StateSpace`` or a composed system.

    LTI models run by exact ZOH (or FOH with ``hold="foh"``), see
    :func:`~wirestate.simulate.linear.simulate_linear`; systems with sampled or nonlinear
    blocks by :func:`~wirestate.simulate.hybrid.simulate_system` (``options``: ``rtol``,
    ``atol``). Circuits with switches or diodes run exactly with their events
    (:func:`~wirestate.simulate.switched.simulate_switched`; ``options``: ``fine_step``,
    ``fine_window``, ``x0``, ``max_changes``, or ``averaged=True`` for the state-space
    average, :func:`~wirestate.simulate.averaged.simulate_averaged`), and systems with them
    or with a modulator by
    :func:`~wirestate.simulate.switched_system.simulate_switched_system`. The run starts from
    ``initial`` (``"parts"``: the parts' ``initial`` fields; ``"zero"``; ``"steady_state"``:
    the equilibrium at the inputs at t = 0) with ``initial_values`` set by state name on top
    (see :func:`~wirestate.simulate.initial.start_from`).
    """
    from wirestate.compose import ComposedSystem
    from wirestate.simulate import guards
    from wirestate.simulate.initial import start_from

    guards.check_tolerances(options)
    if initial != "parts" or initial_values:
        model = start_from(
            model, initial, initial_values, inputs, use_defaults=use_defaults, base=base
        ).model
    # a run that cannot fit is refused before any array is made (issue 10.10)
    nonlinear = isinstance(model, ComposedSystem) and not model.is_linear
    guards.check_run_size(model, until, step, streamable=not nonlinear)
    guards.check_switching_events(model, until, inputs)
    with np.errstate(over="ignore", invalid="ignore"):  # a non-finite run is reported below
        result = _dispatch(model, until, step, inputs, hold, use_defaults, base, progress, options)
    guards.check_finite_result(
        result.name, result.time, [result.states, result.outputs],
        lambda: guards.model_poles(model), step,
    )  # fmt: skip
    return result


def _dispatch(model, until, step, inputs, hold, use_defaults, base, progress, options):
    from wirestate.compose import ComposedSystem
    from wirestate.errors import SimulationError
    from wirestate.simulate.hybrid import simulate_system
    from wirestate.simulate.linear import simulate_linear

    switched = _switched_run(model, hold, options)
    if switched is not None:
        return switched(
            model, until, step, inputs, use_defaults=use_defaults, base=base,
            progress=progress, **options,
        )  # fmt: skip
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


def _switched_run(model: Any, hold: str, options: dict) -> Callable | None:
    """The switched engine for circuits with switches or diodes and systems with them or
    with a modulator (issue 12); ``None`` for every other model."""
    from wirestate.errors import SimulationError
    from wirestate.simulate.averaged import simulate_averaged
    from wirestate.simulate.switched import simulate_switched
    from wirestate.simulate.switched_system import has_switching, simulate_switched_system
    from wirestate.switching import switched_circuit

    averaged = options.pop("averaged", False)
    if has_switching(model):
        run = simulate_switched_system
        if averaged:
            raise SimulationError(
                "invalid_field",
                f"{model.name}: the averaged model applies to a circuit with pwm gates; "
                "simulate the system switched",
            )
    elif switched_circuit(model) is not None:
        run = simulate_averaged if averaged else simulate_switched
    elif averaged:
        raise SimulationError(
            "invalid_field",
            f"{getattr(model, 'name', 'model')}: the averaged model applies to a circuit "
            "with switches or diodes",
        )
    else:
        return None
    if hold != "zoh":
        raise SimulationError(
            "invalid_field",
            f"{getattr(model, 'name', 'model')}: hold {hold!r} applies to linear "
            "time-invariant models only; a switched run holds its inputs over each output "
            "step and takes gates exactly",
        )
    for name in ("rtol", "atol"):  # tolerances of the CVODES integrator, unused here
        options.pop(name, None)
    return run
