"""Running unit jobs on Dask: an embedded local cluster or the user's ``distributed`` scheduler.

The engine is the ``dask`` / ``distributed`` pair (an optional extra,
``pip install 'rigfit[fleet]'``); nothing here schedules work itself. By default
:func:`open_client` starts a :class:`distributed.LocalCluster` of worker processes
(one per core, one thread each; see :data:`WORKER_ENVIRONMENT` for their memory
allocator; what their compiled libraries print goes to standard error) and shuts
it down at the end; with a scheduler address it connects to a running cluster
instead, whose workers must have the same rigfit version installed and see the
log paths the driver gives them.

:func:`run_jobs` sends the units in small batches (one task computes a few units,
so the engine's fixed cost per task is shared; about 16 tasks per worker thread keep
the load balanced), keeps a bounded number of tasks in flight (a few per worker
thread) and hands every finished unit to a callback as soon as its task returns, so
the driver holds only what the callback keeps, whatever the number of units. A task
the engine itself loses (a worker that died, a cancelled task) makes its units failed.
"""

from __future__ import annotations

import contextlib
import logging
import os
import time
from collections.abc import Callable, Iterator, Sequence
from typing import Any

from .._version import __version__
from ..errors import IdentError
from ..io.pipelinefile import PipelineSpec
from .units import UnitJob, UnitOutcome, UnitRecord, evaluate_unit, file_sha256

__all__ = ["INSTALL_HINT", "require_dask", "open_client", "batch_size", "evaluate_units", "run_jobs",
           "worker_version", "WORKER_ENVIRONMENT"]

#: The engine's worker-environment defaults rigfit replaces (``None`` unsets one): the
#: engine sets ``MALLOC_TRIM_THRESHOLD_`` so that workers hand memory back to the
#: system promptly, which makes the many short-lived arrays of a fit cost allocator
#: calls (a unit took 13-30 % longer in a plain loop with it set). A unit's memory is
#: small and released when the unit ends. A variable already set in the driver's
#: environment wins, as for every such setting of the engine.
WORKER_ENVIRONMENT: dict[str, str | None] = {"MALLOC_TRIM_THRESHOLD_": None}


#: How to install the engine.
INSTALL_HINT = "pip install 'rigfit[fleet]'  (or: pip install dask distributed)"
#: Tasks kept in flight per worker thread.
JOBS_PER_THREAD = 3
#: Aim for about this many tasks per worker thread over a run ...
BATCHES_PER_THREAD = 16
#: ... with at most this many units in one task.
MAX_BATCH = 8
#: Seconds to wait for a scheduler to answer.
CONNECT_TIMEOUT_S = 15


def require_dask() -> Any:
    """Import :mod:`distributed`, or raise a one-line error naming the extra to install."""
    try:
        import dask  # noqa: F401
        import distributed
    except ImportError as exc:
        raise IdentError(
            f"rigfit fleet runs on Dask, and the {exc.name or 'dask'} package is not installed",
            hint=f"install the fleet extra: {INSTALL_HINT}",
        ) from exc
    return distributed


def worker_version() -> str:
    """Return the rigfit version a worker runs (called on every worker before work is sent)."""
    return __version__


@contextlib.contextmanager
def open_client(scheduler: str | None = None, workers: int | None = None) -> Iterator[Any]:
    """Yield a :class:`distributed.Client` on an embedded local cluster or on ``scheduler``.

    Parameters
    ----------
    scheduler : str, optional
        Address of a running scheduler (``tcp://host:8786``). Default: start a
        local cluster and close it on exit.
    workers : int, optional
        Worker processes of the local cluster (default: one per core).

    Raises
    ------
    IdentError
        Dask is not installed, the scheduler cannot be reached, or its workers
        run another rigfit version (or none).
    """
    distributed = require_dask()
    if scheduler is not None:
        try:
            client = distributed.Client(scheduler, timeout=CONNECT_TIMEOUT_S)
        except (OSError, TimeoutError, ValueError) as exc:
            raise IdentError(f"cannot reach the Dask scheduler at {scheduler} ({exc})",
                             hint="start it with 'dask scheduler' and its workers with 'dask worker ADDRESS'") from exc
        with client:
            _check_workers(client, scheduler)
            yield client
        return
    import dask

    from .worker_plugin import NativeOutputToStderr

    n = workers if workers is not None else (os.cpu_count() or 1)
    with dask.config.set({f"distributed.nanny.pre-spawn-environ.{k}": v for k, v in WORKER_ENVIRONMENT.items()}):
        cluster = distributed.LocalCluster(
            n_workers=n, threads_per_worker=1, processes=True, dashboard_address=":0",
            silence_logs=logging.ERROR,
        )
    with cluster, distributed.Client(cluster) as client:
        client.register_plugin(NativeOutputToStderr())
        yield client


