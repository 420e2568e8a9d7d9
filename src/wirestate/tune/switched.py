"""Tuning over switching transients: the mode-sequence exchange (issue 12).

The chain of :mod:`wirestate.tune.solve`, for a switched circuit in closed loop:

1. :class:`~wirestate.tune.switched_problem.SwitchedProblem`: names checked, the loop found;
2. a numeric closed-loop run at the current design gives the mode sequence of one period
   (gate edges at the modulator's times, diode events where the engine located them);
3. :func:`~wirestate.tune.sequence.build_sequence_model` writes that sequence in CasADi -
   periodic steady state, located diode times as unknowns with their switching equations,
   the duty as the unknown the sampled PI settles - and IPOPT (L-BFGS Hessian, exact first
   derivatives) minimises the objective under every limit on it;
4. the closed loop is simulated again at the optimum, starting from the steady state the
   sequence model found; while the sequence it shows differs from the one imposed (other
   modes, or event times further apart than :data:`SETTLED_TIME` of a period), the new
   sequence is imposed and the problem solved again, warm (the same exchange idea as the
   tolerance corners of the linear tuning);
5. preferred values (IEC 60063), each candidate's sequence solved for its own steady state;
6. tolerance corners of the design variables and the most influential other toleranced
   parts, and the stress report (resistor power, capacitor and switch voltage).
"""

from __future__ import annotations

import functools
import itertools
import math
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from wirestate.errors import TuningError
from wirestate.spec.tuning import TuningSpec
from wirestate.tune import preferred
from wirestate.tune.expm import truncation_bound
from wirestate.tune.report import TuningResult, verdict
from wirestate.tune.sequence import (
    LOCATED_ROOM,
    PeriodSequence,
    SequenceModel,
    build_sequence_model,
)
from wirestate.tune.stress import _ratings
from wirestate.tune.switched_figure import figure_data
from wirestate.tune.switched_problem import (
    BOOTSTRAP_PERIODS,
    CHECK_PERIODS,
    SIZED_KINDS,
    SwitchedProblem,
)

__all__ = ["solve_switched", "SETTLED_TIME", "MAX_ROUNDS", "sequence_point"]

#: event times of two runs closer than this fraction of the period are the same sequence
SETTLED_TIME = 1e-6
#: re-simulate and re-solve at most this many times
MAX_ROUNDS = 6
#: tolerance corners: the design variables and up to this many parts in all
CORNER_PARTS = 4
#: margins within this fraction of the bound count as met (rounding)
FEASIBLE = 1e-6
#: a steady state is found when every equation of the sequence holds to this (relative):
#: the exponentials of stiff modes (a diode's 10 Mohm against nanohenries, rates near
#: -7e14 /s, 30 squarings and more) carry errors near 1e-10 (squaring E - I; 1e-8 when
#: E itself was squared), amplified by the fixed point
STEADY = 1e-5
#: Newton on the sequence's equations: residual tolerance (relative) and most steps
NEWTON_TOL = 1e-7
NEWTON_STEPS = 15
#: the duty may move by this factor within one exchange round
DUTY_ROOM = 1.25


@dataclass
class Point:
    """A design with its own steady state: part values, duty, located times (fractions),
    and the sequence model's outputs there."""

    values: dict[str, float]
    duty: float
    located: np.ndarray
    out: dict[str, np.ndarray]
    #: (duty, located) of tolerance corners imposed in the optimiser, by corner
    corner_guess: dict[tuple, tuple] = field(default_factory=dict)


def sequence_point(
    model: SequenceModel, values: dict[str, float], duty: float, located: np.ndarray
) -> Point:
    """Solve the sequence's equations (located times, duty) at fixed part values by
    Newton's method from the given guess, and evaluate the model there.

    The equations are scaled to ~1 and carry ~1e-10 of rounding (stiff exponentials; the
    voltage margins ~1e-8 V): Newton stops when every one holds to :data:`NEWTON_TOL`
    (2-4 steps from a nearby point), when its step is below 1e-13, or after
    :data:`NEWTON_STEPS` steps. One function gives the model's outputs and the equations'
    Jacobian together, so the last Newton evaluation is the point's evaluation.
    """
    import casadi as ca

    newton = getattr(model, "_newton", None)
    if newton is None:
        z = ca.MX.sym("z", 1 + len(model.located))
        p = ca.MX.sym("p", len(model.parts))
        out = model.function(p, z[0], z[1:])
        newton = ca.Function("newton", [p, z], [*out, ca.jacobian(out[0], z)])
        model._newton = newton  # type: ignore[attr-defined]
    p = np.array([values[n] for n in model.parts])
    z = np.concatenate([[duty], np.asarray(located, dtype=float).ravel()])
    last = False
    for step_count in range(NEWTON_STEPS + 1):
        *res, jacobian = newton(p, z)
        eq = np.array(res[0]).ravel()
        if last or step_count == NEWTON_STEPS or np.max(np.abs(eq)) <= NEWTON_TOL:
            break
        try:
            step = np.linalg.solve(np.array(jacobian), eq)
        except np.linalg.LinAlgError:
            break
        z = z - step
        last = bool(np.max(np.abs(step)) <= 1e-13)
    return _as_point(values, float(z[0]), z[1:], res)


