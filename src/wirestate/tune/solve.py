"""Tune, snap to preferred values, re-verify, check tolerance corners, report stresses.

:func:`solve` is the whole job behind ``wirestate tune``:

1. the NLP of :mod:`wirestate.tune.nlp` finds the continuous optimum (IPOPT, exact
   derivatives);
2. each design variable is snapped to its two neighbouring values of an IEC 60063 series,
   and every combination (at most 2**8) is simulated by the numeric engine
   (:func:`wirestate.reduce.compile_circuit` and :func:`wirestate.simulate.discretize.zoh`);
   the feasible one with the lowest objective is kept;
3. at the chosen values every limit is re-verified numerically, then again at every corner
   of the parts' tolerances (each toleranced part at ``value * (1 +- tolerance)``);
   with ``[solver] robust = true`` the NLP of step 1 already imposes every limit at every
   corner (by a corner exchange, :func:`_solve_robust`), and step 2 keeps, like
   ``[stress] corners_must_pass``, the cheapest of the combinations (three preferred
   values either side) that pass every corner;
4. stresses: resistor energy and power (scenario, steady state and a stated sinusoidal
   ripple), capacitor voltage and part currents against their ratings.
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from wirestate.errors import TuningError, WirestateError
from wirestate.spec.tuning import Limit, TuningSpec
from wirestate.tune import limits as limit_measures
from wirestate.tune import preferred
from wirestate.tune.model import CURRENT_PREFIX, VOLTAGE_PREFIX, Evaluation, TuningModel
from wirestate.tune.nlp import (
    NlpSolution,
    objective_terms,
    objective_value,
    peak_impedance,
    solve_nlp,
    start_values,
)

CAUTIONS = (
    "Models are idealised (lumped, linear, no parasitics beyond those modelled, no "
    "temperature or ageing effects).",
    "Verify part ratings, pulse-energy capability and thermal design on the real hardware.",
    "Defer to local electrical codes and licensed professional practice.",
)

#: IPOPT statuses taken as converged
_CONVERGED = ("Solve_Succeeded", "Solved_To_Acceptable_Level")
_INFEASIBLE = ("Infeasible_Problem_Detected", "Restoration_Failed")

_UNITS = {"resistor": "ohm", "capacitor": "F", "inductor": "H"}
_LIMIT_UNITS = {
    "overshoot": "1",
    "settling": "1",
    "damping_ratio": "1",
    "pole_real_part": "1/s",
    "output_impedance": "ohm",
    "peak_current": "A",
    "energy": "J",
}
_MAX_SNAP_VARIABLES = 8


@dataclass
class TuningResult:
    """Outcome of :func:`solve`; :meth:`to_dict` gives the JSON report (SI base units)."""

    name: str
    series: str
    feasible: bool
    variables: dict[str, dict[str, Any]]
    limits: list[dict[str, Any]]
    tightest: dict[str, Any] | None
    stress: list[dict[str, Any]]
    solver: dict[str, Any]
    objective: dict[str, float]
    corners_checked: int
    toleranced_parts: list[str]
    notes: list[str] = field(default_factory=list)
    cautions: tuple[str, ...] = CAUTIONS
    responses: dict[str, Any] = field(default_factory=dict, repr=False)

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready report; every number in SI base units."""
        return {
            "name": self.name,
            "series": self.series,
            "feasible": bool(self.feasible),
            "variables": {k: dict(v) for k, v in self.variables.items()},
            "limits": [dict(x) for x in self.limits],
            "tightest": None if self.tightest is None else dict(self.tightest),
            "stress": [dict(x) for x in self.stress],
            "solver": dict(self.solver),
            "objective": dict(self.objective),
            "corners_checked": self.corners_checked,
            "toleranced_parts": list(self.toleranced_parts),
            "notes": list(self.notes),
            "cautions": list(self.cautions),
        }


def _limit_unit(model: TuningModel, limit: Limit) -> str:
    if limit.kind in _LIMIT_UNITS:
        return _LIMIT_UNITS[limit.kind]
    return model.units.get(limit.output, "") if limit.output else ""


