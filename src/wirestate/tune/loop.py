"""A controller block closed around a circuit block, written once for numpy and CasADi.

The controller is a linear block with inputs ``[reference, measurement]`` and output
``command`` (``xk' = Ak xk + Bk [r; y_m]``, ``u_j = Ck xk + Dk [r; y_m]``), taken from
:class:`wirestate.blocks.controllers.PIDController` (its ``matrices()``, the numbers the
simulator uses; continuous, or discrete at ``Ts`` for a sampled controller). It measures
circuit output ``m`` and drives circuit input ``j``; the other circuit inputs ``w`` stay
inputs and the reference ``r`` is added. With ``y_m = C_m x + D_mw w`` (no direct path from
``u_j``, checked, else ``algebraic_loop``) and ``Bk = [Bkr, Bky]``, ``Dk = [Dkr, Dky]``::

    x'  = (A + b Dky C_m) x + b Ck xk + (B_w + b Dky D_mw) w + b Dkr r
    xk' = Bky C_m x + Ak xk + Bky D_mw w + Bkr r
    y   = (C + d Dky C_m) x + d Ck xk + (D_w + d Dky D_mw) w + d Dkr r

(the standard feedback interconnection of two state-space blocks, e.g. Franklin, Powell and
Emami-Naeini, Feedback Control of Dynamic Systems, 7th ed., sec. 7.9). For a sampled
controller the same algebra runs on the zero-order-hold matrices of the circuit over ``Ts``
(the command held between samples). The controller's state is named ``<block>_<state>``.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from wirestate.errors import CompositionError

REFERENCE = "reference"
DRIVE_OUTPUT = "controller_output"


@dataclass
class Loop:
    """Matrices of a closed loop (continuous or discrete) with signal names."""

    A: Any
    B: Any
    C: Any
    D: Any
    states: list[str]
    inputs: list[str]
    outputs: list[str]


def _is_casadi(*items: Any) -> bool:
    import casadi

    return any(isinstance(i, casadi.SX | casadi.MX | casadi.DM) for i in items)


def close_pi(
    A: Any,
    B: Any,
    C: Any,
    D: Any,
    *,
    states: list[str],
    inputs: list[str],
    outputs: list[str],
    measure: str,
    drive: str,
    kp: float,
    ki: float,
    sample_time: float | None = None,
) -> Loop:
    """Close a PI loop (the :func:`wirestate.blocks.controllers.pi_controller` block)
    around ``(A, B, C, D)``; with ``sample_time`` set, ``A, B`` must be the circuit's
    zero-order-hold matrices over that period.

    Returns
    -------
    Loop
        Inputs ``[w..., "reference"]``, states ``[x..., "pi_integral"]``, outputs
        ``[y..., "controller_output"]`` (the driven input's value).
    """
    from wirestate.blocks.controllers import pi_controller

    block = pi_controller("pi", kp=kp, ki=ki, sample_time=sample_time)
    Ak, Bk, Ck, Dk = block.matrices()
    names = [f"{block.name}_{state}" for state in block.states]
    return close_loop(
        A, B, C, D, (Ak, Bk, Ck, Dk), states=states, inputs=inputs, outputs=outputs,
        measure=measure, drive=drive, controller_states=names,
    )  # fmt: skip


def close_loop(
    A: Any,
    B: Any,
    C: Any,
    D: Any,
    controller: tuple[Any, Any, Any, Any],
    *,
    states: list[str],
    inputs: list[str],
    outputs: list[str],
    measure: str,
    drive: str,
    controller_states: list[str],
) -> Loop:
    """Close a linear controller ``(Ak, Bk, Ck, Dk)`` (inputs ``[reference, measurement]``)
    around ``(A, B, C, D)``; see the module docstring. numpy in, numpy out; CasADi in,
    CasADi out."""
    if measure not in outputs:
        raise CompositionError(
            "unknown_signal",
            f"the controller measures {measure!r}, which is not a circuit output "
            f"(outputs: {', '.join(outputs)})",
            location=("controller", "measure"),
        )
    if drive not in inputs:
        raise CompositionError(
            "unknown_signal",
            f"the controller drives {drive!r}, which is not a circuit input "
            f"(inputs: {', '.join(inputs)})",
            location=("controller", "drive"),
        )
    import casadi

    m = outputs.index(measure)
    j = inputs.index(drive)
    keep = [i for i in range(len(inputs)) if i != j]
    numeric = not _is_casadi(A, B, C, D)
    Ak, Bk, Ck, Dk = (casadi.DM(np.atleast_2d(np.asarray(x, dtype=float))) for x in controller)
    if numeric:
        if abs(float(np.asarray(D)[m, j])) > 0 and float(np.abs(np.asarray(Dk)[:, 1]).max()) > 0:
            raise CompositionError(
                "algebraic_loop",
                f"output {measure!r} depends directly on input {drive!r}; a controller with "
                "direct feedthrough around it forms an algebraic loop",
                location=("controller",),
            )
        # one code path: numpy matrices go through the same CasADi arithmetic as DM
        A, B, C, D = (casadi.DM(np.atleast_2d(np.asarray(x, dtype=float))) for x in (A, B, C, D))
    mt = casadi.mtimes
    b, d, Cm = B[:, j], D[:, j], C[m, :]
    Bw, Dw, Dmw = B[:, keep], D[:, keep], D[m, keep]
    Bkr, Bky, Dkr, Dky = Bk[:, 0], Bk[:, 1], Dk[:, 0], Dk[:, 1]
    Acl = casadi.blockcat([[A + mt(b, mt(Dky, Cm)), mt(b, Ck)], [mt(Bky, Cm), Ak]])
    Bcl = casadi.blockcat([[Bw + mt(b, mt(Dky, Dmw)), mt(b, Dkr)], [mt(Bky, Dmw), Bkr]])
    Ccl = casadi.blockcat([[C + mt(d, mt(Dky, Cm)), mt(d, Ck)], [mt(Dky, Cm), Ck]])
    Dcl = casadi.blockcat([[Dw + mt(d, mt(Dky, Dmw)), mt(d, Dkr)], [mt(Dky, Dmw), Dkr]])
    if numeric:
        Acl, Bcl, Ccl, Dcl = (np.array(x, dtype=float) for x in (Acl, Bcl, Ccl, Dcl))
    return Loop(
        A=Acl,
        B=Bcl,
        C=Ccl,
        D=Dcl,
        states=list(states) + list(controller_states),
        inputs=[inputs[i] for i in keep] + [REFERENCE],
        outputs=list(outputs) + [DRIVE_OUTPUT],
    )


def open_loop(A: Any, B: Any, C: Any, D: Any, states, inputs, outputs) -> Loop:
    """No controller: the circuit itself."""
    return Loop(A, B, C, D, list(states), list(inputs), list(outputs))


def held_output_maps(
    loop: Loop,
    powers: list[tuple[Any, Any]],
    C: Any,
    D: Any,
    *,
    inputs: list[str],
    drive: str,
) -> list[tuple[Any, Any]]:
    """Outputs between the samples of a sampled loop closed by :func:`close_pi`.

    ``loop`` is the discrete loop over the period (states ``[x..., controller...]``,
    inputs ``[w..., reference]``, outputs ``[y..., controller_output]``); ``powers[j] =
    (P_j, G_j)`` advance the circuit ``j`` output steps with its inputs held (``x_j = P_j x
    + G_j u``, ``P_0 = I``, ``G_0 = 0``); ``C, D`` are the circuit's output matrices and
    ``inputs`` its input names. The command ``u_k = Cu z + Du v`` (the loop's last output
    row) is held over the period, so ``j`` steps after a sample the circuit outputs are
    ``C x_j + D u`` with ``u = Ew w + e_drive u_k``; the last row stays ``u_k``.

    Returns ``[(C_j, D_j)]`` in the loop's states, inputs and outputs (``j = 0`` gives the
    loop's own ``C, D``). numpy in, numpy out; CasADi in, CasADi out.
    """
    import casadi

    numeric = not _is_casadi(loop.A, loop.C, C, D, *[m for pair in powers for m in pair])
    as_cas = (lambda m: casadi.DM(np.atleast_2d(np.asarray(m, dtype=float)))) if numeric else (
        lambda m: m
    )  # fmt: skip
    mt = casadi.mtimes
    Cl, Dl, Cc, Dc = (as_cas(m) for m in (loop.C, loop.D, C, D))
    nx, n_cl = Cc.shape[1], Cl.shape[1]
    Cu, Du = Cl[-1, :], Dl[-1, :]
    U_z, U_v = _held_inputs(Cl, Dl, inputs, drive)
    select_x = casadi.horzcat(casadi.DM.eye(nx), casadi.DM.zeros(nx, n_cl - nx))
    maps = []
    for P, G in powers:
        P, G = as_cas(P), as_cas(G)
        through = mt(Cc, G) + Dc
        C_j = casadi.vertcat(mt(mt(Cc, P), select_x) + mt(through, U_z), Cu)
        D_j = casadi.vertcat(mt(through, U_v), Du)
        if numeric:
            C_j, D_j = np.array(C_j, dtype=float), np.array(D_j, dtype=float)
        maps.append((C_j, D_j))
    return maps


def held_state_maps(
    loop: Loop,
    powers: list[tuple[Any, Any]],
    n_states: int,
    *,
    inputs: list[str],
    drive: str,
) -> list[tuple[Any, Any]]:
    """The circuit's state and held inputs between the samples of a loop closed by
    :func:`close_pi` (the quantities whose quadratic forms give exact energies).

    With the notation of :func:`held_output_maps`, ``j`` output steps after a sample the
    circuit state is ``x_j = P_j x + G_j u`` and its inputs ``u = U_z z + U_v v``, so
    ``[x_j; u] = Z_j z + W_j v``. ``n_states`` is the circuit's state count.

    Returns ``[(Z_j, W_j)]`` for ``j = 0 .. len(powers) - 1``; numpy in, numpy out;
    CasADi in, CasADi out.
    """
    import casadi

    items = (loop.A, loop.C, *[m for pair in powers for m in pair])
    numeric = not _is_casadi(*items)
    as_cas = (lambda m: casadi.DM(np.atleast_2d(np.asarray(m, dtype=float)))) if numeric else (
        lambda m: m
    )  # fmt: skip
    mt = casadi.mtimes
    Cl, Dl = as_cas(loop.C), as_cas(loop.D)
    n_cl = Cl.shape[1]
    U_z, U_v = _held_inputs(Cl, Dl, inputs, drive)
    select_x = casadi.horzcat(casadi.DM.eye(n_states), casadi.DM.zeros(n_states, n_cl - n_states))
    maps = []
    for P, G in powers:
        P, G = as_cas(P), as_cas(G)
        Z = casadi.vertcat(mt(P, select_x) + mt(G, U_z), U_z)
        W = casadi.vertcat(mt(G, U_v), U_v)
        if numeric:
            Z, W = np.array(Z, dtype=float), np.array(W, dtype=float)
        maps.append((Z, W))
    return maps


def _held_inputs(Cl: Any, Dl: Any, inputs: list[str], drive: str) -> tuple[Any, Any]:
    """``(U_z, U_v)``: the circuit inputs ``u = U_z z + U_v v`` of a sampled PI loop from the
    loop state ``z`` (through the held command ``u_k``, the loop's last output row) and
    the loop inputs ``v = [w..., reference]`` (CasADi)."""
    import casadi

    j = inputs.index(drive)
    keep = [i for i in range(len(inputs)) if i != j]
    Ew = np.zeros((len(inputs), len(keep) + 1))
    for column, row in enumerate(keep):
        Ew[row, column] = 1.0
    e = casadi.DM(np.eye(len(inputs))[:, [j]])
    return casadi.mtimes(e, Cl[-1, :]), casadi.DM(Ew) + casadi.mtimes(e, Dl[-1, :])


def hold_powers(Phi_h: Any, Gamma_h: Any, substeps: int) -> list[tuple[Any, Any]]:
    """``[(P_j, G_j)]`` for ``j = 0..substeps``: ``P_j = Phi_h**j`` and
    ``G_j = sum_{i<j} Phi_h**i Gamma_h``, the zero-order hold over ``j`` output steps built
    from the hold over one (numpy or CasADi)."""
    import casadi

    if not _is_casadi(Phi_h, Gamma_h):
        n = np.asarray(Phi_h).shape[0]
        out = [(np.eye(n), np.zeros_like(np.asarray(Gamma_h, dtype=float)))]
        for _ in range(substeps):
            P, G = out[-1]
            out.append((Phi_h @ P, Phi_h @ G + Gamma_h))
        return out
    n = Phi_h.shape[0]
    out = [(casadi.DM.eye(n), casadi.DM.zeros(n, Gamma_h.shape[1]))]
    for _ in range(substeps):
        P, G = out[-1]
        out.append((casadi.mtimes(Phi_h, P), casadi.mtimes(Phi_h, G) + Gamma_h))
    return out
