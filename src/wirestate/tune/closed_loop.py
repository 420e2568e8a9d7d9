"""The closed loop of a tuning case from its circuit's matrices, once for numpy and CasADi.

:func:`loop_matrices` takes the design circuit's ``A, B, C, D`` (numbers, or CasADi
expressions of part values) and closes the case's loop around them: a ``[controller]`` PI
(:func:`wirestate.tune.loop.close_pi`, continuous or sampled), a system file's other
blocks (:class:`wirestate.tune.wiring.SystemLoop`), or none. The zero-order hold is the
caller's (``zoh(A, B)`` over the output step: scipy's exponential for the independent
numeric path, the CasADi Taylor exponential of :mod:`wirestate.tune.expm` for the
parametric one), so both paths run this same algebra.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import TYPE_CHECKING, Any

import numpy as np

from wirestate.errors import WirestateError
from wirestate.tune.loop import (
    Loop,
    close_pi,
    held_output_maps,
    held_state_maps,
    hold_powers,
    open_loop,
)

if TYPE_CHECKING:
    from wirestate.tune.problem import Problem

Zoh = Callable[[Any, Any], tuple[Any, Any]]


def _is_numeric(*items: Any) -> bool:
    return all(isinstance(m, np.ndarray) for m in items)


def continuous_loop(problem: Problem, A1: Any, B1: Any, C1: Any, D1: Any) -> Loop:
    """The named continuous loop around the circuit matrices (a sampled PI replaced by
    its continuous counterpart; a system's sampled blocks' outputs frozen)."""
    ctrl = problem.spec.controller
    if problem.system_loop is not None:
        loop = problem.system_loop
        part = loop.continuous_part(A1, B1, C1, D1)
        states = loop.all_states if problem.sampled else loop.states
        S = problem.system_rows(loop.continuous_outputs)
        nw = len(loop.inputs)
        return Loop(
            part.A, part.B[:, :nw], _pick(S, part.C), _pick(S, part.D[:, :nw]), states,
            list(loop.inputs), problem.system_outputs(),
        )  # fmt: skip
    names = problem.circuit_names
    if ctrl is None:
        return open_loop(A1, B1, C1, D1, **names)
    try:
        return _close(problem, A1, B1, C1, D1)
    except WirestateError as exc:
        raise exc.with_file(problem.file or "") from None


def _close(problem: Problem, A: Any, B: Any, C: Any, D: Any, sample_time: float | None = None):
    ctrl = problem.spec.controller
    return close_pi(
        A, B, C, D, **problem.circuit_names, measure=ctrl.measure, drive=ctrl.drive,
        kp=ctrl.proportional, ki=ctrl.integral, sample_time=sample_time,
    )  # fmt: skip


def _pick(S: np.ndarray, M: Any) -> Any:
    if isinstance(M, np.ndarray):
        return S @ M
    import casadi

    return casadi.mtimes(casadi.DM(S), M)


def held_pair(problem: Problem, A1: Any, B1: Any, C1: Any, D1: Any) -> tuple[Any, Any]:
    """``(A, B)`` of the continuous part that :func:`loop_matrices` holds over each output
    step: the closed loop (continuous PI or none), the circuit (sampled PI), or the
    system's continuous blocks closed among themselves."""
    if problem.system_loop is not None:
        part = problem.system_loop.continuous_part(A1, B1, C1, D1)
        return part.A, part.B
    if problem.sampled:
        return A1, B1
    loop_c = continuous_loop(problem, A1, B1, C1, D1)
    return loop_c.A, loop_c.B


