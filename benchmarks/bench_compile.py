"""Compile time of uniform R-L-C ladders (20 to 8000 states) and its scaling exponent.

Each size is compiled several times (``compile_circuit`` from the validated model: graph
checks, stamping, elimination), interleaved with an in-run yardstick of the same size: one
sparse LU factorisation (SuperLU) of the ladder's own stamped equations, which grows about
linearly for a ladder. The ratio therefore means the same on a fast or a slow machine, and
a compile that grows faster than the equations it solves shows as a growing ratio. The
scaling exponent is the least-squares slope of log(time) over log(states) from 100 states
up; target: near-linear (<= 1.2).

Run: ``python benchmarks/bench_compile.py`` (prints JSON) or through ``make bench``. All
figures are warm (a first compile of each size is not timed).
"""

from __future__ import annotations

import json
import statistics
import time

from scaling import scaling_result
from wirestate.equations import assemble, nominal_values
from wirestate.reduce import _layout, _sparse, _triplets, compile_circuit
from wirestate.spec.generate import ladder
from wirestate.topology import analyse

#: ladder sections: 2 states each, 20 to 8000 states
SECTIONS = (10, 50, 100, 250, 500, 1000, 2000, 4000)


def _timed(fn, inner: int) -> float:
    start = time.perf_counter()
    for _ in range(inner):
        fn()
    return (time.perf_counter() - start) / inner


def _median_pair(fn, reference, repeats: int, min_seconds: float = 20e-3):
    """Medians of ``fn`` and ``reference`` over ``repeats`` interleaved timings; calls are
    grouped so each timing lasts at least ``min_seconds`` (timer resolution)."""
    inner = [max(1, int(min_seconds / max(_timed(f, 1), 1e-7))) for f in (fn, reference)]
    ours, ref = [], []
    for _ in range(repeats):
        ours.append(_timed(fn, inner[0]))
        ref.append(_timed(reference, inner[1]))
    return statistics.median(ours), statistics.median(ref)


def _stamped_matrix(spec):
    topology = analyse(spec)
    eq = assemble(topology, nominal_values(topology))
    w_t, _ = _triplets(eq.rows, _layout(eq))
    return _sparse(w_t, (len(eq.rows), eq.n_w))


def run() -> list[dict]:
    from scipy.sparse.linalg import splu

    results = []
    medians = {}
    for sections in SECTIONS:
        spec = ladder(sections, resistance=0.05, inductance=1e-6, capacitance=1e-9)
        block = compile_circuit(spec)  # warm-up, and the state count
        M = _stamped_matrix(spec)
        repeats = 9 if sections <= 500 else 3
        median, reference = _median_pair(
            lambda spec=spec: compile_circuit(spec),
            lambda M=M: splu(M, permc_spec="MMD_AT_PLUS_A"),
            repeats,
        )
        medians[block.n_states] = median
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
                    "sparse_A": block.sparse_A is not None,
                    "repeats_each": repeats,
                    "reference": "SuperLU factorisation of the ladder's stamped equations",
                },
            }
        )
    results.append(
        scaling_result("compile_ladder_scaling", {n: medians[n] for n in medians if n >= 100})
    )
    return results


if __name__ == "__main__":
    print(json.dumps(run(), indent=2))