def _point(model: SequenceModel, values, duty, located) -> Point:
    p = np.array([values[n] for n in model.parts])
    return _as_point(values, duty, located, model.function(p, duty, located))


def _as_point(values, duty, located, res) -> Point:
    names = ["equations", "rows", "quantities", "states", "times"]
    return Point(dict(values), float(duty), np.asarray(located, dtype=float).ravel(),
                 {k: np.array(v) for k, v in zip(names, res, strict=True)})  # fmt: skip


def _objective(problem: SwitchedProblem, model: SequenceModel, values, quantities, scale):
    spec = problem.spec.objective
    total = 0
    if spec.resistor_energy:
        energy = sum(quantities[model.quantity_names.index(f"energy_{p}")] for p in spec.parts)
        total = total + spec.resistor_energy * energy / scale[0]
    if spec.capacitance:
        cap = sum(values[p] for p in spec.parts if p in values)
        total = total + spec.capacitance * cap / scale[1]
    return total


def _build(problem: SwitchedProblem, sequence: PeriodSequence, values: dict[str, float]):
    spec = problem.spec
    energy_parts = list(dict.fromkeys(
        [lim.part for lim in spec.limits if lim.kind in ("energy_per_period", "average_power")]
        + [p for lim in spec.limits if lim.kind == "efficiency" for p in [lim.input, *lim.loads]]
        + (list(spec.objective.parts) if spec.objective.resistor_energy else [])
        + [p for p in problem.stress_parts if problem.circuit_spec.parts[p].kind == "resistor"]
    ))  # fmt: skip
    return build_sequence_model(
        problem.circuit,
        sequence,
        problem.parts,
        [values[p] for p in problem.parts],
        problem.inputs,
        list(spec.limits),
        measure=problem.measure,
        gain=problem.gain,
        reference=problem.reference,
        energy_parts=energy_parts,
        stress_parts=problem.stress_parts,
    )


@dataclass
class RoundResult:
    point: Point
    status: str
    iterations: int
    violation: float
    seconds: tuple[float, float] = (0.0, 0.0)  # building the NLP, solving it


