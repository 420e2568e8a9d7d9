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
(``Client.scatter(broadcast=True)``) and compiled there by one pinned task per worker
before the batches start (:func:`scatter_evaluator`), so the compile is start-up and every
batch finds it ready. Results are put back in batch order, so they do not depend on which
worker evaluated what. One batch of 500 samples is one task: measured per-sample CPU time
was about the same for batches of 100, 500 and 2500 (the per-row limit margins dominate),
and Dask's cost per task, a few milliseconds, is about 1 % of a 500-sample batch.
"""

from __future__ import annotations

import contextlib
import logging
import os
import signal
import threading
import time
import warnings
from collections import OrderedDict
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
#: tasks per worker on the cluster at once (see :func:`run_batches`)
TASKS_IN_FLIGHT = 2
#: log level of the cluster's own loggers: above CRITICAL, so that a cluster closing under
#: an interrupted run prints no traceback (errors of a batch reach the client as exceptions)
QUIET_LOGS = logging.CRITICAL + 10
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
def _children_ignore_interrupts(active: bool) -> Iterator[None]:
    """Start worker processes with SIGINT ignored (they inherit it), then restore ours.

    Ctrl-C at a terminal reaches every process of the foreground group: the workers would
    each die with a traceback of their own. With SIGINT ignored there, only this process
    sees it, cancels the batches and closes the cluster, which ends the workers. A Ctrl-C
    during the second or two the workers take to start is lost; the next one counts.
    """
    if not active or threading.current_thread() is not threading.main_thread():
        yield
        return
    previous = signal.signal(signal.SIGINT, signal.SIG_IGN)
    try:
        yield
    finally:
        signal.signal(signal.SIGINT, previous)


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
    with warnings.catch_warnings(), _children_ignore_interrupts(processes):
        # the scheduler's HTTP endpoint moves to a free port when another cluster on this
        # machine holds the default one; Dask says so in a warning the user need not see
        warnings.filterwarnings("ignore", message="Port .* is already in use")
        cluster = LocalCluster(
            n_workers=workers,
            threads_per_worker=1,
            processes=processes,
            dashboard_address=None,
            silence_logs=QUIET_LOGS,
            **extra,
        )
    with cluster, Client(cluster) as client:
        kind = "local-processes" if processes else "local-thread"
        yield (
            client,
            ClusterInfo(kind, cluster.scheduler_address, workers, time.perf_counter() - t0),
        )


#: this process's prepared evaluators by token, most recent last. A worker can hold more
#: than one deserialised copy of one scattered evaluator (a replica fetched from a peer,
#: data spilled to disk and read back), and each copy would build its compiled loop again;
#: tasks use the copy registered here, so the loop is built once per process.
_PREPARED: OrderedDict[str, MarginEvaluator] = OrderedDict()
#: evaluators kept per process (a long-lived cluster serves many runs)
KEEP_PREPARED = 4


def prepared(evaluator: MarginEvaluator) -> MarginEvaluator:
    """This process's prepared copy of ``evaluator`` (built on first use)."""
    mine = _PREPARED.get(evaluator.token)
    if mine is None:
        mine = _PREPARED[evaluator.token] = evaluator.prepare()
        while len(_PREPARED) > KEEP_PREPARED:
            _PREPARED.popitem(last=False)
    _PREPARED.move_to_end(evaluator.token)
    return mine


def local_compilations(evaluator: MarginEvaluator) -> int:
    """Times this process built the compiled loop of ``evaluator`` (0 when it has not)."""
    mine = _PREPARED.get(evaluator.token)
    return 0 if mine is None else mine.compilations


def _evaluate(evaluator: MarginEvaluator, batch: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    margins = prepared(evaluator).evaluate(batch)
    return margins.margin, margins.relative


def _prepare(evaluator: MarginEvaluator) -> float:
    t0 = time.perf_counter()
    prepared(evaluator)
    return time.perf_counter() - t0


def worker_addresses(client: Any) -> list[str]:
    """Addresses of the cluster's workers, sorted."""
    return sorted(client.scheduler_info().get("workers", {}))


def scatter_evaluator(client: Any, evaluator: MarginEvaluator) -> Any:
    """Send ``evaluator`` to every worker once and build its compiled function there.

    The evaluator is pickled once per worker (without its CasADi function); one pinned
    task per worker then compiles it, so that the batches find it ready and the compile is
    counted as start-up, not as evaluation. Workers that join later compile it on their
    first batch. Returns the handle that :func:`run_batches` takes.
    """
    handle = client.scatter(evaluator, broadcast=True, hash=False)
    warm = [
        client.submit(_prepare, handle, workers=[w], allow_other_workers=False, pure=False)
        for w in worker_addresses(client)
    ]
    client.gather(warm)
    return handle


def run_batches(
    client: Any,
    handle: Any,
    batches: Sequence[np.ndarray],
    *,
    progress: Progress = None,
    workers: list[str] | None = None,
) -> list[tuple[np.ndarray, np.ndarray]]:
    """``(margin, relative)`` of every batch, in batch order, one task per batch.

    At most :data:`TASKS_IN_FLIGHT` tasks per worker are on the cluster at once (one
    running, the next queued beside it), the next submitted as one finishes: the scheduler
    never holds a long queue, and an interrupted run (Ctrl-C) has only those few to
    cancel. ``workers`` restricts the tasks to those worker addresses (the benchmark's
    one-worker run on the same warm cluster); ``progress(rows_done, rows_total)`` is called
    after each batch.
    """
    from dask.distributed import as_completed

    total = sum(len(b) for b in batches)
    count = len(workers) if workers else len(worker_addresses(client))
    index: dict[str, int] = {}
    live: dict[str, Any] = {}
    results: list[Any] = [None] * len(batches)
    pending = iter(range(len(batches)))

    def submit() -> Any:
        i = next(pending, None)
        if i is None:
            return None
        future = client.submit(_evaluate, handle, batches[i], pure=False, workers=workers)
        index[future.key] = i
        live[future.key] = future
        return future

    started = [submit() for _ in range(TASKS_IN_FLIGHT * max(count, 1))]
    running = as_completed([f for f in started if f is not None])
    done = 0
    try:
        for future in running:
            i = index.pop(future.key)
            results[i] = future.result()
            del live[future.key]
            following = submit()
            if following is not None:
                running.add(following)
            done += len(batches[i])
            if progress is not None:
                progress(done, total)
    except BaseException:
        # Ctrl-C or a failed batch: drop what is still on the cluster before it closes
        client.cancel(list(live.values()))
        raise
    return results


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

    Returns
    -------
    Margins, ClusterInfo
        The margins in batch order; ``startup_s`` holds starting the cluster, sending the
        evaluator and compiling it on every worker, ``evaluation_s`` the batches alone.
    """
    total = sum(len(b) for b in batches)
    if workers is None:
        workers = default_workers(total, len(batches))
    if workers < 1:
        raise WirestateError(
            "out_of_range", f"at least one worker is needed, got {workers}", location=("workers",)
        )
    with connect(scheduler, workers) as (client, info):
        t0 = time.perf_counter()
        handle = scatter_evaluator(client, evaluator)
        info.startup_s += time.perf_counter() - t0
        t0 = time.perf_counter()
        results = run_batches(client, handle, batches, progress=progress)
        info.evaluation_s = time.perf_counter() - t0
    margin = np.vstack([r[0] for r in results])
    relative = np.vstack([r[1] for r in results])
    return Margins(margin, relative), info
