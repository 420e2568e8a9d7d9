"""The nonlinear program: multiple shooting over exact zero-order-hold steps, solved by IPOPT.

Decision variables (all scaled to order one):

* design variables on a logarithmic scale, ``value = lo * (hi / lo) ** q`` with
  ``q in [0, 1]``, so a resistor bounded by 0.1 and 100 ohm moves as freely near 0.1 as
  near 100;
* the state at every sample, divided by its largest magnitude along the starting
  trajectory (multiple shooting: Bock and Plitt, "A multiple shooting algorithm for direct
  solution of optimal control problems", IFAC 1984);
* a running-energy state per energy limit (so that no constraint row sums over the whole
  horizon, which would make the constraint Jacobian dense);
* one epigraph variable when the peak output impedance is minimised.

The parameter-dependent matrices (the ZOH of the closed loop, its continuous matrices, the
steady states the limits refer to) are SX expressions of the scaled design variables,
wrapped in one CasADi function; the NLP itself is an MX graph that calls it once, so their
derivatives are generated once and not once per sample.

Constraints: ``x[k+1] = Phi(p) x[k] + Gamma(p) v[k]`` (``Phi, Gamma`` the exact ZOH of the
closed loop through :mod:`wirestate.tune.expm`), ``x[0]`` = steady state (or zero), and
every limit as path constraints (one per sample or per frequency), each divided by the
size of its bound. IPOPT (Wachter and Biegler, Math. Programming 106, 2006) through CasADi's
``nlpsol`` gets exact first and second derivatives by algorithmic differentiation.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from wirestate.tune import limits as limit_measures
from wirestate.tune.model import CURRENT_PREFIX, TuningModel

Progress = Callable[[str], None] | None


@dataclass
class NlpSolution:
    values: dict[str, float]
    status: str
    success: bool
    iterations: int
    objective: float
    seconds: float
    squarings: int
    truncation_bound: float
    constraint_violation: float
    stats: dict[str, Any] = field(default_factory=dict)


def start_values(model: TuningModel) -> dict[str, float]:
    """The starting point: each variable's ``start``, else the geometric mean of its bounds."""
    out = {}
    for name, var in model.spec.variables.items():
        out[name] = float(var.start) if var.start is not None else math.sqrt(var.min * var.max)
    return out


def objective_terms(model: TuningModel, ev: Any) -> list[tuple[float, Any]]:
    """(weight, value) of each objective term except the impedance epigraph."""
    objective = model.spec.objective
    terms: list[tuple[float, Any]] = []
    if objective.capacitance:
        caps = [ev.values[p] for p in objective.parts if model.circuit.parts[p].kind == "capacitor"]
        if caps:
            terms.append((objective.capacitance, sum(caps[1:], caps[0])))
    if objective.resistor_energy:
        resistors = [p for p in objective.parts if model.circuit.parts[p].kind == "resistor"]
        energies = [limit_measures.resistor_energy(model, ev, p) for p in resistors]
        if energies:
            terms.append((objective.resistor_energy, sum(energies[1:], energies[0])))
    if objective.ise:
        terms.append(
            (objective.ise, limit_measures.integral_squared_error(model, ev, objective.output))
        )
    return terms


def peak_impedance(model: TuningModel, ev: Any, factor: int = 1) -> float:
    """Largest ``|Z|`` over the bands of every output-impedance limit (numeric)."""
    peaks = [
        float(
            np.max(
                limit_measures.impedance_magnitude(
                    ev, model, lim, limit_measures.frequency_grid(lim, factor)
                )
            )
        )
        for lim in model.spec.limits
        if lim.kind == "output_impedance"
    ]
    return max(peaks) if peaks else 0.0


def objective_value(
    model: TuningModel, ev: Any, start_terms: list[float], start_peak: float
) -> float:
    """The normalised objective (each term divided by its value at the start)."""
    total = 0.0
    for (weight, value), ref in zip(objective_terms(model, ev), start_terms, strict=True):
        total += weight * float(value) / ref
    if model.spec.objective.peak_impedance:
        total += model.spec.objective.peak_impedance * peak_impedance(model, ev) / start_peak
    return total