def _solve_nlp(
    problem, model, point: Point, scale, max_iterations, tolerance, corners=()
) -> RoundResult:
    """IPOPT on one sequence: log design values, duty and located times as unknowns.

    ``corners`` (part-value multipliers, e.g. ``{"Lloop": 1.3}``) add the limits at those
    tolerance corners, each with its own duty and located times (its own steady state on
    the same sequence). The NLP is written in MX around calls of the sequence model's
    function, so its derivatives are generated once however many corners are imposed.
    """
    import casadi as ca

    nv, nl = len(problem.variables), len(model.located)
    cases = [{}, *corners]
    w = ca.MX.sym("w", nv + len(cases) * (1 + nl))
    fixed = ca.MX.sym("fixed", len(model.parts))
    g, lbg, ubg, f = [], [], [], 0
    for c, corner in enumerate(cases):
        values = ca.vertcat(*[
            (ca.exp(w[problem.variables.index(n)]) if n in problem.variables else fixed[i])
            * corner.get(n, 1.0)
            for i, n in enumerate(model.parts)
        ])  # fmt: skip
        at = nv + c * (1 + nl)
        eq, rows, quantities, _, times = model.function(values, w[at], w[at + 1 : at + 1 + nl])
        if c == 0:
            named = {n: values[i] for i, n in enumerate(model.parts)}
            f = _objective(problem, model, named, quantities, scale)
        durations = (times[1:] - times[:-1]) / model.sequence.period
        n_eq, n_mode = int(eq.shape[0]), int(durations.shape[0])
        g += [eq, durations]
        lbg += [np.zeros(n_eq), np.full(n_mode, 1e-9)]
        ubg += [np.zeros(n_eq), np.full(n_mode, np.inf)]
        for limit in problem.spec.limits:
            lo, hi = model.row_bounds[limit.label]
            size = max([abs(v) for v in (*lo, *hi) if math.isfinite(v)] or [1.0]) or 1.0
            g.append(rows[model.row_slices[limit.label]] / size)
            lbg.append(lo / size)
            ubg.append(hi / size)
    lbg, ubg = np.concatenate(lbg), np.concatenate(ubg)
    duty_low, duty_high = point.duty / DUTY_ROOM, min(0.999, point.duty * DUTY_ROOM)
    lbw = [math.log(problem.bounds[n][0]) for n in problem.variables]
    ubw = [math.log(problem.bounds[n][1]) for n in problem.variables]
    w0 = [math.log(point.values[n]) for n in problem.variables]
    for corner in cases:
        lbw += [duty_low] + [1.0 / LOCATED_ROOM] * nl
        ubw += [duty_high] + [LOCATED_ROOM] * nl
        guess = point.corner_guess.get(_corner_key(corner), (point.duty, point.located))
        w0 += [guess[0], *guess[1]]
    options = {
        "ipopt.print_level": 0, "print_time": False, "ipopt.sb": "yes",
        "ipopt.hessian_approximation": "limited-memory", "ipopt.max_iter": max_iterations,
        "ipopt.tol": max(tolerance, 1e-6), "ipopt.mu_strategy": "adaptive",
        "ipopt.acceptable_tol": 1e-5, "ipopt.acceptable_iter": 2,
        "ipopt.constr_viol_tol": STEADY, "ipopt.bound_push": 1e-6, "ipopt.bound_frac": 1e-6,
    }  # fmt: skip
    nlp = {"x": w, "p": fixed, "f": f, "g": ca.vertcat(*g)}
    t_build = time.perf_counter()
    solver = ca.nlpsol("switched", "ipopt", nlp, options)
    # CasADi caches derivative functions weakly: keeping this round's solver alive lets
    # the next round (more corners, same sequence) reuse the sequence function's derivatives
    model.__dict__.setdefault("solvers", []).append(solver)
    t_solve = time.perf_counter()
    p0 = [point.values[n] for n in model.parts]
    sol = solver(x0=w0, p=p0, lbx=lbw, ubx=ubw, lbg=lbg, ubg=ubg)
    stats = solver.stats()
    x = np.array(sol["x"]).ravel()
    design = dict(point.values)
    for i, n in enumerate(problem.variables):
        design[n] = float(math.exp(x[i]))
    gv = np.array(sol["g"]).ravel()
    violation = float(max(0.0, np.max(lbg - gv, initial=0.0), np.max(gv - ubg, initial=0.0)))
    result = _point(model, design, x[nv], x[nv + 1 : nv + 1 + nl])
    for c, corner in enumerate(cases[1:], start=1):
        at = nv + c * (1 + nl)
        result.corner_guess[_corner_key(corner)] = (float(x[at]), x[at + 1 : at + 1 + nl])
    seconds = (t_solve - t_build, time.perf_counter() - t_solve)
    return RoundResult(result, stats["return_status"], int(stats["iter_count"]), violation,
                       seconds)  # fmt: skip


def _corner_key(corner: dict[str, float]) -> tuple:
    return tuple(sorted(corner.items()))


def is_settled(imposed: PeriodSequence, point: Point, found: PeriodSequence) -> bool:
    """Same modes and boundaries, and every event within :data:`SETTLED_TIME` of a period
    of the time the sequence model gives."""
    if imposed.signature() != found.signature():
        return False
    times = point.out["times"].ravel()[1:-1]
    found_times = np.array([b.time for b in found.boundaries])
    return bool(np.all(np.abs(times - found_times) <= SETTLED_TIME * imposed.period))


def _located(model: SequenceModel, sequence: PeriodSequence) -> np.ndarray:
    """The located unknowns of ``model`` at the event times of ``sequence`` (the length of
    each mode a located event ends, relative to the model's own run)."""
    own = [0.0, *(b.time for b in model.sequence.boundaries)]
    new = [0.0, *(b.time for b in sequence.boundaries)]
    return np.array([(new[k + 1] - new[k]) / (own[k + 1] - own[k]) for k in model.located])


