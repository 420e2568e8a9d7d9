"""A system file's blocks closed around one circuit block, written once for numpy and CasADi.

Tuning parts of a circuit block inside a composed system (tuning file ``system = ...`` and
``block = ...``) needs the closed loop as a function of that block's matrices alone; every
other block is fixed. Stack the continuous blocks block-diagonally (``x' = A x + B u``,
``y = C x + D u``) and write the wiring as ``u = K y + G v``: ``K`` picks the block output
that drives each block input, ``G`` the external input (or held output of a sampled block)
in ``v``. Then::

    (I - D K) y = C x + D G v
    x' = (A + B K Cy) x + (B K Dy + B G) v,    y = Cy x + Dy v

with ``Cy, Dy`` the solution of the first line; ``I - D K`` is invertible because the
composition refused algebraic loops. This is the interconnection that
``control.interconnect`` forms numerically (a test checks the two agree); here it also runs
on CasADi expressions.

Sampled blocks (one common period ``Ts``, the stepping period of the tuning) see the
continuous part through its zero-order hold over ``Ts`` (``Phi, [Gw, Gs]``: the held
outputs ``ys`` of the sampled blocks are inputs between samples), formed as the power
``Phi_h**m`` of the hold over the output step ``h = Ts / m``, whose lower powers give the
outputs between the samples. At a sample, with ``yc = Cy x + Dyw w + Dys ys`` and
the sampled blocks ``xs+ = As xs + Bs us``, ``ys = Cs xs + Ds us``, ``us = Ksc yc + Kss ys +
Es w``, the held outputs solve::

    (I - Ds (Ksc Dys + Kss)) ys = Ds Ksc Cy x + Cs xs + Ds (Ksc Dyw + Es) w

which gives one discrete loop in ``z = [x; xs]``. This is the sample-instant order of
:mod:`wirestate.simulate.hybrid` (outputs held from ``t_k`` on, a block with a computation
delay publishing its delayed command first); a test checks the two against each other.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from wirestate.blocks import PIDController
from wirestate.compose import LINEAR, SAMPLED, ComposedSystem
from wirestate.errors import TuningError
from wirestate.lti import CircuitBlock
from wirestate.tune.loop import hold_powers


@dataclass
class ContinuousPart:
    """The continuous blocks closed among themselves: inputs ``[w..., ys...]``."""

    A: Any
    B: Any
    C: Any
    D: Any


class SystemLoop:
    """The wiring of ``system`` around its circuit block ``design``; see the module
    docstring. ``design_outputs`` are the design block's outputs as the tuning model
    compiles it (its own outputs first, then the watch outputs the model adds)."""

    def __init__(
        self,
        system: ComposedSystem,
        design: str,
        design_outputs: list[str],
        *,
        file: str | None = None,
    ) -> None:
        self.system = system
        self.design = design
        blocks = system.blocks
        if design not in blocks or not isinstance(blocks[design].source, CircuitBlock):
            raise not_a_circuit_block(system, design, file)
        #: ``block.output -> (low, high)`` of every controller with output limits; the loop
        #: uses its unsaturated dynamics, exact while the command stays inside the limits
        self.output_ranges: dict[str, tuple[float, float]] = {}
        for name, b in blocks.items():
            controller = isinstance(b.source, PIDController)
            if b.category not in (LINEAR, SAMPLED) and not controller:
                raise TuningError(
                    "invalid_field",
                    f"block {name!r} of system {system.name!r} is a nonlinear block; the "
                    "tuning optimiser needs a linear loop (controllers with output limits "
                    "are the exception: their commands are kept inside the limits)",
                    file=file,
                    location=("tuning", "system"),
                )
            if controller and b.source.is_limited:
                self.output_ranges[f"{name}.{b.outputs[0]}"] = tuple(
                    float(v) for v in b.source.limits
                )
        periods = sorted({float(b.sample_time) for b in blocks.values() if b.category == SAMPLED})
        if len(periods) > 1:
            raise TuningError(
                "invalid_field",
                f"system {system.name!r} samples at {len(periods)} periods "
                f"({', '.join(f'{p:g} s' for p in periods)}); tuning needs one common period",
                file=file,
                location=("tuning", "system"),
            )
        self.sample_time: float | None = periods[0] if periods else None
        self.continuous = [n for n, b in blocks.items() if b.category not in (SAMPLED,)]
        self.sampled = [n for n, b in blocks.items() if b.category == SAMPLED]
        self._outputs = {n: list(blocks[n].outputs) for n in blocks}
        self._outputs[design] = list(design_outputs)
        self.inputs = list(system.inputs)
        yc = [f"{n}.{o}" for n in self.continuous for o in self._outputs[n]]
        ys = [f"{n}.{o}" for n in self.sampled for o in self._outputs[n]]
        uc = [f"{n}.{i}" for n in self.continuous for i in blocks[n].inputs]
        us = [f"{n}.{i}" for n in self.sampled for i in blocks[n].inputs]
        self.continuous_outputs, self.sampled_outputs = yc, ys
        self.states = [f"{n}.{s}" for n in self.continuous for s in blocks[n].states]
        self.sampled_states = [f"{n}.{s}" for n in self.sampled for s in blocks[n].states]
        # wiring matrices: block inputs from continuous outputs, held sampled outputs and
        # external inputs
        self.Kcc, self.Kcs, self.Ec = self._selection(uc, yc, ys)
        self.Ksc, self.Kss, self.Es = self._selection(us, yc, ys)
        self._fixed = {
            n: tuple(np.asarray(m, dtype=float) for m in self._matrices(n))
            for n in self.continuous + self.sampled
            if n != design
        }

    def _selection(
        self, destinations: list[str], yc: list[str], ys: list[str]
    ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        from_c = np.zeros((len(destinations), len(yc)))
        from_s = np.zeros((len(destinations), len(ys)))
        from_w = np.zeros((len(destinations), len(self.inputs)))
        external = {d: e for e, ds in self.system.external_inputs.items() for d in ds}
        for row, dest in enumerate(destinations):
            src = self.system.wiring.get(dest)
            if src in yc:
                from_c[row, yc.index(src)] = 1.0
            elif src in ys:
                from_s[row, ys.index(src)] = 1.0
            else:  # compose checked that every input is driven
                from_w[row, self.inputs.index(external[dest])] = 1.0
        return from_c, from_s, from_w

    def _matrices(self, name: str) -> tuple[Any, Any, Any, Any]:
        # a sampled controller: the discrete matrices; a continuous one with limits (a
        # nonlinear block for the simulator): its unsaturated continuous dynamics. Read
        # without building a control.StateSpace (python-control: a second to import).
        return self.system.blocks[name].matrices()

    @property
    def signals(self) -> list[str]:
        """Every block output, ``block.signal``: the rows of :meth:`discrete`'s outputs
        (continuous outputs, then the held outputs of the sampled blocks)."""
        return self.continuous_outputs + self.sampled_outputs

    @property
    def all_states(self) -> list[str]:
        return self.states + self.sampled_states

    # -- the loop -------------------------------------------------------------------------

    def continuous_part(self, A1: Any, B1: Any, C1: Any, D1: Any) -> ContinuousPart:
        """The continuous blocks closed among themselves around the design block's
        matrices ``(A1, B1, C1, D1)`` (numpy or CasADi); inputs ``[w..., ys...]``,
        outputs :attr:`continuous_outputs`."""
        import casadi

        numeric = _numeric(A1, B1, C1, D1)
        parts = [(A1, B1, C1, D1) if n == self.design else self._fixed[n] for n in self.continuous]
        A, B, C, D = (_blockdiag([p[i] for p in parts]) for i in range(4))
        mt = casadi.mtimes
        K = casadi.DM(self.Kcc)
        G = casadi.DM(np.hstack([self.Ec, self.Kcs]))
        N = casadi.DM.eye(D.shape[0]) - mt(D, K)
        Cy = casadi.solve(N, C)
        Dy = casadi.solve(N, mt(D, G))
        Acl = A + mt(B, mt(K, Cy))
        Bcl = mt(B, mt(K, Dy)) + mt(B, G)
        return ContinuousPart(*(_back(m, numeric) for m in (Acl, Bcl, Cy, Dy)))

    def discrete(
        self, part: ContinuousPart, Phi_h: Any, Gamma_h: Any, substeps: int = 1
    ) -> tuple[Any, Any, list[tuple[Any, Any]], list[tuple[Any, Any]]]:
        """The discrete loop over one sample period from the continuous part and its
        zero-order hold ``(Phi_h, Gamma_h)`` over ``period / substeps``.

        Returns ``(Phi_cl, Gamma_cl, maps, held)``: the loop over one period in the states
        :attr:`all_states` and inputs :attr:`inputs`, and ``maps[j] = (C_j, D_j)`` giving
        the outputs :attr:`signals` ``j`` substeps after a sample (``j = 0``: at the
        sample) from the state and inputs at that sample: the continuous part advanced by
        ``Phi_h**j`` with the sampled outputs held, those outputs themselves constant.
        ``held[j] = (Z_j, W_j)`` give the continuous part's state and inputs
        ``[x_j; w; ys]`` ``j`` substeps after a sample as ``Z_j z + W_j w``
        (``x_j = P_j x + Gw_j w + Gs_j ys``, ``ys = Yx z + Yw w``), for exact energies.
        """
        import casadi

        numeric = _numeric(Phi_h, Gamma_h, part.C, part.D)
        mt = casadi.mtimes
        nw, nx = len(self.inputs), len(self.states)
        Phi_h, Gamma_h, Cy, Dy = (
            casadi.DM(m) if numeric else m for m in (Phi_h, Gamma_h, part.C, part.D)
        )
        # powers over the substeps: x(t_k + j h) = P_j x_k + G_j [w; ys]
        powers = hold_powers(Phi_h, Gamma_h, substeps)
        Phi, Gamma = powers[-1]
        Gw, Gs = Gamma[:, :nw], Gamma[:, nw:]
        Dyw, Dys = Dy[:, :nw], Dy[:, nw:]
        fixed = [self._fixed[n] for n in self.sampled]
        As, Bs, Cs, Ds = (casadi.DM(_blockdiag([f[i] for f in fixed])) for i in range(4))
        Ksc, Kss, Es = (casadi.DM(m) for m in (self.Ksc, self.Kss, self.Es))
        ns = As.shape[0]
        M = casadi.DM.eye(Ds.shape[0]) - mt(Ds, mt(Ksc, Dys) + Kss)
        Yx = casadi.solve(M, casadi.horzcat(mt(Ds, mt(Ksc, Cy)), Cs))
        Yw = casadi.solve(M, mt(Ds, mt(Ksc, Dyw) + Es))
        select_x = casadi.horzcat(casadi.DM.eye(nx), casadi.DM.zeros(nx, ns))
        through = mt(Ksc, Dys) + Kss
        Phi_cl = (
            casadi.diagcat(Phi, As)
            + mt(casadi.vertcat(Gs, mt(Bs, through)), Yx)
            + mt(casadi.vertcat(casadi.DM.zeros(nx, Ksc.shape[0]), Bs), mt(mt(Ksc, Cy), select_x))
        )
        Gamma_cl = casadi.vertcat(Gw, mt(Bs, mt(Ksc, Dyw) + Es)) + mt(
            casadi.vertcat(Gs, mt(Bs, through)), Yw
        )
        maps = []
        for P, G in powers[:substeps]:
            # continuous outputs j substeps on: Cy x_j + Dyw w + Dys ys, with
            # x_j = P x_k + Gw_j w + Gs_j ys and ys = Yx z + Yw w held
            Gw_j, Gs_j = G[:, :nw], G[:, nw:]
            via_held = mt(Cy, Gs_j) + Dys
            C_j = casadi.vertcat(mt(mt(Cy, P), select_x) + mt(via_held, Yx), Yx)
            D_j = casadi.vertcat(mt(Cy, Gw_j) + Dyw + mt(via_held, Yw), Yw)
            maps.append((_back(C_j, numeric), _back(D_j, numeric)))
        held = []
        for P, G in powers[:substeps]:
            Gw_j, Gs_j = G[:, :nw], G[:, nw:]
            Z = casadi.vertcat(mt(P, select_x) + mt(Gs_j, Yx), casadi.DM.zeros(nw, nx + ns), Yx)
            W = casadi.vertcat(Gw_j + mt(Gs_j, Yw), casadi.DM.eye(nw), Yw)
            held.append((_back(Z, numeric), _back(W, numeric)))
        return _back(Phi_cl, numeric), _back(Gamma_cl, numeric), maps, held


def not_a_circuit_block(system: ComposedSystem, design: Any, file: str | None) -> TuningError:
    """The error for a ``block`` that names no circuit block of ``system``."""
    circuits = [n for n, b in system.blocks.items() if isinstance(b.source, CircuitBlock)]
    return TuningError(
        "unknown_part",
        f"block {design!r} is not a circuit block of system {system.name!r} "
        f"(circuit blocks: {', '.join(circuits) or 'none'})",
        file=file,
        location=("tuning", "block"),
    )


def _numeric(*items: Any) -> bool:
    import casadi

    return not any(isinstance(i, casadi.SX | casadi.MX) for i in items)


def _back(m: Any, numeric: bool) -> Any:
    return np.array(m, dtype=float) if numeric else m


def _blockdiag(mats: list[Any]) -> Any:
    import casadi

    return casadi.diagcat(*[casadi.DM(np.atleast_2d(np.asarray(m, dtype=float)))
                            if isinstance(m, np.ndarray | float | int | list) else m
                            for m in mats])  # fmt: skip
