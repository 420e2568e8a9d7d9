"""Benchmark: tolerance Monte Carlo of the bundled damping design (10 000 samples).

Three figures from one run:

* ``yield_per_sample_one_core``: seconds per sample of the batched evaluator
  (:class:`wirestate.explore.MarginEvaluator`: loop matrices compiled once, batches of 500)
  on one core, against the plain loop that calls the existing numeric verification once
  per sample (``Problem.numeric`` + ``limit_margins``; timed on 300 samples). Target:
  at most 1 ms per sample (``details.per_sample_ms``); ``ratio`` is ours / plain.
* ``yield_speedup_all_cores``: the 10 000 samples through ``evaluate_batches`` on one
  worker and on one worker process per core, evaluation time only (the cluster's start-up
  is in ``details``). ``ratio`` = speed-up (higher is better), target 0.7 x cores.

Run: ``python benchmarks/bench_yield.py`` (prints JSON). The machine is shared: figures
move with the load; the speed-up is measured in one run so both sides see the same load.
"""

from __future__ import annotations

import json
import time
from pathlib import Path

import numpy as np

from wirestate.explore.cluster import available_cores, evaluate_batches
from wirestate.explore.evaluate import MarginEvaluator
from wirestate.explore.parts import toleranced_parts
from wirestate.explore.sampling import draw_chunks
from wirestate.tune import load_tuning
from wirestate.tune.problem import Problem

ROOT = Path(__file__).resolve().parents[1]
SAMPLES, PLAIN_SAMPLES = 10_000, 300
TARGET_MS = 1.0


def _setup():
    model = Problem(load_tuning(ROOT / "models" / "tuning" / "drive_bus_damping.toml"))
    fixed = {"Rd": 0.22, "Cd": 240e-6}  # the golden file's preferred values
    tol = toleranced_parts(model, None)
    centre = {n: fixed.get(n, model.nominal[n]) for n in tol}
    ranges = {n: (centre[n] * (1 - t), centre[n] * (1 + t)) for n, t in tol.items()}
    evaluator = MarginEvaluator(model, list(tol), ranges, fixed=fixed)
    return evaluator, draw_chunks(centre, tol, list(tol), SAMPLES, "uniform", 1)


def run() -> list[dict]:
    evaluator, chunks = _setup()
    evaluator.evaluate(chunks[0][:5])  # compile once, as each worker does
    t0 = time.perf_counter()
    for chunk in chunks:
        evaluator.evaluate(chunk)
    ours = (time.perf_counter() - t0) / SAMPLES
    t0 = time.perf_counter()
    evaluator.evaluate_plain(np.vstack(chunks)[:PLAIN_SAMPLES])
    plain = (time.perf_counter() - t0) / PLAIN_SAMPLES
    cores = available_cores()
    one, info_one = evaluate_batches(evaluator, chunks, workers=1)
    many, info_many = evaluate_batches(evaluator, chunks, workers=cores)
    assert np.array_equal(one.margin, many.margin, equal_nan=True)
    speedup = info_one.evaluation_s / info_many.evaluation_s
    return [
        {
            "name": "yield_per_sample_one_core",
            "median_s": ours,
            "reference_median_s": plain,
            "ratio": ours / plain,
            "higher_is_better": False,
            "target": TARGET_MS * 1e-3 / plain,
            "meets_target": ours <= TARGET_MS * 1e-3,
            "details": {"per_sample_ms": ours * 1e3, "plain_per_sample_ms": plain * 1e3,
                        "samples": SAMPLES, "plain_samples": PLAIN_SAMPLES},
        },
        {
            "name": "yield_speedup_all_cores",
            "median_s": info_many.evaluation_s,
            "reference_median_s": info_one.evaluation_s,
            "ratio": speedup,
            "higher_is_better": True,
            "target": 0.7 * cores,
            "meets_target": speedup >= 0.7 * cores,
            "details": {"cores": cores, "one_worker": info_one.to_dict(),
                        "all_cores": info_many.to_dict(), "samples": SAMPLES},
        },
    ]  # fmt: skip


if __name__ == "__main__":
    print(json.dumps(run(), indent=2))