def limit_margins(
    model: TuningModel, ev: Evaluation, start: Evaluation, *, fine: bool = True
) -> list[dict[str, Any]]:
    """Margin of every limit at a numeric evaluation (positive = met), in the limit's unit.

    ``fine`` evaluates impedance limits on a grid four times denser than the optimiser's,
    so a peak between the optimiser's frequencies is not missed.
    """
    rows = []
    for lim in model.spec.limits:
        if lim.kind in ("damping_ratio", "pole_real_part"):
            value, margin = limit_measures.pole_margin(lim, ev, model)
            bound = lim.min if lim.kind == "damping_ratio" else lim.max
        elif lim.kind == "output_impedance" and fine:
            z = limit_measures.impedance_magnitude(
                ev, model, lim, limit_measures.frequency_grid(lim, 4)
            )
            value = float(np.max(z))
            bound = lim.max
            margin = float(lim.max - value)
        else:
            vectors = limit_measures.excess(lim, model, ev, start)
            worst = max(float(np.max(np.atleast_1d(v))) for v in vectors)
            margin = -worst
            if lim.kind == "minimum":
                bound = lim.min
                value = bound - worst
            elif lim.kind == "settling":
                bound = lim.band
                value = bound + worst
            else:
                bound = lim.max
                value = bound + worst
        rows.append(
            {
                "name": lim.label,
                "kind": lim.kind,
                "bound": float(bound),
                "value": float(value),
                "margin": float(margin),
                "relative_margin": float(margin / abs(bound)) if bound else float(margin),
                "unit": _limit_unit(model, lim),
            }
        )
    return rows


def _is_feasible(rows: list[dict[str, Any]]) -> bool:
    # a margin of -1e-9 of the bound is rounding, not a violation
    return all(r["relative_margin"] >= -1e-7 for r in rows)


def _combinations(
    model: TuningModel, optimum: dict[str, float], series: str, count: int = 1
) -> list[dict[str, float]]:
    names = list(optimum)
    options = []
    for name in names:
        if count == 1:
            choices = sorted(set(preferred.neighbours(optimum[name], series)))
        else:
            choices = preferred.candidates(optimum[name], series, count=count)
        var = model.spec.variables[name]
        inside = [c for c in choices if var.min * (1 - 1e-12) <= c <= var.max * (1 + 1e-12)]
        options.append(inside or [preferred.snap(optimum[name], series)])
    if len(names) <= _MAX_SNAP_VARIABLES:
        return [dict(zip(names, combo, strict=True)) for combo in itertools.product(*options)]
    nearest = {n: preferred.snap(optimum[n], series) for n in names}
    combos = [nearest]
    for i, name in enumerate(names):
        for c in options[i]:
            if c != nearest[name]:
                combos.append({**nearest, name: c})
    return combos


def _corners(model: TuningModel, values: dict[str, float]) -> tuple[list[str], list[dict]]:
    # the part values at each tolerance corner around ``values`` (the design variables)
    toleranced, factors = model.tolerance_corners()
    corners = [
        {name: values.get(name, model.nominal[name]) * f for name, f in factor.items()}
        for factor in factors
    ]
    return toleranced, corners


def _log_distance(values: dict[str, float], optimum: dict[str, float]) -> float:
    return sum(math.log(values[n] / optimum[n]) ** 2 for n in optimum)


def _worst_over_corners(
    model: TuningModel,
    values: dict[str, float],
    nominal_rows: list[dict[str, Any]],
    start: Evaluation,
) -> list[dict[str, Any]]:
    # per limit, the row of least relative margin over the nominal values and every
    # tolerance corner, with that corner (a corner that cannot be compiled is skipped)
    worst = [dict(r, worst_corner={}) for r in nominal_rows]
    toleranced, corners = _corners(model, values)
    if not toleranced:
        return worst
    factors = model.tolerance_corners()[1]
    for corner, rows in zip(corners, _corner_rows(model, values, factors, start), strict=True):
        for index, row in enumerate(rows or []):
            if row["relative_margin"] < worst[index]["relative_margin"]:
                worst[index] = dict(row, worst_corner=dict(corner))
    return worst


