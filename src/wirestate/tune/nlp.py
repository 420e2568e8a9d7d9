"""The nonlinear program over exact zero-order-hold steps, solved by IPOPT.

Two formulations of the same problem:

* **condensed** (used when the loop is stable at the starting point): the only unknowns
  are the design variables; the trajectory ``x[k+1] = Phi(p) x[k] + Gamma(p) v[k]`` is an
  expression of them (the states eliminated, as in condensing the QPs of multiple
  shooting: Bock and Plitt 1984, below). Since the loop is linear in the state for fixed
  part values, ``Phi, Gamma`` are formed once per evaluation and the steps run through
  CasADi's ``mapaccum`` over a small function advancing a block of samples, so the graph
  stays small and its derivatives are generated once. An unstable loop would make the
  eliminated trajectory grow without bound, hence the fallback:
* **multiple shooting** (Bock and Plitt, "A multiple shooting algorithm for direct
  solution of optimal control problems", IFAC 1984): the state at every sample is an
  unknown, divided by its largest magnitude along the starting trajectory, and the
  dynamics are equality constraints (defects); an energy limit gets a running-energy state
  so that no constraint row sums over the whole horizon.

Both use: design variables on a logarithmic scale, ``value = lo * (hi / lo) ** q`` with
``q in [0, 1]``, so a resistor bounded by 0.1 and 100 ohm moves as freely near 0.1 as near
100; one epigraph variable when the peak output impedance is minimised; every limit as
path constraints (one per sample or per frequency), each divided by the size of its bound,
a two-sided band (``|y - y_f| <= b``) as one row with two bounds.

Robust variant (``robust=True``, the tuning file's ``[solver] robust = true``): the same
limits are imposed again at every tolerance corner (each toleranced part, design variables
included, at ``value * (1 +- t)``), a worst-case vertex formulation over the tolerance box
with the same design variables. Each corner's matrices come from the same compile path
(:func:`wirestate.reduce.symbolic_state_space` with that corner's part values) and its own
trajectory (condensed) or states (multiple shooting); the objective stays at the nominal
values.

The parameter-dependent matrices (the ZOH of the closed loop through
:mod:`wirestate.tune.expm`, its continuous matrices, the steady states the limits refer
to, ``x[0]`` = steady state or zero) are SX expressions of the scaled design variables,
wrapped in one CasADi function; the NLP itself is an MX graph that calls it once. IPOPT
(Wachter and Biegler, Math. Programming 106, 2006) through CasADi's ``nlpsol`` gets exact
first and (by default) second derivatives by algorithmic differentiation.
"""

from __future__ import annotations

import functools
import math
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from wirestate.tune import expm as cexpm
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


FORMULATIONS = ("auto", "condensed", "multiple_shooting")
HESSIANS = ("exact", "limited_memory")

#: samples advanced per call of the condensed stepping function (see ``_condensed_states``)
_BLOCK = 50


def is_stable_discrete(Phi: np.ndarray) -> bool:
    """True when every eigenvalue of the one-sample transition matrix lies inside the unit
    circle (with a margin of 1e-9 for round-off)."""
    return bool(np.max(np.abs(np.linalg.eigvals(Phi))) < 1.0 - 1e-9)


def _squarings(model: TuningModel, q_sx: Any, zoh_pair: tuple[Any, Any], q_points) -> int:
    """:meth:`TuningModel.squarings` through the symbolic matrices: the same norm
    ``||[[A, B], [0, 0]] h||_1`` at the same points, evaluated in one vectorised call."""
    import casadi

    A, B = zoh_pair
    norm = model.output_step * casadi.fmax(
        casadi.mmax(casadi.sum1(casadi.fabs(A))), casadi.mmax(casadi.sum1(casadi.fabs(B)))
    )
    fn = casadi.Function("step_norm", [q_sx], [norm])
    points = np.column_stack(q_points)
    norms = np.array(fn.map(points.shape[1])(points)).ravel()
    norms = norms[np.isfinite(norms)]
    # a corner where the circuit cannot be compiled gives no finite norm; it is skipped
    # exactly as the numeric path skips the compile error
    return cexpm.squarings_for_norm(2.0 * float(np.max(norms)))


