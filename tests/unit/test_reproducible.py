"""Seeds checked once and derived; rows in one order whatever order they came in."""

import subprocess
import sys

import numpy as np
import pandas as pd
import pytest

from dopantgap.errors import DopantgapError
from dopantgap.reproducible import canonical_order, child_seed, learner_seed, seed_integer
from dopantgap.surrogate import Surrogate

BAD_SEEDS = [-1, 1.5, "0", True, [0], np.float64(2.0)]


def test_seed_integer_takes_what_check_random_state_takes():
    assert seed_integer(0) == 0
    assert seed_integer(np.int64(7)) == 7
    assert seed_integer(2**80) == 2**80  # any size: NumPy's generators take it
    # a RandomState or Generator gives one draw from itself: the same state, the same seed
    assert seed_integer(np.random.RandomState(5)) == seed_integer(np.random.RandomState(5))
    assert seed_integer(np.random.default_rng(5)) == seed_integer(np.random.default_rng(5))
    # None follows NumPy's global state, as in scikit-learn
    np.random.seed(11)
    first = seed_integer(None)
    np.random.seed(11)
    assert seed_integer(None) == first
    for value in (first, seed_integer(np.random.default_rng(1))):
        assert isinstance(value, int) and 0 <= value < 2**32


@pytest.mark.parametrize("bad", BAD_SEEDS)
def test_seed_integer_refuses_anything_else_in_one_line(bad):
    with pytest.raises(DopantgapError) as caught:
        seed_integer(bad, name="--seed")
    message = str(caught.value)
    assert "--seed" in message and "\n" not in message


def test_child_seeds_differ_by_path_and_fit_scikit_learn():
    children = {child_seed(3, path) for path in range(50)}
    assert len(children) == 50
    assert all(0 <= child < 2**32 for child in children)
    assert child_seed(3, 1) == child_seed(3, 1)
    # small seeds pass through unchanged (old results stay), large ones are derived
    assert learner_seed(12) == 12
    assert learner_seed(2**40) == child_seed(2**40) < 2**32


def _table():
    rows = []
    for element, value in (("Fe", 1.0), ("Ti", 2.0), ("H", 3.0), ("Og", 4.0)):
        for site in ("sub_Zn", "int_tet"):
            rows.append({"element": element, "host": "ZnS", "site": site, "method": "gga",
                         "quantity": "E_sol", "value": value + (site == "int_tet"), "_line": len(rows) + 2})
    return pd.DataFrame(rows)


def test_canonical_order_ignores_the_incoming_order():
    table = _table()
    ordered = canonical_order(table)
    for seed in range(5):
        shuffled = table.sample(frac=1.0, random_state=seed)
        pd.testing.assert_frame_equal(canonical_order(shuffled).drop(columns="_line"),
                                      ordered.drop(columns="_line"))
    # elements by atomic number (H before Ti before Fe before Og), rows unchanged
    assert list(dict.fromkeys(ordered["element"])) == ["H", "Ti", "Fe", "Og"]
    merged = ordered.merge(table, on=list(table.columns))
    assert len(merged) == len(table)
    assert list(ordered.index) == list(range(len(table)))


def test_canonical_order_breaks_ties_by_value():
    table = pd.DataFrame({"element": ["Fe", "Fe"], "host": "C", "site": "s", "method": "m",
                          "quantity": "q", "value": [2.0, 1.0]})
    assert canonical_order(table)["value"].tolist() == [1.0, 2.0]
    assert canonical_order(table.iloc[::-1])["value"].tolist() == [1.0, 2.0]


# ------------------------------------------------------------------ refused before any work
class _Spy(Exception):
    """Raised if fitting began."""


@pytest.fixture
def no_work(monkeypatch):
    def began(*args, **kwargs):
        raise _Spy("work began before the arguments were checked")

    monkeypatch.setattr(Surrogate, "_fit_candidates", began)
    monkeypatch.setattr("dopantgap.surrogate.model._host_compositions", began)


@pytest.mark.parametrize("bad", BAD_SEEDS)
def test_surrogate_refuses_a_bad_seed_before_any_work(no_work, bad):
    with pytest.raises(DopantgapError, match="random_state"):
        Surrogate(random_state=bad).fit(_table())


@pytest.mark.parametrize(
    "descriptors, message",
    [
        ([], "descriptors is empty"),
        ((), "descriptors is empty"),
        (["shoe_size"], "Unknown descriptor"),
        (["period", "period"], "twice"),
        (3, "list of descriptor names"),
    ],
)
def test_surrogate_refuses_bad_descriptors_before_any_work(no_work, descriptors, message):
    with pytest.raises(DopantgapError, match=message):
        Surrogate(descriptors=descriptors).fit(_table())


@pytest.mark.parametrize("n_folds", [1, 0, 2.5, "5", True])
def test_surrogate_refuses_bad_fold_counts_before_any_work(no_work, n_folds):
    with pytest.raises(DopantgapError, match="n_folds"):
        Surrogate(n_folds=n_folds).fit(_table())


def test_importing_the_library_leaves_matplotlibs_backend_alone():
    # a fresh interpreter: this one has long imported everything
    code = (
        "import matplotlib; matplotlib.use('svg'); "
        "import dopantgap, dopantgap.plots, dopantgap.report, dopantgap.validate, dopantgap.replay, "
        "dopantgap.explain; "
        "print(matplotlib.get_backend())"
    )
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120, check=False)
    assert done.returncode == 0, done.stderr[-2000:]
    assert done.stdout.strip().lower() == "svg"
