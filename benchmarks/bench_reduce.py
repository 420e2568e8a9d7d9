"""Balanced reduction of a 2000-state cable ladder, and what the reduced block saves.

1. ``reduce_2000_states_to_1e-3``: ``reduce_block(error=1e-3)`` on a 1000-section ladder
   (2000 states, low-rank ADI Gramians). Reference in the same run: the dense path
   (Bartels-Stewart Gramians) timed at 400 states and extrapolated to 2000 by its O(n^3)
   cost (factor 125; the exponent measured between 200 and 400 states is reported too, but
   two short timings on a shared machine make it swing between 2 and 2.7); the dense path
   at 2000 states itself would take minutes per run. Target: at most 5 s.
2. ``reduced_block_system_run``: a system of the ladder and a sensor filter simulated by
   exact ZOH, once with the full block and once with the reduced one. Ratio = reduced /
   full run time (the speed-up is its inverse).

The ladder is a well-damped thin-conductor signal cable (invented scenario: 1 km, 2 ohm/m,
0.1 uH/m, 100 pF/m), as in the tests. Lightly damped ladders have Gramians of high rank
and need ``--gramians dense`` (see README).

Run: ``python benchmarks/bench_reduce.py`` (prints JSON) or through ``make bench``.
"""

from __future__ import annotations

import json
import math
import statistics
import time

from wirestate.balanced import reduce_block
from wirestate.blocks import sensor_filter
from wirestate.compose import compose
from wirestate.reduce import compile_circuit
from wirestate.simulate import simulate
from wirestate.simulate.inputs import Step
from wirestate.spec.generate import ladder

SECTIONS = 1000
DENSE_SECTIONS = (100, 200)
TARGET_S = 5.0
ERROR = 1e-3


def signal_cable(sections: int):
    return compile_circuit(
        ladder(sections, resistance=2000 / sections, inductance=1e-4 / sections,
               capacitance=1e-7 / sections)
    )  # fmt: skip


def _median(fn, repeats: int) -> tuple[float, object]:
    times, value = [], None
    for _ in range(repeats):
        start = time.perf_counter()
        value = fn()
        times.append(time.perf_counter() - start)
    return statistics.median(times), value


def _system(block):
    probe = sensor_filter("probe", 1e-6, 1.0, "V")
    return compose(
        [block, probe],
        {"probe.signal": f"{block.name}.v_end"},
        {"Vs": f"{block.name}.Vs"},
        {"v_end_measured": "probe.measured", "i_in": f"{block.name}.i_in"},
        name="cable_probe",
    )


def run() -> list[dict]:
    block = signal_cable(SECTIONS)
    reduce_block(signal_cable(20), error=ERROR)  # imports and first-call costs out of the timing
    median, result = _median(lambda: reduce_block(block, error=ERROR), 3)
    dense = {}
    for sections in DENSE_SECTIONS:
        small = signal_cable(sections)
        dense[2 * sections], _ = _median(
            lambda small=small: reduce_block(small, error=ERROR, gramians="dense"), 3
        )
    (n1, t1), (n2, t2) = sorted(dense.items())
    exponent = math.log(t2 / t1) / math.log(n2 / n1)
    # Bartels-Stewart: Schur form and triangular solves, O(n^3) (Golub and Van Loan,
    # Matrix Computations, 4th ed., sec. 7.6.3)
    extrapolated = t2 * (block.n_states / n2) ** 3
    results = [
        {
            "name": "reduce_2000_states_to_1e-3",
            "median_s": median,
            "reference_median_s": extrapolated,
            "ratio": median / extrapolated,
            "higher_is_better": False,
            "target": f"<= {TARGET_S} s",
            "meets_target": median <= TARGET_S,
            "details": {
                "states": block.n_states,
                "reduced_order": result.block.n_states,
                "relative_error_bound": result.relative_error_bound,
                "hankel_values_computed": int(result.hankel_singular_values.size),
                "gramians": result.gramians,
                "dense_seconds_by_states": {str(k): v for k, v in dense.items()},
                "dense_exponent_measured": exponent,
                "reference": f"dense path timed at {n2} states in the same run, "
                f"extrapolated to {block.n_states} as n^3",
            },
        }
    ]
    until, step = 200e-6, 0.1e-6  # 2000 steps
    drive = {"Vs": Step(final=1.0)}
    full_system, small_system = _system(block), _system(result.block)
    full_s, _ = _median(lambda: simulate(full_system, until, step, drive, use_defaults=False), 1)
    small_s, _ = _median(lambda: simulate(small_system, until, step, drive, use_defaults=False), 3)
    results.append(
        {
            "name": "reduced_block_system_run",
            "median_s": small_s,
            "reference_median_s": full_s,
            "ratio": small_s / full_s,
            "higher_is_better": False,
            "target": None,
            "meets_target": None,
            "details": {
                "speed_up": full_s / small_s,
                "steps": round(until / step),
                "states_full": len(full_system.states),
                "states_reduced": len(small_system.states),
                "reference": "the same system with the full 2000-state block (same run)",
            },
        }
    )
    return results


if __name__ == "__main__":
    print(json.dumps(run(), indent=2))