@functools.lru_cache(maxsize=16)
def _stepping_function(n: int, blocks: int, block: int) -> Any:
    """``mapaccum`` of a small SX function advancing ``block`` samples of an ``n``-state
    loop, repeated ``blocks`` times. Cached, so that every corner of a robust problem (and
    every NLP of the same size) calls the same CasADi function, whose derivative functions
    CasADi then generates once and keeps."""
    import casadi

    x = casadi.SX.sym("x", n)
    w = casadi.SX.sym("w", n, block)
    P = casadi.SX.sym("Phi", n, n)
    columns = []
    state = x
    for j in range(block):
        state = casadi.mtimes(P, state) + w[:, j]
        columns.append(state)
    steps = casadi.Function("steps", [x, w, P], [state, casadi.horzcat(*columns)])
    return steps.mapaccum("trajectory", blocks, [0], [0])


def _condensed_states(Phi: Any, Gamma: Any, x0: Any, V: np.ndarray) -> Any:
    """State trajectory ``X = [x0, x1, ..., xN]`` as an expression of the loop matrices
    (the states eliminated, as in condensing: Bock and Plitt 1984).

    ``x[k+1] = Phi x[k] + w[k]`` with ``w = Gamma v`` formed in one product; the steps run
    through CasADi's ``mapaccum`` over a small SX function that advances ``_BLOCK``
    samples (:func:`_stepping_function`), so the graph holds ``N / _BLOCK`` calls of one
    function whose derivatives are generated once (the horizon is padded with zero inputs
    to a whole number of blocks; the padding is cut off again).
    """
    import casadi

    n, steps = Phi.shape[0], V.shape[1] - 1
    blocks = -(-steps // _BLOCK)
    padded = np.zeros((V.shape[0], blocks * _BLOCK))
    padded[:, :steps] = V[:, :-1]
    run = _stepping_function(n, blocks, _BLOCK)
    W = casadi.mtimes(Gamma, casadi.DM(padded))
    _, states = run(x0, W, casadi.repmat(Phi, 1, blocks))
    return casadi.horzcat(x0, states[:, :steps])


def solve_nlp(
    model: TuningModel,
    *,
    progress: Progress = None,
    max_iterations: int = 300,
    tolerance: float = 1e-8,
    formulation: str = "auto",
    hessian: str = "exact",
    robust: bool = False,
    corner_factors: list[dict[str, float]] | None = None,
    start: dict[str, float] | None = None,
) -> NlpSolution:
    """Build and solve the NLP of ``model``; see the module docstring.

    Parameters
    ----------
    formulation
        ``"multiple_shooting"`` (states as unknowns, dynamics as equality constraints),
        ``"condensed"`` (states eliminated: the trajectory is an expression of the design
        variables) or ``"auto"``: condensed when the loop is stable at the starting point
        (the eliminated trajectory then stays bounded), multiple shooting otherwise.
    hessian
        ``"exact"`` (second derivatives by algorithmic differentiation) or
        ``"limited_memory"`` (IPOPT's L-BFGS update from the exact gradients; cheaper per
        iteration, usually a few more iterations).
    robust
        Impose every limit at the nominal values and at every tolerance corner of
        :meth:`TuningModel.tolerance_corners` (each toleranced part's value, design
        variables included, times ``1 +- t``); the design variables and the objective
        (taken at the nominal values) are unchanged. Each corner adds the constraints of
        the nominal problem once more (and, in multiple shooting, its own states).
    corner_factors
        With ``robust``: impose the limits at these corners only (factor mappings as in
        :meth:`TuningModel.tolerance_corners`), for an exchange over the corners.
    start
        Starting values of the design variables (default :func:`start_values`); the
        limits are still defined against the nominal start, as everywhere.
    """
    import time

    import casadi

    if formulation not in FORMULATIONS:
        raise ValueError(f"internal: unknown formulation {formulation!r}")
    if hessian not in HESSIANS:
        raise ValueError(f"internal: unknown Hessian option {hessian!r}")
    t0 = time.perf_counter()
    spec = model.spec
    names = model.variables
    bounds = {n: (float(spec.variables[n].min), float(spec.variables[n].max)) for n in names}
    nominal_start = start_values(model)
    start_ev = model.numeric(nominal_start)
    start = nominal_start if start is None else {**nominal_start, **start}
    guess_ev = start_ev if start is nominal_start else model.numeric(start)
    # the points at which every limit is imposed: the nominal values (no factors) and,
    # when robust, every tolerance corner (factors 1 +- t on the toleranced parts)
    corners: list[dict[str, float]] = [{}]
    if robust:
        toleranced, factors = model.tolerance_corners()
        if corner_factors is not None:
            factors = list(corner_factors)
        # without toleranced parts the one "corner" is the nominal point itself
        corners += factors if toleranced else []
    # numeric starting evaluations at each corner: initial guesses and state scales only;
    # the limits themselves are defined against the nominal start, as in the verification
    start_evs = [guess_ev] + [model.numeric(model.corner_values(start, c)) for c in corners[1:]]
    if formulation == "auto":
        stable = all(is_stable_discrete(np.asarray(e.Phi)) for e in start_evs)
        formulation = "condensed" if stable else "multiple_shooting"

    def scaled(point: dict[str, float]) -> np.ndarray:
        return np.array(
            [
                math.log(point[n] / bounds[n][0]) / math.log(bounds[n][1] / bounds[n][0])
                for n in names
            ]
        )

    q_start = scaled(start)
    # the parameter-dependent matrices are built once as SX expressions of the scaled
    # variables and wrapped in one function; the NLP is an MX graph that calls it once.
    # Each corner goes through the same compile path (symbolic_state_space) with its own
    # part values: the design variables times their factors, other parts as constants.
    q_sx = casadi.SX.sym("q", len(names))
    values_sx = {
        n: bounds[n][0] * (bounds[n][1] / bounds[n][0]) ** q_sx[i] for i, n in enumerate(names)
    }
    corner_values_sx = [model.corner_values(values_sx, c) for c in corners]
    loops_sx = [model.symbolic_loop(v) for v in corner_values_sx]
    norm_points = [q_start] + [scaled(point) for point in model.norm_points(bounds)]
    # one number of squarings for all corners: the largest any corner needs
    squarings = max(_squarings(model, q_sx, loop["zoh"], norm_points) for loop in loops_sx)
    matrices_per_corner = [
        model.symbolic(v, squarings, loop)
        for v, loop in zip(corner_values_sx, loops_sx, strict=True)
    ]
    keys = list(matrices_per_corner[0])
    matrices_fn = casadi.Function(
        "loop_matrices",
        [q_sx],
        [m[k] for m in matrices_per_corner for k in keys] + [casadi.vertcat(*values_sx.values())],
    )
    q = casadi.MX.sym("q", len(names))
    outputs = matrices_fn(q)
    values = {n: outputs[-1][i] for i, n in enumerate(names)}
    n_x = start_ev.X.shape[0]
    samples = model.n_steps + 1

    g: list[Any] = []
    lbg: list[float] = []
    ubg: list[float] = []

    def add(expr: Any, lower: float, upper: float) -> None:
        expr = casadi.vec(expr)
        g.append(expr)
        lbg.extend([lower] * expr.numel())
        ubg.extend([upper] * expr.numel())

    decision = [q]
    x_start = [q_start]
    lbx = [np.zeros(len(names))]
    ubx = [np.ones(len(names))]
    evaluations_per_corner = []
    for index, (factors, corner_start) in enumerate(zip(corners, start_evs, strict=True)):
        matrices = dict(
            zip(keys, outputs[index * len(keys) : (index + 1) * len(keys)], strict=True)
        )
        corner_values = model.corner_values(values, factors)
        if formulation == "condensed":
            X = _condensed_states(
                matrices["Phi"], matrices["Gamma"], matrices["x0"], model.schedule
            )
            ev = model.evaluation(matrices, corner_values, X)
        else:
            scale = np.max(np.abs(corner_start.X), axis=1)
            scale = np.where(scale > 1e-9 * max(scale.max(), 1e-300), scale, max(scale.max(), 1.0))
            Xs = casadi.MX.sym(f"X{index}", n_x, samples)
            X = casadi.mtimes(casadi.diag(casadi.DM(scale)), Xs)
            ev = model.evaluation(matrices, corner_values, X)
            V = casadi.DM(model.schedule)
            inv_scale = casadi.DM(1.0 / scale)
            # dynamics (defects), scaled by the state magnitudes
            defects = (
                X[:, 1:] - casadi.mtimes(ev.Phi, X[:, :-1]) - casadi.mtimes(ev.Gamma, V[:, :-1])
            )
            add(casadi.mtimes(casadi.diag(inv_scale), defects), 0.0, 0.0)
            add(inv_scale * (X[:, 0] - ev.extra["x0"]), 0.0, 0.0)
            decision.append(casadi.vec(Xs))
            x_start.append((corner_start.X / scale[:, None]).ravel(order="F"))
            lbx.append(-np.inf * np.ones(n_x * samples))
            ubx.append(np.inf * np.ones(n_x * samples))
        evaluations_per_corner.append(ev)
        _add_limits(
            model, ev, start_ev, corner_start, formulation, add, decision, x_start, lbx, ubx
        )
    # the objective is taken at the nominal values
    ev = evaluations_per_corner[0]

    start_terms = [abs(float(v)) or 1.0 for _, v in objective_terms(model, start_ev)]
    f = 0
    for (weight, value), ref in zip(objective_terms(model, ev), start_terms, strict=True):
        f = f + weight * value / ref
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
        # approximate minimum degree ordering for MUMPS: on these KKT systems (a few dense
        # columns of design variables against thousands of path constraints) it factors
        # about four times faster than the automatic choice; pivoting is unchanged
        "ipopt.mumps_pivot_order": 0,
        "ipopt.hessian_approximation": "exact" if hessian == "exact" else "limited-memory",
    }
    if progress is not None:
        callback = _IterationReport({"x": xvec.numel(), "g": gvec.numel()}, progress)
        options["iteration_callback"] = callback
        where = f", limits at nominal and {len(corners) - 1} tolerance corners" if robust else ""
        progress(
            f"NLP ({formulation.replace('_', ' ')}): {len(names)} design variables, "
            f"{xvec.numel()} unknowns, {gvec.numel()} constraints, ZOH with {squarings} "
            f"squarings{where}"
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
    evaluations = sum(
        float(v) for k, v in stats.items() if k.startswith("t_wall_nlp_") and v is not None
    )
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
            "formulation": formulation,
            "hessian": hessian,
            "unknowns": int(xvec.numel()),
            "constraints": int(gvec.numel()),
            "seconds_building_expressions": t_built - t0,
            "seconds_generating_derivatives": t_constructed - t_built,
            "seconds_in_ipopt": t_solved - t_constructed,
            "seconds_in_ipopt_function_evaluations": evaluations,
            **({"tolerance_corners_in_optimiser": len(corners) - 1} if robust else {}),
        },
    )


