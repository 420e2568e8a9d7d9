"""State-space averaging of a switched circuit driven by pwm gates.

Over one switching period the gates pass through a fixed sequence of combinations, the
combination ``j`` for a fraction ``d_j`` of the period. In continuous conduction each
combination fixes the diodes too, so the period is a sequence of modes ``j`` with
``dx/dt = A_j x + B_j u + f_j``. The averaged model (Middlebrook and Cuk, "A general
unified approach to modelling switching-converter power stages", IEEE PESC 1976) is

    dx/dt = (sum_j d_j A_j) x + (sum_j d_j B_j) u + sum_j d_j f_j,

with outputs averaged the same way. It follows the period average of the switched run
when the circuit's natural frequencies lie well below the switching frequency, and drops
the ripple. Each mode comes from :meth:`~wirestate.switching.SwitchedCircuit.mode` (the
one compile path). The diodes of each gate combination are found as the switched engine
finds them at an edge (consistent with their voltage), from the averaged state at every
output step; a diode that would turn off inside a combination (discontinuous
conduction) is not seen, so the model holds in continuous conduction only.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping
from pathlib import Path
from typing import Any

import numpy as np

from wirestate.errors import SimulationError
from wirestate.simulate.discretize import Discretization
from wirestate.simulate.inputs import InputSet, Waveform
from wirestate.simulate.pwm import PulseWidth
from wirestate.simulate.results import SimulationResult
from wirestate.simulate.switched import (
    SwitchedEngine,
    device_output_names,
    result_labels,
    run_setup,
    start_state,
)
from wirestate.switching import switched_circuit


def gate_fractions(
    waves: Mapping[str, Waveform], gates: list[str], t: float
) -> list[tuple[float, dict[str, float]]]:
    """The gate combinations over the switching period holding ``t``: ``(d_j, gates)``.

    pwm gates must share one frequency; other gate waveforms count as constant over the
    period (their value at ``t``).
    """
    pwm = {g: w for g, w in waves.items() if g in gates and isinstance(w, PulseWidth)}
    frequencies = sorted({w.frequency for w in pwm.values()})
    if len(frequencies) > 1 or not pwm:
        raise SimulationError(
            "invalid_input_signal",
            "an averaged run needs pwm gates of one frequency (got "
            f"{', '.join(f'{f:g} Hz' for f in frequencies) or 'no pwm gate'})",
            location=("inputs", gates[0] if gates else "gate"),
        )
    period = 1.0 / frequencies[0]
    tiny = 1e-9 * period  # edges closer than this are one (round-off of k T sums)
    start = math.floor(t / period + 1e-9) * period
    cuts = [start]
    edges = sorted(e for w in pwm.values() for e in w.edges(start, start + period))
    for e in [*edges, start + period]:
        if e - cuts[-1] > tiny:
            cuts.append(e)
    cuts[-1] = start + period
    out = []
    for a, b in zip(cuts, cuts[1:], strict=False):
        mid = 0.5 * (a + b)
        values = {g: (w.value_at(mid) if g in pwm else float(w.values(np.array([t]))[0]))
                  for g, w in waves.items() if g in gates}  # fmt: skip
        same = [j for j, (_, seen) in enumerate(out) if seen == values]
        if same:  # the same gates twice in a period (a triangle carrier): one combination
            out[same[0]] = (out[same[0]][0] + (b - a) / period, values)
        else:
            out.append(((b - a) / period, values))
    return out


class AveragedModel:
    """Averaged matrices of a switched circuit at given gate fractions, per diode pattern.

    :meth:`at` gives ``(A, [B f], C, [D g], P, [Q p], conduction)`` for inputs ``u`` (gates
    replaced by each combination) and the averaged state ``x``.
    """

    def __init__(self, circuit: Any) -> None:
        self.circuit = circuit
        self.engine = SwitchedEngine(circuit)
        self._cache: dict[tuple, tuple] = {}

    def at(self, x: np.ndarray, u: np.ndarray, combinations: list[tuple[float, dict]]) -> tuple:
        c = self.circuit
        e = self.engine
        key_parts = []
        for fraction, gates in combinations:
            v = u.copy()
            for g, value in gates.items():
                v[c.inputs.index(g)] = value
            e.x = np.array(x, dtype=float)
            e.time, e._instant = 0.0, (-math.inf, 0, [])
            try:
                e.apply(v, record=False)
            except SimulationError as exc:
                if exc.code != "switching_chatter":
                    raise
                # a diode held exactly at its threshold with no current (a converter at
                # rest): it carries nothing either way, so it counts as off until the
                # averaged state moves away from the threshold
                e.on[c.device_index(exc.location[1])] = False
            key_parts.append((round(fraction, 12), tuple(e.on)))
        key = tuple(key_parts)
        self.last_pattern = tuple(on for _, on in key)
        found = self._cache.get(key)
        if found is None:
            mats = [e.data(on).mode for _, on in key]
            weights = [fraction for fraction, _ in key]

            def mean(get):
                return sum(w * get(m) for w, m in zip(weights, mats, strict=True))

            conduction = mean(lambda m: np.array(m.on, dtype=float))
            found = (
                mean(lambda m: m.A),
                mean(lambda m: np.hstack([m.B, m.f[:, None]])),
                mean(lambda m: m.C),
                mean(lambda m: np.hstack([m.D, m.g[:, None]])),
                mean(lambda m: m.P),
                mean(lambda m: np.hstack([m.Q, m.p[:, None]])),
                conduction,
                mats[0].state_offset,
            )
            self._cache[key] = found
        return found


def _refuse_capacitor_across_a_device(circuit: Any) -> None:
    """Averaging holds when every state changes little over a period. A capacitor
    directly across a switch or diode (its output or junction capacitance) swings by the
    full blocking voltage every period; its averaged voltage then keeps the freewheeling
    diode reverse-biased in the average, and the averaged run misses the conversion
    entirely (models/aux_buck.toml at duty 0.25: 47 V for the switched run's 11.5 V)."""
    parts = circuit.spec.parts
    for device in circuit.devices:
        across = {frozenset(parts[device.name].nodes)}
        for name, part in parts.items():
            if part.kind == "capacitor" and frozenset(part.nodes) in across:
                raise SimulationError(
                    "invalid_field",
                    f"{circuit.name}: capacitor {name} sits across {device.kind} "
                    f"{device.name} and swings with it every period, where the state-space "
                    "average assumes states that change little over a period; simulate it "
                    "switched (without averaged), or leave the capacitor out of an averaged "
                    "study",
                    location=("parts", name),
                )


def simulate_averaged(
    model: Any,
    until: float,
    step: float,
    inputs: Mapping[str, str | float | Waveform] | InputSet | None = None,
    *,
    use_defaults: bool = True,
    base: Path | None = None,
    x0: np.ndarray | None = None,
    progress: Callable[[float], None] | None = None,
) -> SimulationResult:
    """Simulate the state-space average of a switched circuit with pwm gates.

    Same inputs and outputs as :func:`~wirestate.simulate.switched.simulate_switched`;
    the ``on_<part>`` outputs become conduction fractions. The averaged model is advanced
    by the exact zero-order hold of its matrices over each output step (Van Loan 1978),
    re-averaged at every step (the inputs, and in principle the diode pattern, may
    change). Valid in continuous conduction; the ripple is not modelled.
    """
    circuit = switched_circuit(model)
    if circuit is None:
        raise SimulationError("invalid_field", "the model has no switches or diodes")
    _refuse_capacitor_across_a_device(circuit)
    x0 = start_state(model, circuit, x0)
    grid, input_set, _ = run_setup(circuit, until, step, inputs, use_defaults, base)
    gates = sorted({d.gate for d in circuit.devices if d.gate is not None})
    U = input_set.matrix(circuit.inputs, grid)
    averaged = AveragedModel(circuit)
    x = np.array(circuit.x0 if x0 is None else x0, dtype=float)
    extra = device_output_names(circuit)
    X = np.zeros((len(x), len(grid)))
    Y = np.zeros((len(circuit.outputs) + len(extra), len(grid)))
    discretizations: dict[int, Discretization] = {}
    patterns: list[tuple[float, tuple]] = []  # (time, diodes of each combination) changes
    for k, t in enumerate(grid):
        u = U[:, k]
        combos = gate_fractions(input_set.waveforms, gates, float(t))
        A, Bf, C, Dg, P, Qp, conduction, offset = averaged.at(x, u, combos)
        pattern = averaged.last_pattern
        if not patterns or patterns[-1][1] != pattern:
            patterns.append((float(t), pattern))
        ua = np.append(u, 1.0)
        rows = P @ x + Qp @ ua
        values = [rows[i] if what == "row" else conduction[i] for _, what, i in extra]
        Y[:, k] = np.concatenate([C @ x + Dg @ ua, values])
        X[:, k] = x + offset @ u
        if k + 1 < len(grid):
            key = id(A)
            disc = discretizations.get(key)
            if disc is None:
                disc = discretizations[key] = Discretization(A, Bf)
            Ad, Bd = disc.zoh(step)
            x = Ad @ x + Bd @ ua
        if progress is not None and k % max(1, len(grid) // 20) == 0:
            progress(k / max(1, len(grid) - 1))
    names, units, states = result_labels(circuit, extra)
    return SimulationResult(
        name=circuit.name,
        time=grid,
        output_names=names,
        outputs=Y,
        state_names=states,
        states=X,
        input_names=list(circuit.inputs),
        inputs=U,
        units=units,
        method=(
            "state-space average (Middlebrook and Cuk 1976), exact ZOH per output step; "
            "ripple not modelled, continuous conduction assumed"
            + (
                "; the conduction pattern changed at t = "
                + ", ".join(f"{t:.6g} s" for t, _ in patterns[1:6])
                + (" ..." if len(patterns) > 6 else "")
                + " (discontinuous conduction or a start from rest: the average does not "
                "hold there)"
                if len(patterns) > 1
                else ""
            )
        ),
    )
