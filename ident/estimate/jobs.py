"""Independent jobs of one identification run, spread over worker processes.

The candidate search is many independent pieces of numerical work (the
projections and models of one input shift and horizon, an ARX grid, a
refinement per start). Most of it is small numpy operations on screening
data, so threads would queue on the interpreter lock; :class:`Jobs` runs the
jobs in forked worker processes instead, which see the data of the run
without copying it (the fork shares the parent's memory), and gives the
results back in the order they were submitted: a run with several workers
computes exactly the numbers of a run with one.

A job is ``fn(context, *args)``: ``context`` is the object given to
:class:`Jobs` (the run's data), inherited by the workers; the arguments and
results travel between processes by pickling, so they should be small.
Where the operating system cannot fork (or ``workers`` is 1) the jobs run in
the calling process, one after the other.
"""

from __future__ import annotations

import multiprocessing
import os
import signal
import warnings
from collections.abc import Callable, Sequence
from concurrent.futures import Future, ProcessPoolExecutor
from typing import Any

from .._validate import int_in_range

__all__ = ["MAX_WORKERS", "Job", "Jobs", "usable_cores", "workers_for", "can_fork"]

#: Most worker processes an identification uses (its jobs are a few dozen at most).
MAX_WORKERS = 8

#: The context of the jobs of the open :class:`Jobs` block (forked workers inherit it).
_CONTEXT: Any = None

#: True while a :class:`Jobs` block with worker processes is open in this process.
_POOL_OPEN = False


def usable_cores() -> int:
    """Cores this process may run on (its CPU affinity where the system tells it)."""
    try:
        return max(len(os.sched_getaffinity(0)), 1)
    except (AttributeError, OSError):  # pragma: no cover - platforms without affinity
        return max(os.cpu_count() or 1, 1)


def workers_for(requested: int | None) -> int:
    """Worker processes to use: ``requested`` (``None``: the usable cores), at most :data:`MAX_WORKERS`."""
    wanted = usable_cores() if requested is None else int_in_range(requested, "workers", 1)
    return min(wanted, MAX_WORKERS)


def can_fork() -> bool:
    """Tell whether worker processes can be forked here (POSIX systems)."""
    return "fork" in multiprocessing.get_all_start_methods()


class Job:
    """A submitted job: :meth:`result` waits for it, re-issues its warnings and returns its value."""

    __slots__ = ("_future", "_issued")

    def __init__(self, future: Future) -> None:
        self._future = future
        self._issued = False

    def result(self) -> Any:
        """Wait for the job; issue the warnings it raised (once), then return its value or raise its error."""
        value, error, caught = self._future.result()
        if not self._issued:
            self._issued = True
            for message, category, filename, lineno in caught:
                warnings.warn_explicit(message, category, filename, lineno)
        if error is not None:
            raise error
        return value


def _run(fn: Callable[..., Any], args: tuple, kwargs: dict) -> tuple[Any, BaseException | None, list]:
    """Call ``fn(context, *args, **kwargs)``; return ``(value, error, warnings)`` (picklable)."""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            value, error = fn(_CONTEXT, *args, **kwargs), None
        except Exception as exc:  # noqa: BLE001 - raised again by Job.result() in the caller
            value, error = None, exc
    return value, error, [(str(w.message), w.category, w.filename, w.lineno) for w in caught]


def _worker_start() -> None:
    # Ctrl-C reaches the whole process group: the parent stops the run, the workers stay quiet
    signal.signal(signal.SIGINT, signal.SIG_IGN)


class Jobs:
    """Run independent jobs ``fn(context, *args)`` on ``workers`` forked processes.

    Use as a context manager; :meth:`submit` returns a :class:`Job`. With one
    worker (or where processes cannot be forked, or inside another block
    with workers) every job runs at once in the caller, in submission order.
    Either way a job's warnings are issued again in the caller when its
    result is collected, so they come in the same order whatever the number
    of workers. Leaving the block on an error stops the workers at once.

    Parameters
    ----------
    workers : int
        Worker processes, ``1 .. MAX_WORKERS``.
    context : object
        What every job gets as its first argument: the run's data, inherited
        by the workers when they are forked (at the first :meth:`submit`), not
        pickled.
    """

    def __init__(self, workers: int = 1, context: Any = None) -> None:
        self.workers = int_in_range(workers, "workers", 1, MAX_WORKERS)
        self.context = context
        self._pool: ProcessPoolExecutor | None = None
        self._saved: Any = None
        self._open = False

    def __enter__(self) -> Jobs:
        global _CONTEXT, _POOL_OPEN
        self._saved, _CONTEXT = _CONTEXT, self.context
        self._open = True
        if self.workers > 1 and can_fork() and not _POOL_OPEN:
            self._pool = ProcessPoolExecutor(self.workers, mp_context=multiprocessing.get_context("fork"),
                                             initializer=_worker_start)
            _POOL_OPEN = True
        return self

    def __exit__(self, exc_type: Any, *exc: Any) -> None:
        global _CONTEXT, _POOL_OPEN
        try:
            if self._pool is not None:
                if exc_type is not None:  # an error or Ctrl-C: no need to finish the others
                    for process in list(getattr(self._pool, "_processes", {}).values()):
                        process.terminate()
                self._pool.shutdown(wait=True, cancel_futures=True)
                self._pool = None
                _POOL_OPEN = False
        finally:
            _CONTEXT, self._saved = self._saved, None
            self._open = False

    def submit(self, fn: Callable[..., Any], /, *args: Any, **kwargs: Any) -> Job:
        """Start ``fn(context, *args, **kwargs)`` (``fn`` a module-level function)."""
        if not self._open:
            raise RuntimeError("Jobs.submit is used inside the Jobs block only")
        if self._pool is not None:
            with warnings.catch_warnings():
                # forking a process that runs other threads (an I/O library's) is safe here: the
                # workers only run this package's numerics; newer Pythons warn about it anyway
                warnings.simplefilter("ignore", DeprecationWarning)
                return Job(self._pool.submit(_run, fn, args, kwargs))
        done: Future = Future()
        done.set_result(_run(fn, args, kwargs))
        return Job(done)

    def map(self, fn: Callable[..., Any], items: Sequence[Any]) -> list:
        """``[fn(context, item) for item in items]``, the items spread over the workers."""
        submitted = [self.submit(fn, item) for item in items]
        return [job.result() for job in submitted]