#: a corner counts as violated when a limit's relative margin there is below this (the
#: optimiser meets its constraints to about 1e-6 of each bound)
_EXCHANGE_TOLERANCE = 1e-5
#: at most this many rounds of the corner exchange
_EXCHANGE_ROUNDS = 8


def _corner_rows(
    model: TuningModel, values: dict[str, float], factors: list[dict], start: Evaluation
) -> list[list[dict[str, Any]] | None]:
    # per corner (factor mapping), the margin rows of every limit; None where the
    # circuit cannot be compiled at that corner
    out: list[list[dict[str, Any]] | None] = []
    for factor in factors:
        try:
            ev = model.numeric(model.corner_values(values, factor))
            out.append(limit_margins(model, ev, start))
        except WirestateError:
            out.append(None)
    return out


def _solve_robust(
    model: TuningModel, start_ev: Evaluation, say: Callable[[str], None], options: dict
) -> NlpSolution:
    """The corner-robust NLP by an exchange over the tolerance corners.

    Every limit must hold at the nominal values and at every corner. Most corners never
    bind, so the NLP starts with, per limit, the corner that is worst at the starting
    point. After each solve every corner is checked numerically at the optimum; per
    violated limit the worst corner joins the NLP, which is solved again from the last
    optimum. When no corner is violated the point is feasible for the full problem and
    optimal for a relaxation of it, hence optimal for the full problem (the exchange
    method of semi-infinite programming: Hettich and Kortanek, SIAM Review 35(3), 1993).
    """
    toleranced, factors = model.tolerance_corners()
    if not toleranced:
        return solve_nlp(model, robust=True, **options)
    start = start_values(model)

    def worst_per_limit(values: dict[str, float], every: bool) -> tuple[list[int], int]:
        # indices of the worst corner of each violated limit (of every limit when
        # ``every``), and the count of corners that break some limit
        per_corner = _corner_rows(model, values, factors, start_ev)
        picked: list[int] = []
        violated = set()
        for lim in range(len(model.spec.limits)):
            margins = [(r[lim]["relative_margin"], k) for k, r in enumerate(per_corner) if r]
            if not margins:
                continue
            margin, k = min(margins)
            violated |= {j for m_j, j in margins if m_j < -_EXCHANGE_TOLERANCE}
            if every or margin < -_EXCHANGE_TOLERANCE:
                picked.append(k)
        return picked, len(violated)

    initial, _ = worst_per_limit(start, every=True)
    active = sorted(set(initial))
    point: dict[str, float] | None = None
    seconds, iterations = 0.0, 0
    settled = False
    for round_index in range(1, _EXCHANGE_ROUNDS + 1):
        say(
            f"robust: round {round_index}, limits imposed at {len(active)} of "
            f"{len(factors)} tolerance corners"
        )
        nlp = solve_nlp(
            model, robust=True, corner_factors=[factors[k] for k in active], start=point,
            **options,
        )  # fmt: skip
        seconds += nlp.seconds
        iterations += nlp.iterations
        if nlp.status not in _CONVERGED:
            break
        picked, count = worst_per_limit(nlp.values, every=False)
        new = sorted(set(picked) - set(active))
        if count == 0:
            settled = True
            say(f"robust: every one of the {len(factors)} corners meets every limit")
            break
        if not new:  # the violated corners are imposed already: IPOPT's tolerance
            break
        say(f"robust: {count} corner(s) break a limit at this optimum; adding {len(new)}")
        active = sorted(set(active) | set(new))
        point = nlp.values
    # the solver figures cover every round
    nlp.seconds, nlp.iterations = seconds, iterations
    nlp.stats["tolerance_corners_in_optimiser"] = len(active)
    nlp.stats["tolerance_corners"] = len(factors)
    nlp.stats["exchange_rounds"] = round_index
    nlp.stats["exchange_settled"] = settled
    return nlp


