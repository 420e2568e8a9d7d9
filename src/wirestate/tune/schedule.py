"""The scenario of a tuning case on its sample grid: stage 2 of the chain.

Input: a validated :class:`~wirestate.tune.problem.Problem` (loop inputs, units, the
nominal block). Output: a :class:`Schedule`, the loop inputs at every sample (the
operating point, then the steps and waveforms, held over each step: exact for a
zero-order hold), the states set at ``t = 0`` and the sample columns whose steady states
the limits refer to.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from wirestate.errors import TuningError, WirestateError
from wirestate.simulate.inputs import parse_waveform
from wirestate.tune.loop import REFERENCE

if TYPE_CHECKING:
    from wirestate.tune.problem import Problem


@dataclass(frozen=True)
class Grid:
    """The sample grid: ``step`` (the stepping period: a sampled loop's period, else the
    scenario step), ``substeps`` output samples per step, ``n_steps`` steps."""

    step: float
    substeps: int
    n_steps: int

    @property
    def output_step(self) -> float:
        """The output step: the scenario step between the samples of a sampled loop."""
        return self.step / self.substeps

    @property
    def times(self) -> np.ndarray:
        """Times of the output samples (s), every :attr:`output_step`."""
        return np.arange(self.n_steps * self.substeps + 1) * self.output_step


@dataclass(frozen=True)
class Schedule:
    """Loop inputs over the scenario.

    Attributes
    ----------
    inputs
        Loop inputs x samples (``n_steps + 1`` columns), SI units.
    initial_rows
        ``(state index, value)`` set at ``t = 0`` (``scenario.initial_values``).
    steady_columns
        Sample indices whose input values define steady states the limits use (first,
        last, and the sample before each limit's ``after``).
    from_rest
        True when the scenario starts from zero (``initial = "zero"``), else from the
        steady state at the first inputs.
    """

    inputs: np.ndarray
    initial_rows: tuple[tuple[int, float], ...]
    steady_columns: tuple[int, ...]
    from_rest: bool


def build_schedule(problem: Problem) -> Schedule:
    """The :class:`Schedule` of ``problem``'s scenario; see the module docstring.

    Raises
    ------
    TuningError
        ``unknown_signal`` for a step, level, waveform or initial value naming no free
        input or state; ``invalid_field`` for an input with both a step and a waveform, or
        a circuit without a unique operating point for the default reference.
    """
    spec = problem.spec
    initial = tuple(_initial_rows(problem))
    rows = _levels(problem)
    steps = problem.grid.n_steps
    for item in sorted(spec.scenario.steps, key=lambda s: s.at):
        if item.input not in problem.inputs or (
            item.input == REFERENCE and spec.controller is None
        ):
            raise TuningError(
                "unknown_signal",
                f"the step drives {item.input!r}, which is not a free input (inputs: "
                f"{', '.join(problem.inputs)})",
                file=problem.file,
                location=("scenario", "steps", item.input),
            )
        k = int(round(item.at / problem.grid.step))
        rows[problem.inputs.index(item.input), k:] = float(item.to)
    _apply_waveforms(problem, rows)
    columns = {0, steps}
    for limit in spec.limits:
        columns.add(max(int(round(limit.after / problem.grid.step)) - 1, 0))
    return Schedule(
        inputs=rows,
        initial_rows=initial,
        steady_columns=tuple(sorted(columns)),
        from_rest=spec.scenario.initial == "zero",
    )


def _levels(problem: Problem) -> np.ndarray:
    """Inputs x samples at the operating point (no steps yet)."""
    spec = problem.spec
    ctrl = spec.controller
    block = problem.block
    free = list(block.inputs)
    defaults = block.input_defaults
    if problem.system_loop is not None:
        free = list(problem.system_loop.inputs)
        defaults = problem.system_loop.system.input_defaults
    level = {name: float(defaults.get(name) or 0.0) for name in free}
    where = "circuit" if problem.system_loop is None else "system"
    for name, value in spec.scenario.inputs.items():
        if name not in free or (ctrl is not None and name == ctrl.drive):
            raise TuningError(
                "unknown_signal",
                f"scenario input {name!r} is not a free {where} input (inputs: "
                f"{', '.join(i for i in problem.inputs if i != REFERENCE)})",
                file=problem.file,
                location=("scenario", "inputs", name),
            )
        level[name] = float(value)
    if ctrl is not None:
        if ctrl.reference is not None:
            level[REFERENCE] = float(ctrl.reference)
        else:
            level[REFERENCE] = _operating_output(problem, level)
    count = problem.grid.n_steps + 1
    return np.array([[level[name]] * count for name in problem.inputs], dtype=float)


def _operating_output(problem: Problem, level: dict[str, float]) -> float:
    """The measured output at the circuit's own operating point (the default reference)."""
    block = problem.block
    u = np.array([level[name] for name in block.inputs])
    try:
        x = np.linalg.solve(block.A, -block.B @ u)
    except np.linalg.LinAlgError:
        raise TuningError(
            "invalid_field",
            "the circuit has no unique operating point; give controller.reference",
            file=problem.file,
            location=("controller", "reference"),
        ) from None
    y = block.C @ x + block.D @ u
    return float(y[block.outputs.index(problem.spec.controller.measure)])


def _apply_waveforms(problem: Problem, rows: np.ndarray) -> None:
    """``scenario.waveforms``: each input's row sampled from its waveform at the step
    times (held over each step, as every input of the scenario)."""
    scenario = problem.spec.scenario
    stepped = {item.input for item in scenario.steps}
    times = np.arange(problem.grid.n_steps + 1) * problem.grid.step
    for name, text in scenario.waveforms.items():
        where = ("scenario", "waveforms", name)
        if name not in problem.inputs:
            raise TuningError(
                "unknown_signal",
                f"the waveform drives {name!r}, which is not a free input (inputs: "
                f"{', '.join(problem.inputs)})",
                file=problem.file,
                location=where,
            )
        if name in stepped:
            raise TuningError(
                "invalid_field",
                f"input {name!r} has both a step and a waveform; put the step into the "
                "waveform (points:... or step:...,at=TIME)",
                file=problem.file,
                location=where,
            )
        try:
            waveform = parse_waveform(
                text, problem.units.get(name), name=name, base=Path(problem.spec.base_dir)
            )
        except WirestateError as exc:
            raise TuningError(exc.code, exc.message, file=problem.file, location=where) from None
        rows[problem.inputs.index(name)] = waveform.values(times)


def _initial_rows(problem: Problem) -> list[tuple[int, float]]:
    """``(state index, value)`` of ``scenario.initial_values``."""
    rows = []
    states = problem.states
    for name, value in problem.spec.scenario.initial_values.items():
        if name not in states:
            hint = ""
            if any(s.split(".")[-1] == f"{name.split('.')[-1]}_shifted" for s in states):
                hint = (
                    f"; {name} is a shifted state (physical value = state + offset x "
                    "inputs): set the shifted state"
                )
            raise TuningError(
                "unknown_signal",
                f"initial value for {name!r}, which is not a state (states: "
                f"{', '.join(states)}){hint}",
                file=problem.file,
                location=("scenario", "initial_values", name),
            )
        rows.append((states.index(name), float(value)))
    return rows
