"""Evaluating batches of part values on Dask (``dask.distributed``).

By default an in-process local cluster is started for the run and closed after it:

* one worker: a single worker thread inside this process (no process to spawn, no copy of
  the model to send), the cheapest start for small runs;
* more workers: one worker process per worker, one thread each (the margins are Python
  and numpy work that threads would serialise on the interpreter lock); each process
  takes about a second to start and import the numerical libraries, so a run is given
  several workers only when it is long enough to pay for them (:func:`default_workers`).

With ``scheduler`` an existing cluster is used instead (``tcp://host:8786``); its workers
need the same wirestate installed. The evaluator is sent to every worker once
(``Client.scatter(broadcast=True)``); each worker builds its compiled function on its first
batch and keeps it for the others. Results are put back in batch order, so they do not
depend on which worker evaluated what.
"""

from __future__ import annotations

import contextlib
import logging
import os
import time
from collections.abc import Callable, Iterator, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from wirestate.errors import WirestateError
from wirestate.explore.evaluate import MarginEvaluator, Margins

#: seconds to wait for an existing scheduler to answer
CONNECT_TIMEOUT_S = 5.0
#: runs with fewer samples than this use one in-process worker unless told otherwise:
#: below it, starting worker processes (about 1 s each) costs more than it saves
SMALL_RUN = 3000
#: BLAS threads per worker process: one, so that worker processes do not oversubscribe cores
_WORKER_ENV = {"OMP_NUM_THREADS": "1", "OPENBLAS_NUM_THREADS": "1", "MKL_NUM_THREADS": "1"}

Progress = Callable[[int, int], None] | None


@dataclass
class ClusterInfo:
    """Where a run was evaluated: ``kind`` (``local-thread``, ``local-processes`` or
    ``existing``), the scheduler address, the number of workers, and the seconds spent
    starting the cluster and evaluating."""

    kind: str
    address: str
    workers: int
    startup_s: float = 0.0
    evaluation_s: float = 0.0

    def to_dict(self) -> dict[str, Any]:
        return dict(self.__dict__)


def available_cores() -> int:
    """Cores this process may run on."""
    if hasattr(os, "sched_getaffinity"):
        return max(1, len(os.sched_getaffinity(0)))
    return max(1, os.cpu_count() or 1)


def default_workers(samples: int, batches: int) -> int:
    """One worker for small runs (see :data:`SMALL_RUN`), else one per core (at most one
    per batch)."""
    if samples < SMALL_RUN:
        return 1
    return max(1, min(available_cores(), batches))


@contextlib.contextmanager
def connect(scheduler: str | None, workers: int) -> Iterator[tuple[Any, ClusterInfo]]:
    """A Dask client: to ``scheduler`` if given, else to a local cluster of ``workers``."""
    from dask.distributed import Client, LocalCluster

    t0 = time.perf_counter()
    if scheduler:
        try:
            client = Client(scheduler, timeout=CONNECT_TIMEOUT_S)
        except (OSError, TimeoutError, ValueError, TypeError) as exc:
            reason = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
            raise WirestateError(
                "scheduler_unreachable",
                f"no Dask scheduler answers at {scheduler!r} within {CONNECT_TIMEOUT_S:g} s "
                f"({reason})",
                location=("scheduler",),
            ) from None
        with client:
            count = len(client.scheduler_info().get("workers", {}))
            yield client, ClusterInfo("existing", scheduler, count, time.perf_counter() - t0)
        return
    processes = workers > 1
    extra = {"env": dict(_WORKER_ENV)} if processes else {}
    with (
        LocalCluster(
            n_workers=workers,
            threads_per_worker=1,
            processes=processes,
            dashboard_address=None,
            silence_logs=logging.ERROR,
            **extra,
        ) as cluster,
        Client(cluster) as client,
    ):
        kind = "local-processes" if processes else "local-thread"
        yield (
            client,
            ClusterInfo(kind, cluster.scheduler_address, workers, time.perf_counter() - t0),
        )


def _evaluate(evaluator: MarginEvaluator, batch: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    margins = evaluator.evaluate(batch)
    return margins.margin, margins.relative


def evaluate_batches(
    evaluator: MarginEvaluator,
    batches: Sequence[np.ndarray],
    *,
    scheduler: str | None = None,
    workers: int | None = None,
    progress: Progress = None,
) -> tuple[Margins, ClusterInfo]:
    """Margins of every row of every batch, in order, evaluated on Dask.

    Parameters
    ----------
    evaluator
        The margins of one batch (:class:`~wirestate.explore.evaluate.MarginEvaluator`).
    batches
        Part values, one array (rows x parts) per task.
    scheduler
        Address of an existing Dask scheduler; default: a local cluster for this run.
    workers
        Workers of the local cluster (default :func:`default_workers`).
    progress
        Called as ``progress(rows_done, rows_total)`` after each batch.
    """
    total = sum(len(b) for b in batches)
    if workers is None:
        workers = default_workers(total, len(batches))
    if workers < 1:
        raise WirestateError(
            "out_of_range", f"at least one worker is needed, got {workers}", location=("workers",)
        )
    from dask.distributed import as_completed

    with connect(scheduler, workers) as (client, info):
        t0 = time.perf_counter()
        handle = client.scatter(evaluator, broadcast=True, hash=False)
        # sending the evaluator imports the numerical libraries in each worker: start-up
        info.startup_s += time.perf_counter() - t0
        t0 = time.perf_counter()
        futures = [client.submit(_evaluate, handle, b, pure=False) for b in batches]
        index = {f.key: i for i, f in enumerate(futures)}
        results: list[Any] = [None] * len(batches)
        done = 0
        for future in as_completed(futures):
            i = index[future.key]
            results[i] = future.result()
            done += len(batches[i])
            if progress is not None:
                progress(done, total)
        info.evaluation_s = time.perf_counter() - t0
    margin = np.vstack([r[0] for r in results])
    relative = np.vstack([r[1] for r in results])
    return Margins(margin, relative), info