def margins(problem: SwitchedProblem, model: SequenceModel, point: Point) -> list[dict]:
    """Per limit: value, bound, margin (positive when met), relative margin."""
    rows = point.out["rows"].ravel()
    out = []
    for limit in problem.spec.limits:
        r = rows[model.row_slices[limit.label]]
        lo, hi = model.row_bounds[limit.label]
        if limit.kind == "efficiency":
            value, bound, margin = float(r[0]), float(lo[0]), float(r[0] - lo[0])
        elif limit.kind == "ring_settling":
            value, bound = float(np.max(np.abs(r))), float(hi[0])
            margin = bound - value
        else:
            value, bound = float(np.max(r)), float(hi[0])
            margin = bound - value
        unit = _limit_unit(problem, limit)
        out.append({"name": limit.label, "kind": limit.kind, "bound": bound, "value": value,
                    "margin": margin, "relative_margin": margin / (abs(bound) or 1.0),
                    "unit": unit})  # fmt: skip
    return out


def _limit_unit(problem: SwitchedProblem, limit) -> str:
    if limit.kind in ("peak_after_switching", "ring_settling"):
        out = problem.circuit_spec.outputs.get(limit.output)
        if out is None:
            return "V" if limit.output.startswith("v_") else "A"
        return "V" if getattr(out, "voltage", None) is not None else "A"
    return {"energy_per_period": "J", "average_power": "W", "efficiency": "1"}[limit.kind]


def _feasible(rows: list[dict]) -> bool:
    return all(r["relative_margin"] >= -FEASIBLE for r in rows)


class _Exchange:
    """Stage 2-4: numeric runs, sequence models and IPOPT, until the sequence settles."""

    def __init__(self, problem: SwitchedProblem, say: Callable[[str], None]) -> None:
        self.problem = problem
        self.say = say
        self.models: dict[tuple, SequenceModel] = {}
        self.build_seconds = 0.0
        self.simulate_seconds = 0.0

    def model(self, sequence: PeriodSequence, values: dict[str, float]) -> SequenceModel:
        key = sequence.signature()
        found = self.models.get(key)
        if found is None:
            t = time.perf_counter()
            found = self.models[key] = _build(self.problem, sequence, values)
            self.build_seconds += time.perf_counter() - t
        return found

    def simulate(self, values, x0, duty, periods) -> PeriodSequence:
        t = time.perf_counter()
        result = self.problem.closed_loop_run(values, x0, duty, periods)
        self.simulate_seconds += time.perf_counter() - t
        return self.problem.last_period(result, periods)

    def start(self) -> tuple[PeriodSequence, Point, SequenceModel]:
        problem = self.problem
        values = problem.nominal(problem.start_values())
        t = time.perf_counter()
        x_start, duty = problem.periodic_start(values)
        self.simulate_seconds += time.perf_counter() - t
        sequence = self.simulate(values, x_start, duty, BOOTSTRAP_PERIODS)
        model = self.model(sequence, values)
        point = sequence_point(model, values, sequence.duty, _located(model, sequence))
        return sequence, point, model

    def run(self, max_iterations: int, tolerance: float) -> dict[str, Any]:
        problem = self.problem
        sequence, start, model = self.start()
        if np.max(np.abs(start.out["equations"])) > STEADY:
            raise TuningError(
                "solver_failed",
                "no periodic steady state of the starting design's mode sequence was found",
                location=("scenario",),
            )
        q0 = start.out["quantities"].ravel()
        scale = (self._energy_scale(model, q0), self._capacitance_scale(start.values))
        point, rounds, iterations = start, 0, 0
        settled, status, violation = False, "", 0.0
        corners: list[dict[str, float]] = []
        corner_parts: list[str] | None = None
        while rounds < MAX_ROUNDS:
            rounds += 1
            result = _solve_nlp(problem, model, point, scale, max_iterations, tolerance, corners)
            point, status = result.point, result.status
            iterations += result.iterations
            violation = result.violation
            x0 = point.out["states"][: model.n_states, 0]
            found = self.simulate(point.values, x0, point.duty, CHECK_PERIODS)
            self.say(f"round {rounds}: {status} after {result.iterations} iterations "
                     f"({result.seconds[0]:.1f} s to build, {result.seconds[1]:.1f} s to solve); "
                     f"sequence {found.describe()}"
                     + (f"; {len(corners)} corner(s) imposed" if corners else ""))  # fmt: skip
            settled = is_settled(model.sequence, point, found)
            if not settled:
                guesses = point.corner_guess
                model = self.model(found, point.values)
                point = sequence_point(model, point.values, found.duty, _located(model, found))
                point.corner_guess = guesses
                continue
            if not problem.spec.solver.robust:
                break
            if corner_parts is None:
                corner_parts = _corner_parts(problem, model, point)
            fresh = [c for c in _worst_corners(problem, model, point, corner_parts)
                     if c not in corners]  # fmt: skip
            if not fresh:
                break
            corners.extend(fresh)
        return {"start": start, "start_model": self.models[sequence.signature()],
                "point": point, "model": model, "rounds": rounds, "settled": settled,
                "status": status, "iterations": iterations, "violation": violation,
                "scale": scale, "corners": corners, "corner_parts": corner_parts}  # fmt: skip

    def _energy_scale(self, model: SequenceModel, q0: np.ndarray) -> float:
        spec = self.problem.spec.objective
        if not spec.resistor_energy:
            return 1.0
        energy = sum(q0[model.quantity_names.index(f"energy_{p}")] for p in spec.parts)
        return float(abs(energy)) or 1.0

    def _capacitance_scale(self, values: dict[str, float]) -> float:
        spec = self.problem.spec.objective
        return float(sum(values[p] for p in spec.parts if p in values)) or 1.0