class _IterationReport:
    """CasADi iteration callback forwarding IPOPT's iterations to ``progress``."""

    def __new__(cls, nlp_sizes: dict[str, Any], progress: Callable[[str], None]):
        import casadi

        class Callback(casadi.Callback):
            def __init__(self) -> None:
                casadi.Callback.__init__(self)
                self.count = 0
                self.construct("tune_progress", {})

            def get_n_in(self):
                return casadi.nlpsol_n_out()

            def get_n_out(self):
                return 1

            def get_name_in(self, i):
                return casadi.nlpsol_out(i)

            def get_name_out(self, i):
                return "ret"

            def get_sparsity_in(self, i):
                name = casadi.nlpsol_out(i)
                if name in ("f",):
                    return casadi.Sparsity.scalar()
                if name in ("x", "lam_x"):
                    return casadi.Sparsity.dense(nlp_sizes["x"])
                if name in ("g", "lam_g"):
                    return casadi.Sparsity.dense(nlp_sizes["g"])
                return casadi.Sparsity(0, 0)

            def eval(self, arg):
                self.count += 1
                if self.count == 1 or self.count % 5 == 0:
                    progress(f"solver iteration {self.count}: objective {float(arg[1]):.6g}")
                return [0]

        return Callback()


def solve_nlp(
    model: TuningModel,
    *,
    progress: Progress = None,
    max_iterations: int = 300,
    tolerance: float = 1e-8,
) -> NlpSolution:
    """Build and solve the NLP of ``model``; see the module docstring."""
    import time

    import casadi

    t0 = time.perf_counter()
    spec = model.spec
    names = model.variables
    bounds = {n: (float(spec.variables[n].min), float(spec.variables[n].max)) for n in names}
    start = start_values(model)
    start_ev = model.numeric(start)
    squarings = model.squarings(bounds, start)

    # the parameter-dependent matrices are built once as SX expressions of the scaled
    # variables and wrapped in one function; the NLP is an MX graph that calls it once
    q_sx = casadi.SX.sym("q", len(names))
    values_sx = {
        n: bounds[n][0] * (bounds[n][1] / bounds[n][0]) ** q_sx[i] for i, n in enumerate(names)
    }
    matrices_sx = model.symbolic(values_sx, squarings)
    keys = list(matrices_sx)
    matrices_fn = casadi.Function(
        "loop_matrices",
        [q_sx],
        [matrices_sx[k] for k in keys] + [casadi.vertcat(*values_sx.values())],
    )
    q = casadi.MX.sym("q", len(names))
    outputs = matrices_fn(q)
    matrices = dict(zip(keys, outputs[:-1], strict=True))
    values = {n: outputs[-1][i] for i, n in enumerate(names)}
    n_x = start_ev.X.shape[0]
    samples = model.n_steps + 1
    scale = np.max(np.abs(start_ev.X), axis=1)
    scale = np.where(scale > 1e-9 * max(scale.max(), 1e-300), scale, max(scale.max(), 1.0))
    Xs = casadi.MX.sym("X", n_x, samples)
    X = casadi.mtimes(casadi.diag(casadi.DM(scale)), Xs)

    g: list[Any] = []
    lbg: list[float] = []
    ubg: list[float] = []

    def add(expr: Any, lower: float, upper: float) -> None:
        expr = casadi.vec(expr)
        g.append(expr)
        lbg.extend([lower] * expr.numel())
        ubg.extend([upper] * expr.numel())

    ev = model.evaluation(matrices, values, X)

    V = casadi.DM(model.schedule)
    inv_scale = casadi.DM(1.0 / scale)
    # dynamics (defects), scaled by the state magnitudes
    defects = X[:, 1:] - casadi.mtimes(ev.Phi, X[:, :-1]) - casadi.mtimes(ev.Gamma, V[:, :-1])
    add(casadi.mtimes(casadi.diag(inv_scale), defects), 0.0, 0.0)
    x0 = ev.extra["x0"]
    add(inv_scale * (X[:, 0] - x0), 0.0, 0.0)

    extra_decisions: list[Any] = []
    extra_start: list[np.ndarray] = []
    for lim in spec.limits:
        if lim.kind in ("damping_ratio", "pole_real_part"):
            # Routh-Hurwitz entries of a normalised polynomial: order one, strictly negative
            add(limit_measures.excess(lim, model, ev, start_ev)[0], -casadi.inf, -1e-9)
            continue
        if lim.kind == "energy":
            # a running-energy state keeps every constraint row local in time (a dense row
            # summing over all samples would make the constraint Jacobian expensive to form)
            energy_scale = abs(float(lim.max)) or 1.0
            Es = casadi.MX.sym(f"E_{lim.part}", samples)
            E = Es * energy_scale
            i = ev.Y[model.outputs.index(CURRENT_PREFIX + lim.part), :].T
            R = ev.values[lim.part]
            increments = 0.5 * model.step * R * (i[:-1] ** 2 + i[1:] ** 2)
            add((E[1:] - E[:-1] - increments) / energy_scale, 0.0, 0.0)
            add(Es[0], 0.0, 0.0)
            add(Es[-1] - float(lim.max) / energy_scale, -casadi.inf, 0.0)
            i0 = start_ev.Y[model.outputs.index(CURRENT_PREFIX + lim.part), :]
            R0 = start_ev.values[lim.part]
            running = np.concatenate(
                [[0.0], np.cumsum(0.5 * model.step * R0 * (i0[:-1] ** 2 + i0[1:] ** 2))]
            )
            extra_decisions.append(Es)
            extra_start.append(running / energy_scale)
            continue
        bound = _bound_size(lim)
        for vec in limit_measures.excess(lim, model, ev, start_ev):
            add(vec / bound, -casadi.inf, 0.0)

    start_terms = [abs(float(v)) or 1.0 for _, v in objective_terms(model, start_ev)]
    f = 0
    for (weight, value), ref in zip(objective_terms(model, ev), start_terms, strict=True):
        f = f + weight * value / ref
    decision = [q, casadi.vec(Xs), *extra_decisions]
    x_start = [
        np.array(
            [
                math.log(start[n] / bounds[n][0]) / math.log(bounds[n][1] / bounds[n][0])
                for n in names
            ]
        ),
        (start_ev.X / scale[:, None]).ravel(order="F"),
        *extra_start,
    ]
    n_free = n_x * samples + sum(x.size for x in extra_start)
    lbx = [np.zeros(len(names)), -np.inf * np.ones(n_free)]
    ubx = [np.ones(len(names)), np.inf * np.ones(n_free)]
    if spec.objective.peak_impedance:
        start_peak = peak_impedance(model, start_ev) or 1.0
        tau = casadi.MX.sym("tau")
        for lim in spec.limits:
            if lim.kind == "output_impedance":
                z = limit_measures.impedance_magnitude(
                    ev, model, lim, limit_measures.frequency_grid(lim)
                )
                add(z / start_peak - tau, -casadi.inf, 0.0)
        f = f + spec.objective.peak_impedance * tau
        decision.append(tau)
        x_start.append(np.array([1.0]))
        lbx.append(np.array([0.0]))
        ubx.append(np.array([np.inf]))

    xvec = casadi.vertcat(*decision)
    gvec = casadi.vertcat(*g)
    options: dict[str, Any] = {
        "print_time": False,
        "ipopt.print_level": 0,
        "ipopt.sb": "yes",
        "ipopt.max_iter": max_iterations,
        "ipopt.tol": tolerance,
        # the defects carry rounding of order 1e-8 of the state scale (products of the
        # exponential with the states); asking for less stalls IPOPT in round-off
        "ipopt.constr_viol_tol": 1e-6,
        "ipopt.acceptable_iter": 3,
        "ipopt.mu_strategy": "adaptive",
    }
    if progress is not None:
        callback = _IterationReport({"x": xvec.numel(), "g": gvec.numel()}, progress)
        options["iteration_callback"] = callback
        progress(
            f"NLP: {len(names)} design variables, {xvec.numel()} unknowns, "
            f"{gvec.numel()} constraints, ZOH with {squarings} squarings"
        )
    t_built = time.perf_counter()
    solver = casadi.nlpsol("tune", "ipopt", {"x": xvec, "f": f, "g": gvec}, options)
    t_constructed = time.perf_counter()
    result = solver(
        x0=np.concatenate(x_start),
        lbx=np.concatenate(lbx),
        ubx=np.concatenate(ubx),
        lbg=np.array(lbg),
        ubg=np.array(ubg),
    )
    t_solved = time.perf_counter()
    stats = solver.stats()
    qv = np.array(result["x"][: len(names)]).ravel()
    optimum = {
        n: float(bounds[n][0] * (bounds[n][1] / bounds[n][0]) ** min(max(qv[i], 0.0), 1.0))
        for i, n in enumerate(names)
    }
    gval = np.array(result["g"]).ravel()
    violation = float(np.max(np.concatenate([[0.0], np.array(lbg) - gval, gval - np.array(ubg)])))
    status = str(stats.get("return_status", "unknown"))
    from wirestate.tune.expm import truncation_bound

    return NlpSolution(
        values=optimum,
        status=status,
        success=bool(stats.get("success", False)),
        iterations=int(stats.get("iter_count", 0)),
        objective=float(result["f"]),
        seconds=time.perf_counter() - t0,
        squarings=squarings,
        truncation_bound=truncation_bound(squarings),
        constraint_violation=violation,
        stats={
            "unknowns": int(xvec.numel()),
            "constraints": int(gvec.numel()),
            "seconds_building_expressions": t_built - t0,
            "seconds_generating_derivatives": t_constructed - t_built,
            "seconds_in_ipopt": t_solved - t_constructed,
        },
    )


def _bound_size(limit: Any) -> float:
    for value in (limit.max, limit.min, limit.band if not isinstance(limit.band, tuple) else None):
        if value is not None and value != 0:
            return abs(float(value))
    return 1.0
