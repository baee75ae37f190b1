"""Worker pools: nested work stays in its worker; the cluster option fails clearly."""

import sys

import pytest
from joblib import delayed

from dopantgap.cluster import SCHEDULER_VARIABLE, on_cluster, scheduler_address
from dopantgap.errors import DopantgapError
from dopantgap.workers import in_local_worker, worker_pool


def _nested_report():
    """Run inside a worker: whether it knows it is one, and the workers its own pool takes."""
    inner = worker_pool(n_jobs=2)
    return in_local_worker(), inner.n_jobs, inner(delayed(in_local_worker)() for _ in range(2))


def test_work_handed_out_inside_a_worker_runs_in_that_worker():
    assert not in_local_worker()
    reports = worker_pool(n_jobs=2)(delayed(_nested_report)() for _ in range(2))
    for knows, n_jobs, inner in reports:
        assert knows
        # one after the other, in the worker itself: the outer pool already holds the cores
        assert n_jobs == 1
        assert inner == [True, True]


def test_without_an_address_the_work_stays_here(monkeypatch):
    monkeypatch.delenv(SCHEDULER_VARIABLE, raising=False)
    assert scheduler_address(None) is None
    with on_cluster(None) as address:
        assert address is None
    monkeypatch.setenv(SCHEDULER_VARIABLE, " tcp://10.0.0.5:8786 ")
    assert scheduler_address(None) == "tcp://10.0.0.5:8786"
    assert scheduler_address("tcp://other:8786") == "tcp://other:8786"


def test_a_scheduler_without_dask_installed_says_how_to_install_it(monkeypatch):
    # None in sys.modules makes the import fail as if the package were absent
    monkeypatch.setitem(sys.modules, "distributed", None)
    with pytest.raises(DopantgapError, match=r'pip install "dopantgap\[cluster\]"'):
        with on_cluster("tcp://10.0.0.5:8786"):
            pass