def solve_switched(
    spec: TuningSpec,
    series: str = "E24",
    progress: Callable[[str], None] | None = None,
    *,
    file: str | None = None,
) -> TuningResult:
    """Size the design variables of a switched tuning; see the module docstring.

    Returns the same :class:`~wirestate.tune.report.TuningResult` as the linear tuning:
    variables, limit margins at the preferred values and their worst tolerance corner,
    stress with the ratings, notes (whether the mode sequence settled, in how many
    rounds) and the verdict.
    """
    say = progress or (lambda _message: None)
    t_start = time.perf_counter()
    problem = SwitchedProblem(spec, file=file)
    say(f"{spec.name}: {len(problem.variables)} design variables, {len(spec.limits)} "
        f"limits on one switching period of {problem.period:g} s (closed loop)")  # fmt: skip
    exchange = _Exchange(problem, say)
    found = exchange.run(spec.solver.max_iterations, spec.solver.tolerance)
    model, point = found["model"], found["point"]
    solve_seconds = time.perf_counter() - t_start
    if found["status"] not in ("Solve_Succeeded", "Solved_To_Acceptable_Level"):
        rows = margins(problem, model, point)
        if not _feasible(rows):
            code = "infeasible_limits" if "Infeasible" in found["status"] else "solver_failed"
            failing = [f"{r['name']} misses by {-r['margin']:.4g}" for r in rows
                       if r["relative_margin"] < -FEASIBLE]  # fmt: skip
            raise TuningError(
                code,
                f"the optimiser stopped ({found['status']}); " + "; ".join(failing),
                file=file,
                location=("limits",),
            )
    chosen, candidates_checked, corner_parts = _snap(
        problem, model, point, series, found["scale"], found["corner_parts"]
    )
    verification = _verify(problem, exchange, model, chosen, say, corner_parts)
    return _result(problem, found, chosen, verification, series, candidates_checked,
                   solve_seconds, exchange)  # fmt: skip


def _snap(problem, model, point: Point, series: str, scale, corner_parts=None):
    """The least-objective combination of neighbouring preferred values that meets every
    limit (each with its own steady state on the same sequence). With
    ``stress.corners_must_pass`` or ``robust``, every tolerance corner too: one neighbour
    each side, then two, then four while none of those passes. Returns the chosen point,
    the number of candidates evaluated and the corner parts (``None`` when corners are not
    required)."""
    strict = (problem.spec.stress.corners_must_pass or problem.spec.solver.robust) and (
        problem.spec.stress.tolerance_corners
    )
    seen: dict[tuple, tuple] = {}
    for count in (2, 4) if strict else (1,):
        options = [preferred.candidates(point.values[n], series, count)
                   for n in problem.variables]  # fmt: skip
        for combo in itertools.product(*options):
            if combo not in seen:
                seen[combo] = _candidate(problem, model, point, combo, scale)
        ranked = sorted((v for v in seen.values() if v is not None), key=lambda r: r[0])
        if not ranked:
            raise TuningError(
                "solver_failed",
                "no preferred-value combination has a steady state on the optimum's mode sequence",
                location=("variables",),
            )
        if not strict:
            return ranked[0][1], len(seen), None
        if corner_parts is None:
            corner_parts = _corner_parts(problem, model, ranked[0][1])
        for key, candidate in ranked:
            if key[0] == 0 and _passes_corners(problem, model, candidate, corner_parts):
                return candidate, len(seen), corner_parts
    return ranked[0][1], len(seen), corner_parts


