"""Compile time of uniform R-L-C ladders (10 to 2000 sections) and its scaling exponent.

Each size is compiled several times; the median is compared with an in-run yardstick of
the same size (one dense ``A @ A`` product of the compiled block's A, a machine-speed
reference), so the ratio means the same on a fast or a slow machine. The scaling exponent
is the least-squares slope of log(time) over log(sections) from 100 sections up.

Run: ``python benchmarks/bench_compile.py`` (prints JSON) or through ``make bench``.
"""

from __future__ import annotations

import json
import statistics
import time

import numpy as np

from wirestate.reduce import compile_circuit
from wirestate.spec.generate import ladder

SIZES = (10, 100, 1000, 2000)


def _median_time(fn, repeats: int, min_seconds: float = 20e-3) -> float:
    """Median time of one call; calls are grouped so each timing lasts >= ``min_seconds``
    (a 20x20 product takes microseconds, below what one timer reading resolves well)."""
    start = time.perf_counter()
    fn()
    single = max(time.perf_counter() - start, 1e-7)
    inner = max(1, int(min_seconds / single))
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        for _ in range(inner):
            fn()
        times.append((time.perf_counter() - start) / inner)
    return statistics.median(times)


def run() -> list[dict]:
    results = []
    medians = {}
    for sections in SIZES:
        spec = ladder(sections, resistance=0.05, inductance=1e-6, capacitance=1e-9)
        repeats = 15 if sections <= 100 else 3
        block = compile_circuit(spec)
        median = _median_time(lambda spec=spec: compile_circuit(spec), repeats)
        a = block.A
        reference = _median_time(lambda a=a: a @ a, repeats)
        medians[sections] = median
        results.append(
            {
                "name": f"compile_ladder_{sections}",
                "median_s": median,
                "reference_median_s": reference,
                "ratio": median / reference,
                "higher_is_better": False,
                "target": "1000 sections well under 1 s" if sections == 1000 else None,
                "meets_target": (median < 0.5) if sections == 1000 else None,
                "details": {
                    "sections": sections,
                    "states": block.n_states,
                    "reference": "dense A @ A of the compiled block (same run)",
                },
            }
        )
    xs = np.log([s for s in SIZES if s >= 100])
    ys = np.log([medians[s] for s in SIZES if s >= 100])
    slope = float(np.polyfit(xs, ys, 1)[0])
    results.append(
        {
            "name": "compile_ladder_scaling",
            "median_s": medians[SIZES[-1]],
            "reference_median_s": medians[100],
            "ratio": medians[SIZES[-1]] / medians[100],
            "higher_is_better": False,
            "target": "scaling exponent <= 2 (dense result of size n^2)",
            "meets_target": slope <= 2.0,
            "details": {"exponent": slope, "sections": list(SIZES)},
        }
    )
    return results


if __name__ == "__main__":
    print(json.dumps(run(), indent=2))
