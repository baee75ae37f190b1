"""Fits sent to a Dask cluster give the model that local workers give.

Every table here is INVENTED (``dopantgap.world``). The cluster is a Dask
``LocalCluster`` on this machine: the same code path as a remote scheduler.
"""

import numpy as np
import pandas as pd
import pytest

from dopantgap import cluster as cluster_module
from dopantgap.cli import main
from dopantgap.cluster import SCHEDULER_VARIABLE, on_cluster
from dopantgap.replay import replay
from dopantgap.surrogate import Surrogate
from dopantgap.world import invent_world, observe

distributed = pytest.importorskip(
    "distributed", reason="Dask's distributed package is not installed (pip install 'dopantgap[cluster]')"
)

pytestmark = pytest.mark.slow

ELEMENTS = ("Li", "B", "Mg", "Al", "Ti", "Fe", "Cu", "Ga", "As", "Sn", "Ba", "Pb")


@pytest.fixture(scope="module")
def table():
    world = invent_world(element_symbols=ELEMENTS, seed=3)
    return observe(world, expensive_fraction=0.4, seed=3).reset_index(drop=True)


@pytest.fixture(scope="module")
def local_cluster():
    with distributed.LocalCluster(
        n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None
    ) as running:
        yield running


def _unseen_cells(table):
    rows = table[["element", "host", "site", "method", "quantity"]].drop_duplicates()
    cells = rows.assign(element="Zr").drop_duplicates()
    return pd.concat([cells, rows.assign(element="Ni").drop_duplicates()], ignore_index=True)


def test_a_fit_on_a_dask_cluster_gives_the_local_model(table, local_cluster):
    cells = _unseen_cells(table)
    local = Surrogate(learner="gp", n_jobs=2).fit(table)
    with distributed.Client(local_cluster.scheduler_address) as watcher:
        with distributed.get_task_stream(client=watcher) as stream:
            with on_cluster(local_cluster.scheduler_address) as address:
                assert address == local_cluster.scheduler_address
                remote = Surrogate(learner="gp", n_jobs=2).fit(table)
    # the folds ran on the cluster's workers, not here
    assert len(stream.data) >= 5
    assert cluster_module.active_address() is None
    expected, found = local.predict(cells), remote.predict(cells)
    for column in ("value", "std", "lo", "hi"):
        np.testing.assert_allclose(found[column], expected[column], rtol=1e-7, atol=1e-9)
    pd.testing.assert_frame_equal(
        remote.cv_residuals_.reset_index(drop=True), local.cv_residuals_.reset_index(drop=True),
        check_exact=False, rtol=1e-7, atol=1e-9,
    )


def test_a_replay_on_a_dask_cluster_gives_the_local_figures(table, local_cluster):
    small = table[table["host"] == table["host"].iat[0]].reset_index(drop=True)
    settings = dict(goal="table", rounds=1, per_round=2, n_random_seeds=2, random_state=2, relearn="refresh")
    local = replay(small, estimator=Surrogate(learner="gp", n_folds=3, random_state=2), **settings)
    with distributed.Client(local_cluster.scheduler_address) as watcher:
        with distributed.get_task_stream(client=watcher) as stream:
            with on_cluster(local_cluster.scheduler_address):
                remote = replay(small, estimator=Surrogate(learner="gp", n_folds=3, random_state=2), **settings)
    # the strategies and the floor's groups ran on the cluster's workers
    assert len(stream.data) >= 3 + 5
    pd.testing.assert_frame_equal(remote.picks, local.picks)
    pd.testing.assert_frame_equal(remote.curves, local.curves, check_exact=False, rtol=1e-7, atol=1e-9)


def test_the_command_line_sends_fits_to_the_scheduler_named_by_option_or_environment(
    table, local_cluster, tmp_path, capsys, monkeypatch
):
    path = tmp_path / "table.csv"
    table.to_csv(path, index=False)
    address = local_cluster.scheduler_address
    assert main(["fit", str(path), "--out", str(tmp_path / "by_option"), "--learner", "gp",
                 "--scheduler", address]) == 0
    assert f"Fits sent to the Dask scheduler at {address}" in capsys.readouterr().out
    monkeypatch.setenv(SCHEDULER_VARIABLE, address)
    assert main(["fit", str(path), "--out", str(tmp_path / "by_variable"), "--learner", "gp"]) == 0
    assert f"Fits sent to the Dask scheduler at {address}" in capsys.readouterr().out


def test_an_unreachable_scheduler_is_one_clear_message(table, tmp_path, capsys, monkeypatch):
    monkeypatch.setattr(cluster_module, "_CONNECT_SECONDS", 2)
    path = tmp_path / "table.csv"
    table.to_csv(path, index=False)
    # port 9 (discard) is closed on this machine: nothing listens there
    status = main(["fit", str(path), "--out", str(tmp_path / "model"), "--scheduler", "tcp://127.0.0.1:9"])
    error = capsys.readouterr().err
    assert status != 0
    assert "Could not reach the Dask scheduler at tcp://127.0.0.1:9" in error
    assert "Traceback" not in error
    assert not (tmp_path / "model").exists()
    # a scheme Dask does not know: the same one line, and nothing of Dask's after it
    status = main(["fit", str(path), "--out", str(tmp_path / "model"), "--scheduler", "foo://127.0.0.1:9"])
    error = capsys.readouterr().err
    assert status != 0
    assert "Could not reach the Dask scheduler at foo://127.0.0.1:9 (unknown address scheme 'foo'" in error
    assert "Traceback" not in error