def _candidate(problem, model, point: Point, combo: tuple, scale):
    """``((failing, objective or worst violation), point)`` of one combination, or
    ``None`` when its steady state on the sequence is not found."""
    values = dict(point.values)
    values.update(zip(problem.variables, combo, strict=True))
    candidate = sequence_point(model, values, point.duty, point.located)
    if np.max(np.abs(candidate.out["equations"])) > STEADY:
        return None
    rows = margins(problem, model, candidate)
    q = candidate.out["quantities"].ravel()
    objective = float(_objective(problem, model, values, q, scale))
    worst = min(r["relative_margin"] for r in rows)
    return ((0, objective) if worst >= -FEASIBLE else (1, -worst)), candidate


def _worst_corners(problem, model, point: Point, parts: list[str]) -> list[dict[str, float]]:
    """Per limit that some tolerance corner breaks, the corner (part-value multipliers)
    where it has the least relative margin; each corner once. Each corner's steady state
    (duty, located times) goes into ``point.corner_guess``, the optimiser's start for it."""
    worst: dict[str, tuple[float, dict[str, float], Point]] = {}
    for corner in _corners(problem, point.values, parts):
        p = sequence_point(model, corner, point.duty, point.located)
        if np.max(np.abs(p.out["equations"])) > STEADY:
            continue
        for row in margins(problem, model, p):
            if row["relative_margin"] < min(-FEASIBLE, worst.get(row["name"], (0.0,))[0]):
                multipliers = {n: corner[n] / point.values[n] for n in parts}
                worst[row["name"]] = (row["relative_margin"], multipliers, p)
    out: list[dict[str, float]] = []
    for _, corner, p in worst.values():
        if corner not in out:
            out.append(corner)
            point.corner_guess.setdefault(_corner_key(corner), (p.duty, p.located))
    return out


def _corners(problem, values: dict[str, float], parts: list[str]):
    for signs in itertools.product((-1, 1), repeat=len(parts)):
        corner = dict(values)
        for name, sign in zip(parts, signs, strict=True):
            corner[name] *= 1 + sign * problem.tolerances[name]
        yield corner


def _corner_point(model: SequenceModel, values: dict[str, float], start: Point) -> Point:
    """:func:`sequence_point` at a tolerance corner of ``start``, remembered: the verification
    revisits the corners the snapping already solved for the chosen values."""
    memo = model.__dict__.setdefault("_corner_points", {})
    key = (tuple(values[n] for n in model.parts), start.duty, start.located.tobytes())
    if key not in memo:
        memo[key] = sequence_point(model, values, start.duty, start.located)
    return memo[key]


def _passes_corners(problem, model, candidate: Point, parts: list[str]) -> bool:
    for corner in _corners(problem, candidate.values, parts):
        p = _corner_point(model, corner, candidate)
        if not _feasible(margins(problem, model, p)):
            return False
    return True


def _corner_parts(problem, model, point: Point) -> list[str]:
    """Design variables with a tolerance, then the other toleranced parts whose tolerance
    moves the limits most (relative margins at the two ends of each tolerance)."""
    base = margins(problem, model, point)
    design = [n for n in problem.variables if n in problem.tolerances]
    effect = []
    for name in [n for n in problem.parts if n not in problem.variables]:
        moves = 0.0
        for sign in (-1, 1):
            values = dict(point.values)
            values[name] *= 1 + sign * problem.tolerances[name]
            p = sequence_point(model, values, point.duty, point.located)
            rows = margins(problem, model, p)
            moves = max(moves, max(abs(a["relative_margin"] - b["relative_margin"])
                                   for a, b in zip(rows, base, strict=True)))  # fmt: skip
        effect.append((moves, name))
    others = [n for _, n in sorted(effect, reverse=True)]
    return (design + others)[: max(CORNER_PARTS, len(design))]


@dataclass
class _Verified:
    rows: list[dict]
    stress: list[dict]
    corners: int
    toleranced: list[str]
    settled: bool
    notes: list[str]
    #: the tolerance corners' steady states (for the figure)
    corner_points: list[Point] = field(default_factory=list)


