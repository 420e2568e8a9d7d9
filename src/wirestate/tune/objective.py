"""The tuning objective: a weighted sum of terms, each divided by its value at the start.

The same functions give the CasADi objective of the NLP and the numbers the snapping
compares (numeric: one value per row of a batch).
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

import numpy as np

from wirestate.tune import limits as measures
from wirestate.tune.evaluation import Evaluation

if TYPE_CHECKING:
    from wirestate.tune.problem import Problem


def objective_terms(problem: Problem, ev: Evaluation) -> list[tuple[float, Any]]:
    """(weight, value) of each objective term except the impedance epigraph."""
    objective = problem.spec.objective
    parts = problem.circuit.parts
    terms: list[tuple[float, Any]] = []
    if objective.capacitance:
        caps = [ev.values[p] for p in objective.parts if parts[p].kind == "capacitor"]
        if caps:
            terms.append((objective.capacitance, sum(caps[1:], caps[0])))
    if objective.resistor_energy:
        resistors = [p for p in objective.parts if parts[p].kind == "resistor"]
        energies = [measures.resistor_energy(problem, ev, p) for p in resistors]
        if energies:
            terms.append((objective.resistor_energy, sum(energies[1:], energies[0])))
    if objective.ise:
        error = measures.integral_squared_error(problem, ev, objective.output)
        terms.append((objective.ise, error))
    return terms


def peak_impedance(problem: Problem, ev: Evaluation, factor: int = 1) -> Any:
    """Largest ``|Z|`` over the bands of every output-impedance limit (numeric; per row
    of a batch)."""
    peaks = [
        np.max(
            measures.impedance_magnitude(ev, problem, lim, measures.frequency_grid(lim, factor)),
            axis=-1,
        )
        for lim in problem.spec.limits
        if lim.kind == "output_impedance"
    ]
    if not peaks:
        return 0.0
    return np.max(np.array(peaks), axis=0)


def start_scales(problem: Problem, start: Evaluation) -> tuple[list[float], float]:
    """The value of each term and of the peak impedance at the start (the normalisers)."""
    terms = [abs(float(np.ravel(v)[0])) or 1.0 for _, v in objective_terms(problem, start)]
    peak = 1.0
    if problem.spec.objective.peak_impedance:
        peak = float(np.ravel(peak_impedance(problem, start))[0]) or 1.0
    return terms, peak


def objective_value(problem: Problem, ev: Evaluation, scales: tuple[list[float], float]) -> Any:
    """The normalised objective (numeric; per row of a batch, a float for one point)."""
    start_terms, start_peak = scales
    total: Any = 0.0
    for (weight, value), ref in zip(objective_terms(problem, ev), start_terms, strict=True):
        total = total + weight * np.asarray(value, dtype=float) / ref
    if problem.spec.objective.peak_impedance:
        total = (
            total + problem.spec.objective.peak_impedance * peak_impedance(problem, ev) / start_peak
        )
    total = np.asarray(total, dtype=float)
    return float(total) if total.ndim == 0 else total