def _frequency_response(ev: Evaluation, model: TuningModel, input_name: str, freq: float):
    j = model.inputs.index(input_name)
    n = ev.A.shape[0]
    x = np.linalg.solve(2j * math.pi * freq * np.eye(n) - ev.A, ev.B[:, j])
    return ev.extra["Cc"] @ x + ev.extra["Dc"][:, j]


def stress_report(model: TuningModel, ev: Evaluation) -> list[dict[str, Any]]:
    """Energy, power, peak voltage and current of each watched part against its ratings."""
    spec = model.spec
    ripple = spec.stress.ripple
    response = None
    if ripple is not None:
        response = _frequency_response(ev, model, ripple.input, ripple.frequency)
    horizon = model.times[-1]
    rows = []
    final = ev.Y[:, -1]
    for name in model.watched:
        part = model.base_circuit.parts[name]
        i = ev.Y[model.outputs.index(CURRENT_PREFIX + name)]
        v = ev.Y[model.outputs.index(VOLTAGE_PREFIX + name)]
        row: dict[str, Any] = {"part": name, "kind": part.kind}
        row["peak_current"] = float(np.max(np.abs(i)))
        row["peak_voltage"] = float(np.max(np.abs(v)))
        ripple_i = ripple_v = 0.0
        if response is not None:
            ripple_i = float(
                abs(response[model.outputs.index(CURRENT_PREFIX + name)]) * ripple.amplitude
            )
            ripple_v = float(
                abs(response[model.outputs.index(VOLTAGE_PREFIX + name)]) * ripple.amplitude
            )
            row["ripple_current_amplitude"] = ripple_i
            row["ripple_voltage_amplitude"] = ripple_v
        if part.kind == "resistor":
            R = float(ev.values[name])
            energy = float(limit_measures.resistor_energy(model, ev, name))
            steady = R * float(final[model.outputs.index(CURRENT_PREFIX + name)]) ** 2
            ripple_power = R * ripple_i**2 / 2.0
            row.update(
                energy=energy,
                average_power_scenario=energy / horizon,
                steady_power=steady,
                ripple_power=ripple_power,
                continuous_power=steady + ripple_power,
            )
        checks = []
        if part.rated_voltage is not None:
            used = row["peak_voltage"] + ripple_v
            checks.append(("voltage", used, float(part.rated_voltage)))
        if part.rated_current is not None:
            used = row["peak_current"] + ripple_i
            checks.append(("current", used, float(part.rated_current)))
        if part.rated_power is not None and part.kind == "resistor":
            used = max(row["continuous_power"], row["average_power_scenario"])
            checks.append(("power", used, float(part.rated_power)))
        row["ratings"] = [
            {"quantity": q, "used": u, "rated": r, "fraction_of_rating": u / r}
            for q, u, r in checks
        ]
        rows.append(row)
    return rows


def _check_series(series: str) -> str:
    preferred.series_mantissas(series)
    return series.upper()


