"""Stress of every watched part at the chosen values: energy, power, voltage, current.

Peaks come from the scenario; a stated sinusoidal ripple on one input (``[stress.ripple]``)
adds its steady-state amplitude from the continuous loop's frequency response; each
quantity is set against the part's ratings. The figures size real parts: the report
carries the cautions of :data:`wirestate.tune.report.CAUTIONS`.
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING, Any

import numpy as np

from wirestate.tune import limits as measures
from wirestate.tune.evaluation import Evaluation
from wirestate.tune.problem import CURRENT_PREFIX, VOLTAGE_PREFIX

if TYPE_CHECKING:
    from wirestate.tune.problem import Problem


def _frequency_response(ev: Evaluation, problem: Problem, input_name: str, freq: float):
    j = problem.inputs.index(input_name)
    n = ev.A.shape[0]
    x = np.linalg.solve(2j * math.pi * freq * np.eye(n) - ev.A, ev.B[:, j])
    return ev.extra["Cc"] @ x + ev.extra["Dc"][:, j]


def stress_report(problem: Problem, ev: Evaluation) -> list[dict[str, Any]]:
    """Energy, power, peak voltage and current of each watched part against its ratings,
    at one numeric evaluation."""
    ripple = problem.spec.stress.ripple
    response = None
    if ripple is not None:
        response = _frequency_response(ev, problem, ripple.input, ripple.frequency)
    rows = []
    for name in problem.watched:
        part = problem.base_circuit.parts[name]
        i_row = problem.outputs.index(CURRENT_PREFIX + name)
        v_row = problem.outputs.index(VOLTAGE_PREFIX + name)
        row: dict[str, Any] = {
            "part": name,
            "kind": part.kind,
            "peak_current": float(np.max(np.abs(ev.Y[i_row]))),
            "peak_voltage": float(np.max(np.abs(ev.Y[v_row]))),
        }
        ripple_i = ripple_v = 0.0
        if response is not None:
            ripple_i = float(abs(response[i_row]) * ripple.amplitude)
            ripple_v = float(abs(response[v_row]) * ripple.amplitude)
            row["ripple_current_amplitude"] = ripple_i
            row["ripple_voltage_amplitude"] = ripple_v
        if part.kind == "resistor":
            row.update(_resistor(problem, ev, name, ripple_i))
        row["ratings"] = _ratings(part, row, ripple_i, ripple_v)
        rows.append(row)
    return rows


def _resistor(problem: Problem, ev: Evaluation, name: str, ripple_i: float) -> dict[str, float]:
    R = float(ev.values[name])
    energy = float(measures.resistor_energy(problem, ev, name))
    steady = R * float(ev.Y[problem.outputs.index(CURRENT_PREFIX + name), -1]) ** 2
    ripple_power = R * ripple_i**2 / 2.0
    return {
        "energy": energy,
        "average_power_scenario": energy / problem.times[-1],
        "steady_power": steady,
        "ripple_power": ripple_power,
        "continuous_power": steady + ripple_power,
    }


def _ratings(part: Any, row: dict[str, Any], ripple_i: float, ripple_v: float) -> list[dict]:
    checks = []
    if part.rated_voltage is not None:
        checks.append(("voltage", row["peak_voltage"] + ripple_v, float(part.rated_voltage)))
    if part.rated_current is not None:
        checks.append(("current", row["peak_current"] + ripple_i, float(part.rated_current)))
    if part.rated_power is not None and part.kind == "resistor":
        used = max(row["continuous_power"], row["average_power_scenario"])
        checks.append(("power", used, float(part.rated_power)))
    return [
        {"quantity": q, "used": u, "rated": r, "fraction_of_rating": u / r} for q, u, r in checks
    ]


def over_ratings(stress: list[dict[str, Any]]) -> list[str]:
    """``"Cd current (111 %)"`` for every rating exceeded."""
    out = []
    for row in stress:
        for rating in row["ratings"]:
            if rating["fraction_of_rating"] > 1.0:
                share = 100 * rating["fraction_of_rating"]
                out.append(f"{row['part']} {rating['quantity']} ({share:.0f} % of its rating)")
    return out
