"""Benchmark: tolerance Monte Carlo of the bundled damping design (10 000 samples).

One run, on one warm local Dask cluster with one worker process per core:

* start-up, apart: starting the cluster, sending the evaluator to every worker and
  compiling it there (``details.startup``);
* ``yield_per_sample_one_core``: the 10 000 samples on one worker of that cluster (the
  tasks pinned to it; the other worker idles), seconds per sample, against the plain loop
  that calls the existing numeric verification once per sample
  (``MarginEvaluator.evaluate_plain``: ``Problem.numeric`` + ``limit_margins``, timed
  in this process on 200 samples). Target: at most 1 ms per sample; ``ratio`` = ours /
  plain;
* ``yield_speedup_all_cores``: the same samples on every worker; ``ratio`` = speed-up
  (one-worker time / all-worker time, higher is better), target 0.7 x cores.

Both evaluations see a warm cluster (steady state), are repeated ``REPEATS`` times
interleaved, and the medians are taken, so a change of machine load hits both alike. The
machine load is recorded: the load average, and for each timed run the CPU the rest of the
machine used (``/proc/stat`` busy time less this run's own CPU, in cores), because other
work on the cores lowers the speed-up. ``cpu_all_over_one_worker`` (CPU seconds of the
all-worker run over the one-worker run) shows what the parallel run itself costs extra,
whatever the load. Run: ``python benchmarks/bench_yield.py`` (prints
JSON; about 30 s on an idle 2-core machine).
"""

from __future__ import annotations

import json
import os
import statistics
import time
from pathlib import Path

import numpy as np

from wirestate.explore.cluster import (
    available_cores,
    connect,
    run_batches,
    scatter_evaluator,
    worker_addresses,
)
from wirestate.explore.evaluate import MarginEvaluator
from wirestate.explore.parts import toleranced_parts
from wirestate.explore.sampling import draw_chunks
from wirestate.tune import load_tuning
from wirestate.tune.problem import Problem

ROOT = Path(__file__).resolve().parents[1]
SAMPLES, PLAIN_SAMPLES = 10_000, 200
REPEATS = int(os.environ.get("WIRESTATE_BENCH_REPEATS", "3"))
TARGET_MS = 1.0


def _setup():
    model = Problem(load_tuning(ROOT / "models" / "tuning" / "drive_bus_damping.toml"))
    fixed = {"Rd": 0.22, "Cd": 240e-6}  # the golden file's preferred values
    tol = toleranced_parts(model, None)
    centre = {n: fixed.get(n, model.nominal[n]) for n in tol}
    ranges = {n: (centre[n] * (1 - t), centre[n] * (1 + t)) for n, t in tol.items()}
    evaluator = MarginEvaluator(model, list(tol), ranges, fixed=fixed)
    return evaluator, draw_chunks(centre, tol, list(tol), SAMPLES, "uniform", 1)


def _busy_seconds() -> float | None:
    """CPU seconds the whole machine has been busy (Linux ``/proc/stat``), else None."""
    try:
        fields = Path("/proc/stat").read_text().splitlines()[0].split()[1:]
    except OSError:
        return None
    ticks = [int(v) for v in fields]
    idle = ticks[3] + (ticks[4] if len(ticks) > 4 else 0)
    return (sum(ticks[:8]) - idle) / os.sysconf("SC_CLK_TCK")


def _our_cpu(client) -> float:
    # this process (client, scheduler) plus every worker process
    workers = client.run(time.process_time)
    return time.process_time() + sum(workers.values())


def _timed(client, handle, chunks, workers=None) -> dict:
    busy0, cpu0, t0 = _busy_seconds(), _our_cpu(client), time.perf_counter()
    results = run_batches(client, handle, chunks, workers=workers)
    wall = time.perf_counter() - t0
    busy1, cpu1 = _busy_seconds(), _our_cpu(client)
    ours = cpu1 - cpu0
    others = None if busy0 is None else max(0.0, (busy1 - busy0) - ours) / wall
    return {"wall_s": wall, "cpu_s": ours, "other_load_cores": others,
            "margin": np.vstack([r[0] for r in results])}  # fmt: skip


def run() -> list[dict]:
    load_before = os.getloadavg() if hasattr(os, "getloadavg") else None
    evaluator, chunks = _setup()
    rows = np.vstack(chunks)[:PLAIN_SAMPLES]
    t0 = time.perf_counter()
    evaluator.evaluate_plain(rows)
    plain = (time.perf_counter() - t0) / PLAIN_SAMPLES
    cores = available_cores()
    with connect(None, cores) as (client, info):
        t0 = time.perf_counter()
        handle = scatter_evaluator(client, evaluator)
        sent = time.perf_counter() - t0
        first = worker_addresses(client)[:1]
        one, many = [], []
        for _ in range(REPEATS):  # interleaved: a change of load hits both alike
            one.append(_timed(client, handle, chunks, workers=first))
            many.append(_timed(client, handle, chunks))
    for a, b in zip(one, many, strict=True):
        assert np.array_equal(a["margin"], b["margin"], equal_nan=True)
    t_one = statistics.median(r["wall_s"] for r in one)
    t_many = statistics.median(r["wall_s"] for r in many)
    per_sample = t_one / SAMPLES
    speedup = t_one / t_many
    load_after = os.getloadavg() if hasattr(os, "getloadavg") else None

    def runs(records):
        return [{k: v for k, v in r.items() if k != "margin"} for r in records]

    machine = {"cores": cores, "load_average_before": load_before,
               "load_average_after": load_after,
               "note": "other_load_cores: CPU the rest of the machine used during each timed "
                       "run, in cores; the speed-up needs idle cores"}  # fmt: skip
    startup = {"cluster_start_s": info.startup_s, "send_and_compile_s": sent,
               "workers": cores, "kind": info.kind}  # fmt: skip
    return [
        {
            "name": "yield_per_sample_one_core",
            "median_s": per_sample,
            "reference_median_s": plain,
            "ratio": per_sample / plain,
            "higher_is_better": False,
            "target": TARGET_MS * 1e-3 / plain,
            "meets_target": per_sample <= TARGET_MS * 1e-3,
            "details": {"per_sample_ms": per_sample * 1e3, "plain_per_sample_ms": plain * 1e3,
                        "cpu_per_sample_ms": statistics.median(r["cpu_s"] for r in one)
                        / SAMPLES * 1e3,
                        "samples": SAMPLES, "plain_samples": PLAIN_SAMPLES,
                        "throughput_samples_per_s": SAMPLES / t_one, "runs": runs(one),
                        "startup": startup, "machine": machine},
        },
        {
            "name": "yield_speedup_all_cores",
            "median_s": t_many,
            "reference_median_s": t_one,
            "ratio": speedup,
            "higher_is_better": True,
            "target": 0.7 * cores,
            "meets_target": speedup >= 0.7 * cores,
            "details": {"cores": cores, "samples": SAMPLES, "repeats": REPEATS,
                        "throughput_samples_per_s": SAMPLES / t_many,
                        "cpu_all_over_one_worker": statistics.median(r["cpu_s"] for r in many)
                        / statistics.median(r["cpu_s"] for r in one),
                        "one_worker_s": t_one, "all_workers_s": t_many,
                        "runs_one_worker": runs(one), "runs_all_workers": runs(many),
                        "startup": startup, "machine": machine},
        },
    ]  # fmt: skip


if __name__ == "__main__":
    print(json.dumps(run(), indent=2))