def _add_limits(
    model: TuningModel,
    ev: Any,
    start_ev: Any,
    corner_start: Any,
    formulation: str,
    add: Callable[[Any, float, float], None],
    decision: list[Any],
    x_start: list[Any],
    lbx: list[Any],
    ubx: list[Any],
) -> None:
    """Impose every limit on one symbolic evaluation ``ev`` (nominal or a corner).

    ``start_ev`` (the nominal start) defines the limits, as in the numeric verification
    (step directions, scaling of the pole conditions); ``corner_start`` (the start at the
    same corner) gives initial guesses of the running-energy states.
    """
    import casadi

    samples = len(model.times)  # output samples (the energy state runs on them)
    for lim in model.spec.limits:
        if lim.kind in ("damping_ratio", "pole_real_part"):
            # Routh-Hurwitz entries of a normalised polynomial: order one, strictly negative
            add(limit_measures.excess(lim, model, ev, start_ev)[0], -casadi.inf, -1e-9)
            continue
        if lim.kind == "energy" and formulation == "multiple_shooting":
            # a running-energy state keeps every constraint row local in time (a dense row
            # summing over all samples would make the constraint Jacobian expensive to form)
            energy_scale = abs(float(lim.max)) or 1.0
            Es = casadi.MX.sym(f"E_{lim.part}", samples)
            E = Es * energy_scale
            i = ev.Y[model.outputs.index(CURRENT_PREFIX + lim.part), :].T
            R = ev.values[lim.part]
            increments = 0.5 * model.output_step * R * (i[:-1] ** 2 + i[1:] ** 2)
            add((E[1:] - E[:-1] - increments) / energy_scale, 0.0, 0.0)
            add(Es[0], 0.0, 0.0)
            add(Es[-1] - float(lim.max) / energy_scale, -casadi.inf, 0.0)
            i0 = corner_start.Y[model.outputs.index(CURRENT_PREFIX + lim.part), :]
            R0 = corner_start.values[lim.part]
            running = np.concatenate(
                [[0.0], np.cumsum(0.5 * model.output_step * R0 * (i0[:-1] ** 2 + i0[1:] ** 2))]
            )
            decision.append(Es)
            x_start.append(running / energy_scale)
            lbx.append(-np.inf * np.ones(samples))
            ubx.append(np.inf * np.ones(samples))
            continue
        bound = _bound_size(lim)
        # a two-sided band is one row with two bounds (IPOPT takes ranges directly), half
        # the rows of the two one-sided vectors the numeric verification uses
        for expr, lower, upper in limit_measures.ranges(lim, model, ev, start_ev):
            add(
                expr / bound,
                -casadi.inf if lower is None else lower / bound,
                casadi.inf if upper is None else upper / bound,
            )


def _bound_size(limit: Any) -> float:
    for value in (limit.max, limit.min, limit.band if not isinstance(limit.band, tuple) else None):
        if value is not None and value != 0:
            return abs(float(value))
    return 1.0
