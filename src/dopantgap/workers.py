"""Worker processes that end with the process that started them.

The learners fit side by side in joblib's loky worker processes (two threads were
measured 3x slower than two processes, and slower than one process alone: the Gaussian
processes' optimiser holds the interpreter lock between BLAS calls;
``benchmarks/bench_workers.py``). A worker
busy with a task does not notice that its parent is gone: a fit killed with SIGKILL
left its workers computing for minutes. Each worker started through
:func:`worker_pool` runs a watchdog thread that ends the worker as soon as its parent
has gone (the parent's id changes when the parent dies). An interrupted parent that
is still alive (Ctrl-C, or SIGTERM turned into an exception by the command line) has
joblib stop its workers itself.

Work handed out from inside such a worker runs in that worker, one task after the
other: the outer pool already holds the cores. Under a Dask
cluster (``cluster.on_cluster``) every level is sent to the cluster instead.
"""

import os
import sys
import threading
import time

from joblib import Parallel

__all__ = ["PARENT_CHECK_SECONDS", "in_local_worker", "worker_pool"]

# set in every worker that worker_pool starts on this machine
_LOCAL_WORKER = False

#: How often a worker looks whether its parent is still there (common practice, no
#: source: short beside any task, negligible cost).
PARENT_CHECK_SECONDS = 0.5


def _watch_parent(parent_id):
    while True:
        time.sleep(PARENT_CHECK_SECONDS)
        if os.getppid() != parent_id:
            # no one is left to take the result: stop at once, mid-computation
            os._exit(1)


def end_with_parent(parent_id):
    """Loky worker initializer: start the thread that ends this worker with its parent."""
    global _LOCAL_WORKER
    if os.getppid() != parent_id:
        os._exit(1)
    _LOCAL_WORKER = True
    threading.Thread(target=_watch_parent, args=(parent_id,), name="dopantgap-parent-watch", daemon=True).start()


def in_local_worker():
    """True inside a worker process that :func:`worker_pool` started on this machine."""
    return _LOCAL_WORKER


def _on_cluster():
    """True when joblib sends work to a Dask cluster: inside ``cluster.on_cluster``, or
    in a task running on a Dask worker."""
    if "distributed" not in sys.modules:
        return False
    from dopantgap import cluster

    if cluster.active_address() is not None:
        return True
    from distributed import get_worker

    try:
        get_worker()
    except ValueError:
        return False
    return True


def worker_pool(n_jobs, **options):
    """A ``joblib.Parallel`` whose worker processes end when this process ends.

    Parameters
    ----------
    n_jobs : int
        Number of workers (as ``joblib.Parallel``). Inside a worker this function
        started, the tasks run one after the other in that worker (1); on a Dask
        cluster, as many side by side as the cluster takes.
    **options
        Other ``joblib.Parallel`` options, e.g. ``return_as="generator"``.

    Returns
    -------
    joblib.Parallel
        Every call passes the same initializer and arguments, so joblib keeps reusing
        one set of workers between calls. Under a thread or sequential backend chosen
        by the caller (``joblib.parallel_config``), or Dask's, the initializer is not
        used.
    """
    if _on_cluster():
        # n_jobs=None: the cluster's backend decides (all its workers)
        return Parallel(n_jobs=None, **options)
    if _LOCAL_WORKER:
        n_jobs = 1
    return Parallel(n_jobs=n_jobs, initializer=end_with_parent, initargs=(os.getpid(),), **options)
