"""Real dask.distributed clusters: the same results for any number of workers, and an
existing cluster reached through its scheduler address (API and --scheduler)."""

from __future__ import annotations

import json

import numpy as np

from wirestate.cli import main
from wirestate.explore import tolerance_yield
from wirestate.tune import load_tuning


def test_one_and_four_workers_give_identical_results(rc_spread):
    spec = load_tuning(rc_spread)
    # 2000 samples = 4 chunks of 500, so every one of the 4 worker processes gets work
    one = tolerance_yield(spec, samples=2000, seed=11, workers=1)
    four = tolerance_yield(spec, samples=2000, seed=11, workers=4)
    assert one.cluster.kind == "local-thread" and four.cluster.kind == "local-processes"
    assert four.cluster.workers == 4
    np.testing.assert_array_equal(one.values, four.values)
    np.testing.assert_array_equal(one.margins, four.margins)
    assert one.to_dict()["interval"] == four.to_dict()["interval"]


def test_existing_cluster_through_its_address(rc_spread, dask_cluster, tmp_path, capsys):
    spec = load_tuning(rc_spread)
    address = dask_cluster.scheduler_address
    local = tolerance_yield(spec, samples=1500, seed=2, workers=1)
    remote = tolerance_yield(spec, samples=1500, seed=2, scheduler=address)
    assert remote.cluster.kind == "existing" and remote.cluster.workers == 2
    np.testing.assert_array_equal(local.margins, remote.margins)
    report = tmp_path / "yield.json"
    code = main(["yield", str(rc_spread), "--samples", "1500", "--seed", "2",
                 "--scheduler", address, "--json", str(report), "--quiet"])  # fmt: skip
    assert code == 0
    data = json.loads(report.read_text())
    assert data["yield"] == local.yield_fraction and data["cluster"]["kind"] == "existing"
    assert "Wilson score interval" in capsys.readouterr().out


def _compilations(evaluator) -> int:
    from wirestate.explore.cluster import local_compilations

    return local_compilations(evaluator)


def test_each_worker_compiles_the_model_once_for_every_batch(rc_spread, dask_cluster):
    # the loop matrices are compiled once per worker process, at start-up, and every batch
    # re-evaluates that function for new part values (no compile per batch or sample)
    from dask.distributed import Client

    from wirestate.explore import MarginEvaluator
    from wirestate.explore.cluster import run_batches, scatter_evaluator, worker_addresses
    from wirestate.tune.model import TuningModel

    model = TuningModel(load_tuning(rc_spread))
    evaluator = MarginEvaluator(
        model, ["R1", "C1"], {"R1": (800.0, 1200.0), "C1": (0.8e-6, 1.2e-6)}
    )
    batches = [np.array([[1e3, 1e-6]] * 50) * (1 + 0.01 * k) for k in range(12)]
    with Client(dask_cluster.scheduler_address) as client:
        # under load a worker process can register late; the count below needs both
        client.wait_for_workers(2, timeout=60)
        handle = scatter_evaluator(client, evaluator)
        workers = worker_addresses(client)
        before = [client.submit(_compilations, handle, workers=[w], pure=False).result()
                  for w in workers]  # fmt: skip
        results = run_batches(client, handle, batches)
        after = [client.submit(_compilations, handle, workers=[w], pure=False).result()
                 for w in workers]  # fmt: skip
    assert before == after == [1] * len(workers) == [1, 1]
    assert evaluator.compilations == 0  # the caller's copy was never compiled
    np.testing.assert_array_equal(np.vstack([r[0] for r in results]),
                                  evaluator.evaluate(np.vstack(batches)).margin)  # fmt: skip