def _verify(problem, exchange: _Exchange, model, chosen: Point, say, parts=None) -> _Verified:
    """Margins at the preferred values, their sequence re-simulated, the tolerance corners
    (each with its own steady state) and the stress report."""
    rows = [dict(r, margin_worst_corner=r["margin"],
                 relative_margin_worst_corner=r["relative_margin"], worst_corner={})
            for r in margins(problem, model, chosen)]  # fmt: skip
    x0 = chosen.out["states"][: model.n_states, 0]
    found = exchange.simulate(chosen.values, x0, chosen.duty, CHECK_PERIODS)
    settled = is_settled(model.sequence, chosen, found)
    notes = []
    if not settled:
        notes.append(
            "at the preferred values the closed-loop run shows another mode sequence "
            f"({found.describe()}); the margins are those of the optimum's sequence"
        )
    toleranced = []
    if problem.spec.stress.tolerance_corners:
        toleranced = parts if parts is not None else _corner_parts(problem, model, chosen)
    corner_points = []
    for values in _corners(problem, chosen.values, toleranced):
        point = _corner_point(model, values, chosen)
        if np.max(np.abs(point.out["equations"])) > STEADY:
            notes.append(f"no steady state on the sequence at corner {values}")
            continue
        corner_points.append(point)
        for row, corner_row in zip(rows, margins(problem, model, point), strict=True):
            if corner_row["relative_margin"] < row["relative_margin_worst_corner"]:
                row["margin_worst_corner"] = corner_row["margin"]
                row["relative_margin_worst_corner"] = corner_row["relative_margin"]
                row["worst_corner"] = {n: values[n] for n in toleranced}
    corners = len(corner_points)
    say(f"verified: {corners} tolerance corners of {', '.join(toleranced) or 'no parts'}")
    return _Verified(rows, _stress(problem, model, chosen), corners, toleranced, settled, notes,
                     corner_points)  # fmt: skip


def _stress(problem, model: SequenceModel, point: Point) -> list[dict]:
    """Peak current and voltage over the period's samples, the resistors' average power,
    against each part's ratings."""
    p = np.array([point.values[n] for n in model.parts])
    stress = np.array(model.stress_function(p, point.duty, point.located)[0])
    if stress.ndim == 1:
        stress = stress[:, None]
    q = point.out["quantities"].ravel()
    rows = []
    for part in problem.stress_parts:
        spec_part = problem.circuit_spec.parts[part]
        i = stress[:, model.stress_names.index(f"i_{part}")]
        v = stress[:, model.stress_names.index(f"v_{part}")]
        row: dict[str, Any] = {"part": part, "kind": spec_part.kind,
                               "peak_current": float(np.max(np.abs(i))),
                               "peak_voltage": float(np.max(np.abs(v)))}  # fmt: skip
        if spec_part.kind == "resistor":
            energy = float(q[model.quantity_names.index(f"energy_{part}")])
            power = energy / problem.period
            row.update(energy=energy, average_power_scenario=power, steady_power=power,
                       ripple_power=0.0, continuous_power=power)  # fmt: skip
        row["ratings"] = _ratings(spec_part, row, 0.0, 0.0)
        rows.append(row)
    return rows


def _tightest(problem, row: dict, keys: tuple[str, ...]) -> dict:
    parts = problem.circuit_spec.parts
    units = {n: SIZED_KINDS.get(parts[n].kind, "") for n in row["worst_corner"] if n in parts}
    return {**{k: row[k] for k in keys}, "worst_corner_units": units}


def _across_notes(problem, stress: list[dict]) -> list[str]:
    """Say where a switch's or diode's peak current is the discharge of a capacitor placed
    directly across it (a device's own output capacitance discharges inside the die)."""
    parts = problem.circuit_spec.parts
    notes = []
    for row in stress:
        if row["kind"] not in ("switch", "diode"):
            continue
        pair = set(parts[row["part"]].nodes)
        across = [n for n, p in parts.items()
                  if p.kind == "capacitor" and set(getattr(p, "nodes", ())) == pair]  # fmt: skip
        if across:
            notes.append(
                f"{row['part']}'s peak current includes the discharge of {', '.join(across)} "
                "directly across it through its on-resistance; in a real device an output "
                "capacitance discharges inside the die, so compare that peak with the device's "
                "pulse ratings with care"
            )
    return notes