def _check_workers(client: Any, scheduler: str) -> None:
    try:
        client.wait_for_workers(1, timeout=CONNECT_TIMEOUT_S)
    except TimeoutError as exc:
        raise IdentError(f"the Dask scheduler at {scheduler} has no workers",
                         hint="start workers with 'dask worker ADDRESS'") from exc
    try:
        versions = client.run(worker_version)
    except Exception as exc:  # the workers cannot import rigfit: any error type is possible
        raise IdentError(f"the workers of {scheduler} cannot run rigfit ({type(exc).__name__}: {exc})",
                         hint="install the same rigfit version on every worker") from exc
    other = sorted({v for v in versions.values() if v != __version__})
    if other:
        raise IdentError(f"the workers of {scheduler} run rigfit {', '.join(other)}, this is {__version__}",
                         hint="install the same rigfit version on every worker")


def _lost(job: UnitJob, digest: str, exc: BaseException) -> UnitOutcome:
    """Record a job the engine lost as a failed unit with the engine's message."""
    return UnitOutcome(UnitRecord(
        unit=job.unit, log_path=job.log_path, folder=job.folder, log_sha256=file_sha256(job.log_path),
        settings_hash=digest, status="failed", error=f"engine error: {type(exc).__name__}: {exc}",
    ))


def batch_size(n_jobs: int, threads: int) -> int:
    """Units per task: enough to make the engine's per-task cost small, few enough to balance the load.

    About ``BATCHES_PER_THREAD`` tasks per worker thread, at most ``MAX_BATCH`` units each.
    """
    return max(1, min(MAX_BATCH, n_jobs // (BATCHES_PER_THREAD * max(1, threads))))


def evaluate_units(spec: PipelineSpec, jobs: list[UnitJob], digest: str) -> list[UnitOutcome]:
    """Compute a batch of units in one task (each as :func:`ident.fleet.units.evaluate_unit`)."""
    return [evaluate_unit(spec, job, digest) for job in jobs]


def run_jobs(
    client: Any,
    spec: PipelineSpec,
    jobs: Sequence[UnitJob],
    digest: str,
    on_outcome: Callable[[UnitOutcome], None],
) -> float:
    """Compute every job on the cluster, handing each outcome to ``on_outcome`` as it arrives.

    Parameters
    ----------
    client : distributed.Client
    spec : PipelineSpec
        The fleet's pipeline, sent to every worker once.
    jobs : sequence of UnitJob
        Sent in batches of :func:`batch_size` units per task; at most
        ``JOBS_PER_THREAD`` tasks per worker thread are in flight.
    digest : str
        The settings hash recorded with every result.
    on_outcome : callable
        Called in the driver with each :class:`UnitOutcome`, in completion order.

    Returns
    -------
    float
        Seconds from the first submission to the last outcome.
    """
    from distributed import as_completed

    start = time.perf_counter()
    threads = max(1, sum(client.nthreads().values()))
    size = batch_size(len(jobs), threads)
    batches = iter([list(jobs[k:k + size]) for k in range(0, len(jobs), size)])
    spec_future = client.scatter(spec, broadcast=True)
    by_key: dict[str, list[UnitJob]] = {}

    def submit() -> Any:
        batch = next(batches, None)
        if batch is None:
            return None
        future = client.submit(evaluate_units, spec_future, batch, digest, pure=False,
                               key=f"rigfit-units-{batch[0].folder}-{time.monotonic_ns()}")
        by_key[future.key] = batch
        return future

    first = [f for f in (submit() for _ in range(JOBS_PER_THREAD * threads)) if f is not None]
    queue = as_completed(first)
    for future in queue:
        batch = by_key.pop(future.key)
        try:
            outcomes = future.result()
        except Exception as exc:  # the engine lost the task (dead worker, cancellation): failed units
            outcomes = [_lost(job, digest, exc) for job in batch]
        future.release()
        for outcome in outcomes:
            on_outcome(outcome)
        nxt = submit()
        if nxt is not None:
            queue.add(nxt)
    return time.perf_counter() - start