def loop_matrices(problem: Problem, A1: Any, B1: Any, C1: Any, D1: Any, zoh: Zoh) -> dict:
    """The discrete loop of ``problem`` around the circuit matrices (numpy or CasADi).

    Returns a mapping with

    * ``Phi, Gamma``: the loop over one stepping period (loop states, loop inputs);
    * ``maps``: ``[(C_j, D_j)]``, the outputs ``j`` output steps after each sample from the
      loop state and inputs at that sample (``j = 0``: the loop's own ``C, D``);
    * ``held``: ``[(Z_j, W_j)]``, the continuous part's state and held inputs at the same
      instants (``Z_j x + W_j v``), whose quadratic forms give exact energies;
    * ``part``: ``(A, B, C, D)`` of the continuous part advanced between output samples,
      with ``part_outputs`` naming its output rows;
    * ``A, B, Cc, Dc``: the continuous loop (poles, impedances).

    ``zoh(A, B)`` returns the zero-order hold over the output step.
    """
    loop_c = continuous_loop(problem, A1, B1, C1, D1)
    if problem.system_loop is not None:
        out = _system_matrices(problem, A1, B1, C1, D1, zoh)
    elif problem.sampled:
        out = _sampled_pi(problem, A1, B1, C1, D1, zoh)
    else:
        Phi, Gamma = zoh(loop_c.A, loop_c.B)
        out = {
            "Phi": Phi, "Gamma": Gamma, "maps": [(loop_c.C, loop_c.D)],
            "held": [_identity_held(loop_c.A, loop_c.B)],
            "part": (loop_c.A, loop_c.B, loop_c.C, loop_c.D), "part_outputs": loop_c.outputs,
        }  # fmt: skip
    out.update(A=loop_c.A, B=loop_c.B, Cc=loop_c.C, Dc=loop_c.D)
    return out


def _identity_held(A: Any, B: Any) -> tuple[Any, Any]:
    """``(Z, W)`` = ``([I; 0], [0; I])``: the continuous part is the loop itself."""
    n, m = A.shape[0], B.shape[1]
    Z = np.vstack([np.eye(n), np.zeros((m, n))])
    W = np.vstack([np.zeros((n, m)), np.eye(m)])
    return Z, W


def _sampled_pi(problem: Problem, A1: Any, B1: Any, C1: Any, D1: Any, zoh: Zoh) -> dict:
    """A ``[controller]`` PI sampled every period, the circuit held in between."""
    ctrl = problem.spec.controller
    m = problem.grid.substeps
    powers = hold_powers(*zoh(A1, B1), m)
    Ad, Bd = powers[-1]
    loop_d = _close(problem, Ad, Bd, C1, D1, problem.grid.step)
    inputs = problem.circuit_names["inputs"]
    maps = [(loop_d.C, loop_d.D)]
    if m > 1:
        between = held_output_maps(loop_d, powers[:m], C1, D1, inputs=inputs, drive=ctrl.drive)
        maps += between[1:]
    held = held_state_maps(loop_d, powers[:m], A1.shape[0], inputs=inputs, drive=ctrl.drive)
    return {
        "Phi": loop_d.A, "Gamma": loop_d.B, "maps": maps, "held": held,
        "part": (A1, B1, C1, D1), "part_outputs": problem.circuit_names["outputs"],
    }  # fmt: skip


def _system_matrices(problem: Problem, A1: Any, B1: Any, C1: Any, D1: Any, zoh: Zoh) -> dict:
    """A system file's blocks around the design block (wiring.SystemLoop)."""
    loop = problem.system_loop
    part = loop.continuous_part(A1, B1, C1, D1)
    Phi_h, Gamma_h = zoh(part.A, part.B)
    if not problem.sampled:
        S = problem.system_rows(loop.continuous_outputs)
        nw = len(loop.inputs)
        maps = [(_pick(S, part.C), _pick(S, part.D[:, :nw]))]
        Phi, Gamma, held = Phi_h, Gamma_h, [_identity_held(part.A, part.B)]
    else:
        Phi, Gamma, between, held = loop.discrete(part, Phi_h, Gamma_h, problem.grid.substeps)
        S = problem.system_rows(loop.signals)
        maps = [(_pick(S, Cj), _pick(S, Dj)) for Cj, Dj in between]
    return {
        "Phi": Phi, "Gamma": Gamma, "maps": maps, "held": held,
        "part": (part.A, part.B, part.C, part.D), "part_outputs": loop.continuous_outputs,
    }  # fmt: skip