def _result(problem, found, chosen: Point, verified: _Verified, series, candidates,
            solve_seconds, exchange) -> TuningResult:  # fmt: skip
    spec = problem.spec
    point, model = found["point"], found["model"]
    cases = 1 + len(found["corners"])
    start = problem.start_values()
    variables = {}
    for name in problem.variables:
        part = problem.circuit_spec.parts[name]
        var = spec.variables[name]
        variables[name] = {"optimum": point.values[name], "preferred": chosen.values[name],
                           "snapped": True, "start": start[name], "min": float(var.min),
                           "max": float(var.max), "unit": SIZED_KINDS[part.kind],
                           "tolerance": getattr(part, "tolerance", None)}  # fmt: skip
    at_optimum = margins(problem, model, point)
    limits = [dict(row, margin_at_optimum=o["margin"])
              for row, o in zip(verified.rows, at_optimum, strict=True)]  # fmt: skip
    tight = min(limits, key=lambda r: r["relative_margin_worst_corner"]) if limits else None
    keys = ("name", "margin", "margin_worst_corner", "relative_margin_worst_corner",
            "worst_corner", "unit")  # fmt: skip
    scale = found["scale"]
    q = lambda p: p.out["quantities"].ravel()  # noqa: E731
    objective = {
        "start": float(_objective(problem, found["start_model"], found["start"].values,
                                  q(found["start"]), scale)),
        "optimum": float(_objective(problem, model, point.values, q(point), scale)),
        "preferred": float(_objective(problem, model, chosen.values, q(chosen), scale)),
    }  # fmt: skip
    notes = sequence_notes(problem, found, chosen, verified, exchange) + verified.notes
    notes += _across_notes(problem, verified.stress)
    return TuningResult(
        name=spec.name,
        series=series,
        feasible=_feasible(verified.rows),
        variables=variables,
        limits=limits,
        tightest=None if tight is None else _tightest(problem, tight, keys),
        stress=verified.stress,
        solver={
            "status": found["status"],
            "iterations": found["iterations"],
            "seconds": solve_seconds,
            "squarings": model.squarings,
            "truncation_bound": truncation_bound(model.squarings),
            "constraint_violation": found["violation"],
            "exchange_rounds": found["rounds"],
            "sequence_settled": found["settled"],
            "unknowns": len(problem.variables) + cases * (1 + len(model.located)),
            "constraints": cases * int(point.out["rows"].size + point.out["equations"].size),
            "tolerance_corners_in_optimiser": len(found["corners"]),
            "candidates_checked": candidates,
        },  # fmt: skip
        objective=objective,
        corners_checked=verified.corners,
        toleranced_parts=verified.toleranced,
        notes=notes,
        # the figure's arrays are computed only when a figure is drawn (``--plot``)
        responses={
            "switched": functools.partial(
                figure_data, problem, model, chosen, verified.corner_points
            )
        },
        verdict=verdict(limits, verified.stress, verified.corners, series),
    )


def sequence_notes(problem, found, chosen: Point, verified: _Verified, exchange) -> list[str]:
    """How the switched numbers were made: the sequence, the exchange, the loop."""
    model = found["model"]
    seq = model.sequence
    settled = (
        f"the sequence settled: the closed-loop re-simulation at the optimum of round "
        f"{found['rounds']} showed the sequence imposed"
        if found["settled"]
        else f"the mode sequence did NOT settle within {found['rounds']} rounds"
    )
    if found["corners"]:
        shown = "; ".join(
            ", ".join(f"{n} x {m:g}" for n, m in corner.items()) for corner in found["corners"]
        )
        settled += (
            f"; {len(found['corners'])} tolerance corner(s) imposed in the optimiser by "
            f"exchange ({shown}), each with its own steady state"
        )
    return [
        f"limits imposed on one switching period in periodic steady state, mode sequence "
        f"{seq.describe(chosen.out['times'].ravel()[1:-1])} at the preferred values (from the "
        f"closed-loop run; {len(model.located)} located diode "
        "event(s) solved with the design); " + settled,
        f"the sampled PI holds {problem.measure} x {problem.gain:.6g} on the reference "
        f"{problem.reference:g} at every carrier start; duty {chosen.duty:.6f} at the "
        "preferred values",
        "peaks and ringing are judged at evenly spaced samples of the exact in-mode solution "
        "(the window's 'points'); energies are exact integrals (Van Loan's block exponential)",
        f"the preferred values' sequence {'was confirmed' if verified.settled else 'differs'} "
        "in a closed-loop re-simulation; tolerance corners each have their own steady state "
        "on that sequence",
        f"matrix exponentials by Taylor scaling and squaring ({model.squarings} squarings at "
        f"most; first-order truncation bound {truncation_bound(model.squarings):.1e} "
        "relative; the squarings run on exp(X) - I, whose rounding measured 7e-11 on the "
        "bundled buck's stiffest mode against 50-digit arithmetic)",
        f"time: building the sequence models {exchange.build_seconds:.2f} s, closed-loop "
        f"runs {exchange.simulate_seconds:.2f} s",
    ]