def solve(
    spec: TuningSpec,
    series: str = "E24",
    progress: Callable[[str], None] | None = None,
    *,
    file: str | None = None,
    system: Any = None,
) -> TuningResult:
    """Size the design variables of ``spec``; see the module docstring.

    Parameters
    ----------
    spec
        A tuning specification (:func:`wirestate.tune.load_tuning`).
    series
        IEC 60063 series for the preferred values: E6, E12, E24, E48 or E96.
    progress
        Called with one line of text per step (solver iterations, corners checked).
    system
        A composed system built in Python (:func:`wirestate.compose.compose`) to tune
        instead of a file; ``spec.tuning.block`` names its circuit block.

    Returns
    -------
    TuningResult
        ``feasible`` is False when no combination of neighbouring preferred values meets
        every limit (the least-violating combination is reported).

    Raises
    ------
    TuningError
        ``infeasible_limits`` when the optimiser finds no point inside every limit (the
        message lists the limits that fail at the least-violation point, which is attached
        as ``error.result``); ``solver_failed`` when it stops without converging.
    """
    series = _check_series(series)
    say = progress or (lambda _message: None)
    model = TuningModel(spec, file=file, system=system)
    # the model's spec: a system's limited controllers add their output ranges as limits
    spec = model.spec
    start = start_values(model)
    start_ev = model.numeric(start)
    say(
        f"{spec.name}: {len(model.variables)} design variables, {len(spec.limits)} limits, "
        f"{model.n_steps} steps of {model.step:g} s"
    )
    options = dict(
        progress=progress,
        max_iterations=spec.solver.max_iterations,
        tolerance=spec.solver.tolerance,
    )
    if spec.solver.robust:
        nlp = _solve_robust(model, start_ev, say, options)
    else:
        nlp = solve_nlp(model, **options)
    say(f"solver: {nlp.status} after {nlp.iterations} iterations ({nlp.seconds:.2f} s)")
    optimum_ev = model.numeric(nlp.values)
    optimum_rows = limit_margins(model, optimum_ev, start_ev)
    notes: list[str] = [
        f"zero-order hold by Taylor scaling and squaring ({nlp.squarings} squarings), "
        f"truncation bound {nlp.truncation_bound:.1e} relative",
        "time-domain limits are checked at the samples of the scenario step",
    ]
    if model.sampled and model.substeps > 1:
        notes.append(
            f"the controllers sample every {model.step:g} s; the limits are checked every "
            f"{model.output_step:g} s in between (continuous part advanced exactly, "
            "controller outputs held)"
        )
    if model.system_loop is not None and model.system_loop.output_ranges:
        notes.append(
            "controller output limits ("
            + ", ".join(s.split(".")[0] for s in model.system_loop.output_ranges)
            + ") are kept as limits on the commands, so the loop never saturates and its "
            "linear model is exact"
        )
    pole_kinds = {lim.kind for lim in spec.limits} & {"damping_ratio", "pole_real_part"}
    if model.sampled and pole_kinds:
        notes.append(
            "sampled loop poles: the optimiser tests the discrete loop (a real-part limit "
            "exactly, through |z| < exp(sigma T); a damping-ratio limit on its Tustin "
            "equivalent); the verification uses s = ln(z) / T"
        )
    if (
        model.sampled
        and model.system_loop is None
        and any(lim.kind == "output_impedance" for lim in spec.limits)
    ):
        notes.append("impedances of the sampled PI use its continuous counterpart")
    if model.sampled and model.system_loop is not None and spec.stress.ripple is not None:
        notes.append(
            "the ripple response holds the outputs of the sampled blocks "
            f"({', '.join(model.system_loop.sampled)}) constant: the continuous part only"
        )
    # robust: the optimiser imposed the limits at every tolerance corner, so a stopped
    # solver's point is judged (and reported) at its worst corner too
    check_rows = error_rows = optimum_rows
    if spec.solver.robust:
        toleranced_nlp = model.tolerance_corners()[0]
        count = nlp.stats.get("tolerance_corners_in_optimiser", 0)
        total = nlp.stats.get("tolerance_corners", count)
        rounds = nlp.stats.get("exchange_rounds", 1)
        outcome = (
            f"at the optimum every limit holds at all {total} of them"
            if nlp.stats.get("exchange_settled", True)
            else "the exchange stopped before every corner met every limit"
        )
        parts = ", ".join(toleranced_nlp) or "no toleranced parts"
        notes.append(
            f"robust: limits imposed in the optimiser at the nominal values and at {count} "
            f"of {total} tolerance corners ({parts}), chosen by a corner exchange in "
            f"{rounds} round(s); {outcome}"
        )
    if spec.solver.robust and nlp.status not in _CONVERGED:
        check_rows = _worst_over_corners(model, nlp.values, optimum_rows, start_ev)
        error_rows = [
            dict(
                row,
                margin_worst_corner=worst["margin"],
                relative_margin_worst_corner=worst["relative_margin"],
                worst_corner=worst["worst_corner"],
            )
            for row, worst in zip(optimum_rows, check_rows, strict=True)
        ]
    if nlp.status not in _CONVERGED:
        if _is_feasible(check_rows):
            notes.append(
                f"the solver stopped with {nlp.status}, but its last point meets "
                "every limit in the numeric verification"
            )
        else:
            failing = [r for r in check_rows if r["relative_margin"] < -1e-7]
            listing = "; ".join(
                f"{r['name']} misses by {-r['margin']:.4g} {r['unit']}".rstrip() for r in failing
            )
            code = "infeasible_limits" if nlp.status in _INFEASIBLE else "solver_failed"
            values = ", ".join(f"{k} = {v:.4g}" for k, v in nlp.values.items())
            what = (
                "no point meets every limit"
                if code == "infeasible_limits"
                else (f"the optimiser stopped without converging ({nlp.status})")
            )
            error = TuningError(
                code,
                f"{what}; at the least-violation point ({values}): {listing or 'no limit fails'}",
                file=file,
                location=("limits",),
            )
            error.result = _result(  # type: ignore[attr-defined]
                model,
                spec,
                series,
                False,
                nlp,
                nlp.values,
                nlp.values,
                optimum_rows,
                error_rows,
                None,
                [],
                0,
                [],
                notes,
                start_ev,
                optimum_ev,
                start_ev,
            )
            raise error
    # snapping: every combination of neighbouring preferred values, simulated
    combos = _combinations(
        model,
        nlp.values,
        series,
        count=3 if spec.stress.corners_must_pass or spec.solver.robust else 1,
    )
    say(f"snapping to {series}: {len(combos)} combinations of neighbouring values")
    start_terms = [abs(float(v)) or 1.0 for _, v in objective_terms(model, start_ev)]
    start_peak = peak_impedance(model, start_ev) or 1.0
    scored = []
    robust = (spec.stress.corners_must_pass or spec.solver.robust) and spec.stress.tolerance_corners
    for combo in combos:
        ev = model.numeric(combo)
        rows = limit_margins(model, ev, start_ev)
        obj = objective_value(model, ev, start_terms, start_peak)
        worst = min((r["relative_margin"] for r in rows), default=0.0)
        nominal_ok = _is_feasible(rows)
        corners_ok = nominal_ok
        if robust and nominal_ok:
            # every tolerance corner of this combination must meet every limit as well
            for corner in _corners(model, combo)[1]:
                corner_rows = limit_margins(model, model.numeric({**combo, **corner}), start_ev)
                if not _is_feasible(corner_rows):
                    corners_ok = False
                    break
        scored.append((nominal_ok, corners_ok, obj, worst, combo, rows, ev))
    robust_ones = [s for s in scored if s[1]]
    nominal_ones = [s for s in scored if s[0]]
    if robust and robust_ones:
        # with three values either side, several combinations can share the least
        # objective (a capacitance objective ignores the resistor); the one nearest the
        # continuous optimum (log distance) is kept, rather than whichever comes first
        best = min(robust_ones, key=lambda s: (s[2], _log_distance(s[4], nlp.values)))
    elif nominal_ones:
        best = min(nominal_ones, key=lambda s: s[2])
        if robust:
            notes.append(
                f"no combination of the nearby {series} values meets every limit at every "
                "tolerance corner; the best one that meets them at nominal values is reported"
            )
    else:
        best = max(scored, key=lambda s: s[3])
        notes.append(
            f"no combination of neighbouring {series} values meets every limit; the "
            "least-violating one is reported"
        )
    feasible_ones = nominal_ones
    _, _, obj_pref, _, chosen, chosen_rows, chosen_ev = best
    # tolerance corners at the chosen values
    toleranced, corners = _corners(model, chosen)
    worst_rows = [dict(r, margin_worst_corner=r["margin"], worst_corner={}) for r in chosen_rows]
    if spec.stress.tolerance_corners and toleranced:
        say(f"tolerance corners: {len(corners)} ({', '.join(toleranced)})")
        for index, corner in enumerate(corners, start=1):
            ev = model.numeric({**chosen, **corner})
            for row, corner_row in zip(worst_rows, limit_margins(model, ev, start_ev), strict=True):
                if corner_row["margin"] < row["margin_worst_corner"]:
                    row["margin_worst_corner"] = corner_row["margin"]
                    row["worst_corner"] = dict(corner)
            if index % 16 == 0 or index == len(corners):
                say(f"corners checked: {index}/{len(corners)}")
    else:
        corners = []
    for row in worst_rows:
        b = abs(row["bound"]) or 1.0
        row["relative_margin_worst_corner"] = row["margin_worst_corner"] / b
    tightest = None
    if worst_rows:
        t = min(worst_rows, key=lambda r: r["relative_margin_worst_corner"])
        tightest = {
            "name": t["name"],
            "margin": t["margin"],
            "margin_worst_corner": t["margin_worst_corner"],
            "relative_margin_worst_corner": t["relative_margin_worst_corner"],
            "worst_corner": t["worst_corner"],
            "unit": t["unit"],
        }
    stress = stress_report(model, chosen_ev)
    feasible = bool(feasible_ones)
    result = _result(
        model,
        spec,
        series,
        feasible,
        nlp,
        nlp.values,
        chosen,
        optimum_rows,
        worst_rows,
        tightest,
        stress,
        len(corners),
        toleranced,
        notes,
        start_ev,
        chosen_ev,
        optimum_ev,
    )
    result.objective = {
        "start": objective_value(model, start_ev, start_terms, start_peak),
        "optimum": objective_value(model, optimum_ev, start_terms, start_peak),
        "preferred": obj_pref,
    }
    return result


