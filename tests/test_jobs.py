"""Tests of ident.estimate.jobs: worker processes give the serial results, warnings and errors.

The reference throughout is the serial program (the same jobs run one after the
other in the calling process): common practice for parallel code, no source.
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import textwrap
import threading
import warnings

import numpy as np
import pytest
from scipy import signal as sps

from ident.errors import IdentificationError
from ident.estimate.identify import IdentifyOptions, identify
from ident.estimate.jobs import MAX_WORKERS, Jobs, can_fork, usable_cores

REPO = __import__("pathlib").Path(__file__).resolve().parents[1]

forking = pytest.mark.skipif(not can_fork(), reason="this system cannot fork worker processes")


class _Unpicklable:
    """A context that cannot travel by pickle (a lock): workers must inherit it."""

    def __init__(self, values: np.ndarray) -> None:
        self.values = values
        self.lock = threading.Lock()


def _weighted_sum(context: _Unpicklable, k: int) -> tuple[int, float]:
    return os.getpid(), float(context.values @ np.arange(k, k + context.values.size))


def _warn_and_return(context, k: int) -> int:
    warnings.warn(f"job {k} noticed something", UserWarning, stacklevel=2)
    return k


def _fail(context, k: int) -> None:
    raise IdentificationError(f"job {k} cannot go on", hint="a hint travels too")


def _inner_pids(context, k: int) -> tuple[int, list[int]]:
    with Jobs(2, context) as inner:
        return os.getpid(), [pid for pid, _ in inner.map(_weighted_sum, [1, 2])]


@forking
def test_workers_give_the_serial_results_in_submission_order():
    context = _Unpicklable(np.linspace(0.0, 1.0, 100_000))
    with Jobs(1, context) as serial:
        expected = serial.map(_weighted_sum, list(range(12)))
    with Jobs(2, context) as jobs:
        got = jobs.map(_weighted_sum, list(range(12)))
    assert [v for _, v in got] == [v for _, v in expected]  # bit for bit, in order
    assert {pid for pid, _ in expected} == {os.getpid()}
    assert os.getpid() not in {pid for pid, _ in got}  # the context was inherited, not pickled


@pytest.mark.parametrize("workers", [1, 2])
def test_job_warnings_come_back_once_in_submission_order(workers):
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        with Jobs(workers) as jobs:
            submitted = [jobs.submit(_warn_and_return, k) for k in range(4)]
            values = [job.result() for job in reversed(submitted)]
            again = submitted[0].result()
    assert values == [3, 2, 1, 0] and again == 0
    # collected in reverse, so issued in reverse; each once although asked twice
    assert [str(w.message) for w in caught] == [f"job {k} noticed something" for k in (3, 2, 1, 0)]
    assert all(w.category is UserWarning for w in caught)


@pytest.mark.parametrize("workers", [1, 2])
def test_job_errors_are_raised_in_the_caller(workers):
    with Jobs(workers) as jobs:
        job = jobs.submit(_fail, 7)
        with pytest.raises(IdentificationError, match="job 7 cannot go on") as info:
            job.result()
    assert info.value.hint == "a hint travels too"


@forking
def test_a_job_runs_its_own_jobs_in_its_own_process():
    context = _Unpicklable(np.ones(10))
    with Jobs(2, context) as jobs:
        pid, inner = jobs.submit(_inner_pids, 0).result()
    assert pid != os.getpid() and inner == [pid, pid]


def test_submit_needs_the_block_and_workers_are_bounded():
    jobs = Jobs(1)
    with pytest.raises(RuntimeError, match="inside the Jobs block"):
        jobs.submit(_weighted_sum, 1)
    with pytest.raises(ValueError, match=rf"workers must be an integer in \[1, {MAX_WORKERS}\]; got 0"):
        Jobs(0)
    assert 1 <= usable_cores() <= (os.cpu_count() or 1)


def _resonant_log(rng, n=4000):
    """A lightly damped second-order plant with a slow real pole, output-error noise (chosen, no source)."""
    T = 0.01
    num, den = sps.zpk2tf([], [-1.5 + 12j, -1.5 - 12j, -0.8], 150.0)
    dnum, dden, _ = sps.cont2discrete((num, den), T)
    u = np.repeat(rng.standard_normal(n // 10), 10)
    y = sps.lfilter(dnum.ravel(), dden, u) + 0.02 * rng.standard_normal(n)
    return (u[:, None] + 2.0, y[:, None] - 1.0), T


@forking
@pytest.mark.filterwarnings("ignore::ident.errors.PoorExcitationWarning")
def test_identify_with_workers_is_the_serial_identification(rng):
    data, T = _resonant_log(rng)
    serial = identify(data, T, IdentifyOptions(max_order=6), workers=1)
    parallel = identify(data, T, IdentifyOptions(max_order=6), workers=2)
    assert np.array_equal(serial.model.A, parallel.model.A) and np.array_equal(serial.model.C, parallel.model.C)
    assert np.array_equal(serial.validation_fit, parallel.validation_fit)
    assert [(c.method, c.stage, c.order, c.mean_fit, c.structure) for c in serial.candidates] == \
        [(c.method, c.stage, c.order, c.mean_fit, c.structure) for c in parallel.candidates]
    assert serial.notes == parallel.notes and serial.warnings == parallel.warnings
    assert serial.selection.reason == parallel.selection.reason


@forking
def test_ctrl_c_during_the_search_exits_130_quietly(tmp_path):
    """Ctrl-C reaches the whole process group; the workers stay quiet, the command exits 130."""
    rng = np.random.default_rng(5)
    (u, y), T = _resonant_log(rng)
    log = tmp_path / "log.csv"
    t = np.arange(u.shape[0]) * T
    np.savetxt(log, np.column_stack([t, u[:, 0], y[:, 0]]), delimiter=",", header="time [s],u,y", comments="")
    code = textwrap.dedent(f"""
        import os, signal
        import ident.estimate.identify as identify_module
        real = identify_module._refine_job
        def interrupted(run, start, form):
            os.killpg(os.getpgid(0), signal.SIGINT)  # as a terminal does: every process of the group
            return real(run, start, form)
        identify_module._refine_job = interrupted
        from ident.cli import main
        main(["fit", {str(log)!r}, "--input", "u", "--output", "y", "--workers", "2",
              "-o", {str(tmp_path / "m.json")!r}, "--quiet"])
    """)
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=300,
                          env={**os.environ, "PYTHONPATH": str(REPO)}, start_new_session=True)
    assert proc.returncode == 128 + signal.SIGINT, proc.stderr
    assert proc.stderr == "interrupted\n" and proc.stdout == ""
    assert sorted(p.name for p in tmp_path.iterdir()) == ["log.csv"]
