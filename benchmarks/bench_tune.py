"""Benchmark: how the tuning optimiser scales with the number of design variables.

Problem family (an invented scenario): an auxiliary 48 V supply feeds a regulated load (a
constant-power converter, its negative incremental conductance included) through an
eight-stage LC filter, each stage with an Rd-Cd damping leg; a 4 A load step at 0.1 ms,
1 ms at 2 us (500 steps). Limits on the output voltage (deviation, minimum, settling band)
and on the last damping resistor's current, each at every sample: 2000 path rows. The
circuit is the same in every record; only the number of design variables n changes (2, 4,
8, 16: the damping legs of the last n/2 stages; 32: every leg and every stage's L and C),
so that the growth with n measures the derivative strategy, not the model. Objective: the
capacitance of the capacitors being sized. Robust records impose every limit at the four
tolerance corners of the last stage's L and C as well. Two more records run the bundled
tuning files (robust, 16 corners), where SLSQP with every row at every corner can fail.

Both sides start from the same point, see the same limits on the same simulation (the
problem's compiled parametric loop, built before timing; exact zero-order hold on the
same grid) and must reach the same optimum: the same objective within 1 % (the variables
themselves may differ where a resistor sits in series with a capacitor held at its bound):

* wirestate: :func:`wirestate.tune.optimise.solve_nlp` (IPOPT, exact first derivatives by
  algorithmic differentiation, limited-memory quasi-Newton Hessian, rows where each
  limit's signal peaks, violated ones added after each solve);
* reference: scipy's SLSQP with forward differences, every row of every point at every
  evaluation (each evaluation one batch of the nominal point and the corners). A reference
  run fails when SLSQP reports no success, ends outside a limit, or ends more than 1 %
  worse.

Repeats are interleaved (one of each side in turn), the same number for both (two, and up
to seven where a pair of runs takes under a second), and warm:
both sides use the problem's compiled loop, built before timing; wirestate's first solve
of a problem also generates CasADi's derivative functions of that loop (once per tuning
run), so one untimed solve runs first and its time is recorded as
``details.wirestate.cold_first_solve_s``; the reference has nothing to warm up. ``ratio =
median_s / reference_median_s`` (lower is better); the targets are the issue's (0.5 at 4
variables, 0.1 at 16). ``details.growth_exponent`` is the slope of log(time) against
log(n) over the records of the same kind, fitted by least squares (target <= 1 for the
wirestate side).

Run: ``python benchmarks/bench_tune.py`` (prints JSON).
"""

from __future__ import annotations

import json
import statistics
import tempfile
import time
from pathlib import Path

import numpy as np
from scipy.optimize import minimize

from wirestate.tune import load_tuning
from wirestate.tune.formulation import bound_size, scaled, values_of
from wirestate.tune.limits import POLE_KINDS, pole_margin, ranges
from wirestate.tune.objective import objective_value, start_scales
from wirestate.tune.optimise import points_of, solve_nlp
from wirestate.tune.problem import Problem

REPEATS = 2
#: records whose pair of runs takes under SHORT_S seconds repeat up to MOST_REPEATS times
MOST_REPEATS = 7
SHORT_S = 1.0
ROOT = Path(__file__).resolve().parents[1]
BUNDLED = (
    ROOT / "models" / "tuning" / "drive_bus_damping.toml",
    ROOT / "models" / "tuning" / "drive_bus_loop_damping.toml",
)
SIZES = (2, 4, 8, 16, 32)
STAGES = 8
TARGETS = {4: 0.5, 16: 0.1}
BOUNDS = {
    "Rd": ("50mohm", "5ohm", "0.5ohm"),
    "Cd": ("10uF", "2mF", "470uF"),
    "L": ("4.7uH", "22uH", "10uH"),
    "C": ("22uF", "220uF", "47uF"),
}


def circuit_text() -> str:
    """The eight-stage filter (circuit file text)."""
    lines = ["[circuit]", 'name = "aux_supply_filter"', "[parts.Vs]",
             'kind = "voltage_source"', 'nodes = ["in", "gnd"]', 'value = "48V"']  # fmt: skip
    before = "in"
    for k in range(1, STAGES + 1):
        node = f"n{k}"
        last = k == STAGES
        lines += [
            f"[parts.R{k}]", 'kind = "resistor"', f'nodes = ["{before}", "m{k}"]',
            'value = "15mohm"',
            f"[parts.L{k}]", 'kind = "inductor"', f'nodes = ["m{k}", "{node}"]', 'value = "10uH"',
            *(['tolerance = "20%"'] if last else []),
            f"[parts.C{k}]", 'kind = "capacitor"', f'nodes = ["{node}", "gnd"]',
            'value = "47uF"', *(['tolerance = "10%"'] if last else []),
            f"[parts.Rd{k}]", 'kind = "resistor"', f'nodes = ["{node}", "d{k}"]',
            'value = "0.5ohm"',
            f"[parts.Cd{k}]", 'kind = "capacitor"', f'nodes = ["d{k}", "gnd"]',
            'value = "470uF"',
        ]  # fmt: skip
        before = node
    lines += [
        "[parts.Gcpl]", 'kind = "vccs"', f'nodes = ["{before}", "gnd"]',
        f'control = ["{before}", "gnd"]', "gain = -0.2",
        "[parts.Iload]", 'kind = "current_source"', f'nodes = ["{before}", "gnd"]',
        'value = "0A"', "[outputs.v_out]", f'voltage = "{before}"',
    ]  # fmt: skip
    return "\n".join(lines) + "\n"