def _result(
    model,
    spec,
    series,
    feasible,
    nlp: NlpSolution,
    optimum,
    chosen,
    optimum_rows,
    rows,
    tightest,
    stress,
    corners,
    toleranced,
    notes,
    start_ev,
    chosen_ev,
    optimum_ev,
) -> TuningResult:
    variables = {}
    for name in model.variables:
        part = model.base_circuit.parts[name]
        var = spec.variables[name]
        variables[name] = {
            "optimum": float(optimum[name]),
            "preferred": float(chosen[name]),
            "start": float(start_values(model)[name]),
            "min": float(var.min),
            "max": float(var.max),
            "unit": _UNITS[part.kind],
            "tolerance": getattr(part, "tolerance", None),
        }
    limits = []
    for opt_row, row in zip(optimum_rows, rows, strict=True):
        limits.append(
            {
                **row,
                "margin_at_optimum": opt_row["margin"],
            }
        )
    watched = [lim.output for lim in spec.limits if lim.output] + [
        CURRENT_PREFIX + lim.part for lim in spec.limits if lim.part
    ]
    responses = {
        "times": model.times,
        "outputs": list(dict.fromkeys(watched)),
        "index": {name: model.outputs.index(name) for name in dict.fromkeys(watched)},
        "start": start_ev.Y,
        "preferred": chosen_ev.Y,
        "optimum": optimum_ev.Y,
        "units": model.units,
        "limits": [lim.model_dump() for lim in spec.limits],
        "final": {},
        "impedance": [],
    }
    for name in responses["outputs"]:
        i = model.outputs.index(name)
        responses["final"][name] = {
            "start": float(start_ev.Y[i, -1]),
            "preferred": float(chosen_ev.Y[i, -1]),
        }
    for lim in spec.limits:
        if lim.kind == "output_impedance":
            omegas = limit_measures.frequency_grid(lim, 2)
            responses["impedance"].append(
                {
                    "name": lim.label,
                    "frequency": omegas / (2 * math.pi),
                    "start": limit_measures.impedance_magnitude(start_ev, model, lim, omegas),
                    "preferred": limit_measures.impedance_magnitude(chosen_ev, model, lim, omegas),
                    "max": float(lim.max),
                }
            )
    return TuningResult(
        name=spec.name,
        series=series,
        feasible=feasible,
        variables=variables,
        limits=limits,
        tightest=tightest,
        stress=stress,
        solver={
            "status": nlp.status,
            "iterations": nlp.iterations,
            "seconds": nlp.seconds,
            "squarings": nlp.squarings,
            "truncation_bound": nlp.truncation_bound,
            "constraint_violation": nlp.constraint_violation,
            **nlp.stats,
        },
        objective={},
        corners_checked=corners,
        toleranced_parts=list(toleranced),
        notes=notes,
        responses=responses,
    )