def design(n: int) -> list[str]:
    """The design variables of the record with ``n`` of them."""
    if n <= 2 * STAGES:
        stages = range(STAGES - n // 2 + 1, STAGES + 1)
        return [name for k in stages for name in (f"Rd{k}", f"Cd{k}")]
    return [name for k in range(1, STAGES + 1) for name in (f"Rd{k}", f"Cd{k}", f"L{k}", f"C{k}")]


def tuning_text(n: int, robust: bool) -> str:
    """The tuning file of one record."""
    parts = []
    for name in design(n):
        low, high, start = BOUNDS[name.rstrip("0123456789")]
        parts.append(f'[variables.{name}]\nmin = "{low}"\nmax = "{high}"\nstart = "{start}"')
    caps = ", ".join(f'"{v}"' for v in design(n) if v.startswith("C"))
    limits = [
        'name = "bus_deviation"\nkind = "overshoot"\noutput = "v_out"\nafter = "0.1ms"\n'
        'percent_of = "final"\nmax = "2.5%"',
        'name = "bus_minimum"\nkind = "minimum"\noutput = "v_out"\nmin = "45V"',
        'name = "bus_settling"\nkind = "settling"\noutput = "v_out"\nband = "1%"\n'
        'settled_by = "0.6ms"\npercent_of = "final"',
        f'name = "damping_current"\nkind = "peak_current"\npart = "Rd{STAGES}"\nmax = "3A"',
    ]
    return "\n".join(
        [
            f'[tuning]\nname = "aux_supply_{n}"\ncircuit = "aux_supply_filter.toml"',
            *parts,
            '[scenario]\nuntil = "1ms"\nstep = "2us"\n[[scenario.steps]]\ninput = "Iload"\n'
            'at = "0.1ms"\nto = "4A"',
            *[f"[[limits]]\n{text}" for text in limits],
            f"[objective]\ncapacitance = 1.0\nparts = [{caps}]",
            f"[solver]\nrobust = {'true' if robust else 'false'}\n",
        ]
    )


def problem(folder: Path, n: int, robust: bool) -> Problem:
    """One record's problem, its parametric loop compiled (before any timing)."""
    (folder / "aux_supply_filter.toml").write_text(circuit_text(), encoding="utf-8")
    path = folder / f"tune_{n}_{int(robust)}.toml"
    path.write_text(tuning_text(n, robust), encoding="utf-8")
    out = Problem(load_tuning(path))
    out.parametric().compile()
    return out


def _wirestate(case: Problem) -> tuple[dict[str, float], dict]:
    solution = solve_nlp(case, robust=case.spec.solver.robust)
    return solution.values, {
        "status": solution.status,
        "iterations": solution.iterations,
        "rows_imposed": solution.stats["rows_imposed"],
        "rows_total": solution.stats["rows_total"],
        "exchange_rounds": solution.stats["exchange_rounds"],
    }


def _slsqp(case: Problem) -> tuple[dict[str, float], dict]:
    names, bounds = case.variables, case.bounds
    points = points_of(case, case.spec.solver.robust, None)
    start = case.evaluate([case.start_values()])
    scales = start_scales(case, start)
    cache: dict[bytes, object] = {}

    def evaluate(q: np.ndarray):
        key = np.asarray(q, dtype=float).tobytes()
        if key not in cache:
            values = values_of(names, bounds, q)
            cache[key] = case.evaluate([case.corner_values(values, f) for f in points])
        return cache[key]

    def objective(q: np.ndarray) -> float:
        return float(np.atleast_1d(objective_value(case, evaluate(q), scales))[0])

    def rows(q: np.ndarray) -> np.ndarray:
        # every sample of every limit at every point, scaled like the optimiser's rows;
        # SLSQP wants g(q) >= 0
        batch, out = evaluate(q), []
        for limit in case.spec.limits:
            size = bound_size(limit)
            if limit.kind in POLE_KINDS:
                out.append(np.asarray(pole_margin(limit, batch, case)[1], dtype=float) / size)
                continue
            for expr, lower, upper in ranges(limit, case, batch, start):
                expr = np.asarray(expr, dtype=float)
                if upper is not None:
                    out.append(((upper - expr) / size).ravel())
                if lower is not None:
                    out.append(((expr - lower) / size).ravel())
        return np.nan_to_num(np.concatenate(out), nan=-1e3)

    q0 = scaled(names, bounds, case.start_values())
    result = minimize(
        objective, q0, method="SLSQP", bounds=[(0.0, 1.0)] * len(names),
        constraints=[{"type": "ineq", "fun": rows}], options={"ftol": 1e-10, "maxiter": 300},
    )  # fmt: skip
    return values_of(names, bounds, result.x), {
        "status": str(result.message),
        "success": bool(result.success),
        "iterations": int(result.nit),
        "simulations": len(cache),
        "constraint_rows": int(rows(result.x).size),
        "least_row": float(np.min(rows(result.x))),
    }


def _interleaved(case: Problem) -> tuple[list, list, float]:
    """Both sides in turn, the same number of times: ``REPEATS``, and more (up to
    ``MOST_REPEATS``) while a pair of runs takes less than ``SHORT_S`` (the short records
    are the noisiest); (seconds, values, info) each, and the time of wirestate's cold
    first solve (see the module docstring)."""
    t0 = time.perf_counter()
    _wirestate(case)
    cold = time.perf_counter() - t0
    ours, theirs = [], []
    while len(ours) < REPEATS or (
        len(ours) < MOST_REPEATS and ours[-1][0] + theirs[-1][0] < SHORT_S
    ):
        for side, runs in ((_wirestate, ours), (_slsqp, theirs)):
            t0 = time.perf_counter()
            values, info = side(case)
            runs.append((time.perf_counter() - t0, values, info))
    return ours, theirs, cold


def _median(runs: list) -> tuple[float, dict, dict]:
    median = statistics.median(r[0] for r in runs)
    _, values, info = min(runs, key=lambda r: abs(r[0] - median))
    return median, values, info


def _objective(case: Problem, values: dict[str, float]) -> float:
    start = case.evaluate([case.start_values()])
    return float(
        np.atleast_1d(objective_value(case, case.evaluate([values]), start_scales(case, start)))[0]
    )


def _record(n: int, robust: bool, folder: Path) -> dict:
    name = f"tune_scaling_{n}vars_{'robust' if robust else 'nominal'}"
    return _compare(problem(folder, n, robust), name, TARGETS.get(n))


def _compare(case: Problem, name: str, target: float | None) -> dict:
    """Time both sides on one problem (its loop compiled already) and compare."""
    n, robust = len(case.variables), case.spec.solver.robust
    ours, theirs, cold = _interleaved(case)
    ours_s, ours_x, ours_info = _median(ours)
    ref_s, ref_x, ref_info = _median(theirs)
    worst = max(abs(ours_x[k] / ref_x[k] - 1.0) for k in ours_x)
    # the same optimum: the same objective within 1 % (a resistor in series with a
    # capacitor held at its lower bound barely matters, so such variables may differ)
    ours_f, ref_f = _objective(case, ours_x), _objective(case, ref_x)
    gap = ref_f / ours_f - 1.0
    same = abs(gap) <= 0.01
    reference_ok = bool(ref_info["success"] and ref_info["least_row"] >= -1e-6 and same)
    ratio = ours_s / ref_s
    return {
        "name": name,
        "median_s": ours_s,
        "reference_median_s": ref_s,
        "ratio": ratio,
        "higher_is_better": False,
        "target": target,
        "meets_target": None if target is None else bool(ratio <= target and same),
        "details": {
            "design_variables": n,
            "robust": robust,
            "path_rows": ref_info["constraint_rows"],
            "wirestate": {
                "optimum": ours_x,
                "seconds": [r[0] for r in ours],
                "cold_first_solve_s": cold,
                **ours_info,
            },  # fmt: skip
            "reference": {
                "method": "scipy SLSQP, forward differences, every row at every evaluation",
                "optimum": ref_x,
                "seconds": [r[0] for r in theirs],
                "failed": not reference_ok,
                **ref_info,
            },
            "objective": {"wirestate": ours_f, "reference": ref_f, "relative_gap": gap},
            "largest_relative_difference_of_variables": worst,
            "same_optimum_within_1_percent": bool(same),
            "repeats": len(ours),
            "speedup": 1.0 / ratio,
        },
    }


def growth_exponent(sizes: list[int], seconds: list[float]) -> float:
    """Slope of log(seconds) against log(sizes), least squares."""
    slope, _ = np.polyfit(np.log(sizes), np.log(seconds), 1)
    return float(slope)


def run() -> list[dict]:
    """Run the benchmark; one record per size and kind, with the growth exponents."""
    records = []
    with tempfile.TemporaryDirectory() as folder:
        for robust in (False, True):
            group = [_record(n, robust, Path(folder)) for n in SIZES]
            ours = growth_exponent(list(SIZES), [r["median_s"] for r in group])
            theirs = growth_exponent(list(SIZES), [r["reference_median_s"] for r in group])
            for record in group:
                record["details"]["growth_exponent"] = ours
                record["details"]["reference_growth_exponent"] = theirs
                record["details"]["growth_target"] = 1.0
                record["details"]["growth_meets_target"] = bool(ours <= 1.0)
            records += group
    # the bundled tuning files, where SLSQP with every row can fail outright
    for path in BUNDLED:
        case = Problem(load_tuning(path))
        case.parametric().compile()
        records.append(_compare(case, f"tune_bundled_{path.stem}", None))
    return records


if __name__ == "__main__":
    print(json.dumps(run(), indent=2, default=str))
