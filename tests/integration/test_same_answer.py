"""Same table and seed, same answer: whatever the order of the rows, and whatever form
the seed takes (None, int of any size, NumPy RandomState or Generator).

Every table here is INVENTED (``dopantgap.world``).
"""

import numpy as np
import pandas as pd
import pytest
from threadpoolctl import threadpool_limits

from dopantgap.baselines import predict_baseline
from dopantgap.cli import main
from dopantgap.errors import DopantgapError
from dopantgap.picker import pick_next
from dopantgap.replay import hide_cells, replay
from dopantgap.sites import site_preference
from dopantgap.store import read_manifest, save_model
from dopantgap.surrogate import Surrogate
from dopantgap.validate import validation_metrics
from dopantgap.world import invent_world, observe

pytestmark = pytest.mark.slow

ELEMENTS = ("Li", "B", "Mg", "Al", "Ti", "Fe", "Cu", "Ga", "As", "Sn", "Ba", "Pb")


@pytest.fixture(scope="module")
def table():
    world = invent_world(element_symbols=ELEMENTS, seed=7)
    return observe(world, expensive_fraction=0.4, seed=7).reset_index(drop=True)


def _shuffled(table, seed):
    return table.sample(frac=1.0, random_state=seed).reset_index(drop=True)


def test_shuffled_rows_give_byte_identical_filled_tables(table, tmp_path):
    outputs = []
    for name, rows in (("given", table), ("shuffled", _shuffled(table, 1))):
        folder = tmp_path / name
        folder.mkdir()
        rows.to_csv(folder / "table.csv", index=False)
        with threadpool_limits(limits=1):
            assert main(["fit", str(folder / "table.csv"), "--out", str(folder / "model"), "--seed", "4",
                         "--learner", "gp", "--quiet"]) == 0
            assert main(["fill", str(folder / "model"), "--out", str(folder / "filled.csv"),
                         "--elements", "Zr,Ni", "--quiet"]) == 0
        outputs.append(folder)
    given, shuffled = outputs
    assert (given / "filled.csv").read_bytes() == (shuffled / "filled.csv").read_bytes()
    assert (given / "site_preference.csv").read_bytes() == (shuffled / "site_preference.csv").read_bytes()
    first, second = read_manifest(given / "model"), read_manifest(shuffled / "model")
    assert first["table"]["sha256"] == second["table"]["sha256"]
    assert first["cross_validation"] == second["cross_validation"]
    assert first["validation"] == second["validation"]
    # the check has teeth: a different seed moves the predictions
    with threadpool_limits(limits=1):
        assert main(["fit", str(given / "table.csv"), "--out", str(tmp_path / "other"), "--seed", "5",
                     "--learner", "gp", "--quiet"]) == 0
        assert main(["fill", str(tmp_path / "other"), "--out", str(tmp_path / "other.csv"),
                     "--elements", "Zr,Ni", "--quiet"]) == 0
    assert (tmp_path / "other.csv").read_bytes() != (given / "filled.csv").read_bytes()


def test_shuffled_rows_give_the_same_replay(table):
    results = []
    for rows in (table, _shuffled(table, 2)):
        with threadpool_limits(limits=1):
            results.append(replay(rows, goal="table", rounds=1, per_round=2, n_random_seeds=1,
                                  random_state=3, estimator=Surrogate(learner="gp", random_state=3),
                                  relearn="refresh"))
    first, second = results
    pd.testing.assert_frame_equal(first.curves, second.curves)
    pd.testing.assert_frame_equal(first.picks, second.picks)
    pd.testing.assert_frame_equal(first.hidden, second.hidden)
    visible, hidden, _ = hide_cells(table, random_state=2**70)
    shuffled_visible, shuffled_hidden, _ = hide_cells(_shuffled(table, 3), random_state=2**70)
    assert set(map(tuple, hidden.to_numpy().tolist())) == set(map(tuple, shuffled_hidden.to_numpy().tolist()))


# ------------------------------------------------------------------ every kind of seed
@pytest.fixture(scope="module")
def small(table):
    return table[table["host"] == table["host"].iat[0]].reset_index(drop=True)


@pytest.mark.parametrize(
    "make_seed",
    [lambda: None, lambda: 2**40, lambda: np.int64(9), lambda: np.random.RandomState(0),
     lambda: np.random.default_rng(0)],
    ids=["None", "large-int", "numpy-int", "RandomState", "Generator"],
)
def test_every_kind_of_seed_fits_and_saves(small, make_seed, tmp_path):
    with threadpool_limits(limits=1):
        model = Surrogate(learner="gp", n_folds=3, random_state=make_seed()).fit(small)
    assert isinstance(model.seed_, int) and model.seed_ >= 0
    manifest = save_model(model, tmp_path / "model")
    assert manifest["seed"] == model.seed_
    if make_seed() is not None:
        # the same seed (a fresh generator in the same state) gives the same model
        with threadpool_limits(limits=1):
            again = Surrogate(learner="gp", n_folds=3, random_state=make_seed()).fit(small)
        assert again.seed_ == model.seed_
        pd.testing.assert_frame_equal(again.cv_residuals_, model.cv_residuals_)


@pytest.fixture(scope="module")
def fitted(small):
    with threadpool_limits(limits=1):
        return Surrogate(learner="gp", n_folds=3, random_state=0).fit(small)


@pytest.mark.parametrize("seed", [None, 2**40, np.random.RandomState(1), np.random.default_rng(1)],
                         ids=["None", "large-int", "RandomState", "Generator"])
def test_public_functions_take_every_kind_of_seed(fitted, seed):
    preference = site_preference(fitted, n_samples=200, random_state=seed)
    assert len(preference) and preference["p_lowest"].between(0.0, 1.0).all()
    assert len(pick_next(fitted, count=2, goal="site", random_state=seed)) == 2
    metrics, _ = validation_metrics(fitted, baselines=("boosted-trees baseline",), random_state=seed)
    assert "boosted-trees baseline" in set(metrics["model"])
    cells = fitted.table_[["element", "host", "site", "method", "quantity"]].head(3)
    assert predict_baseline("boosted-trees baseline", fitted.table_, cells, fitted.levels_,
                            random_state=seed).shape == (3,)


@pytest.mark.parametrize("bad", [-3, 0.5, "1"])
def test_public_functions_refuse_a_bad_seed(fitted, small, bad):
    calls = [
        lambda: site_preference(fitted, random_state=bad),
        lambda: pick_next(fitted, goal="site", random_state=bad),
        lambda: validation_metrics(fitted, random_state=bad),
        lambda: hide_cells(small, random_state=bad),
        lambda: replay(small, random_state=bad),
        lambda: predict_baseline("column-mean baseline", small, small, fitted.levels_, random_state=bad),
    ]
    for call in calls:
        with pytest.raises(DopantgapError, match="random_state"):
            call()


def test_command_line_refuses_a_negative_seed(tmp_path, capsys):
    with pytest.raises(SystemExit) as stopped:
        main(["fit", str(tmp_path / "t.csv"), "--out", str(tmp_path / "m"), "--seed", "-1"])
    assert stopped.value.code == 2
    assert "--seed" in capsys.readouterr().err


# ------------------------------------------------------------------ any number of workers
def test_the_model_is_the_same_whatever_the_number_of_workers(small, fitted):
    # n_jobs=1 fits every fold here, one after the other; 2 (the default) spreads them
    # over worker processes: the same folds, seeds and model
    with threadpool_limits(limits=1):
        here = Surrogate(learner="gp", n_folds=3, random_state=0, n_jobs=1).fit(small)
    assert fitted.n_jobs == 2
    pd.testing.assert_frame_equal(here.cv_residuals_, fitted.cv_residuals_)
    cells = small[["element", "host", "site", "method", "quantity"]].assign(element="Zr").drop_duplicates()
    pd.testing.assert_frame_equal(here.predict(cells), fitted.predict(cells))


@pytest.mark.parametrize("bad", [0, -2, 1.5, True, "2"])
def test_a_bad_number_of_workers_is_refused_before_any_work(small, bad):
    with pytest.raises(DopantgapError, match="n_jobs must be a whole number"):
        Surrogate(learner="gp", n_jobs=bad).fit(small)


class _Counter:
    """A progress object that keeps what it is told."""

    def __init__(self):
        self.total, self.done = None, 0

    def expect(self, total):
        self.total = total

    def update(self, n=1):
        self.done += n


def test_the_fit_counts_its_fits_before_it_starts_and_ticks_each_one(small):
    counter = _Counter()
    Surrogate(learner="auto", n_folds=3, random_state=0).fit(small, progress=counter)
    # two learners, each: the full fit, 3 main folds and the upgrade loop's folds
    assert counter.total >= 2 * (1 + 3 + 1)
    assert counter.done == counter.total


def test_the_replay_is_the_same_whatever_the_number_of_workers(small):
    # n_jobs=2 runs the strategies and the floor's groups in two worker processes, each
    # fit inside them one after the other; n_jobs=1 runs everything here
    results = []
    for n_jobs in (1, 2):
        counter = _Counter()
        with threadpool_limits(limits=1):
            results.append(replay(small, goal="table", rounds=1, per_round=2, n_random_seeds=2,
                                  random_state=1, progress=counter,
                                  estimator=Surrogate(learner="gp", n_folds=3, random_state=1, n_jobs=n_jobs)))
        # the first fit, one round for each of three strategies, and the floor's groups
        assert counter.done == 1 + 3 + 5
    here, spread = results
    assert here.settings["relearn"] == "fit"
    pd.testing.assert_frame_equal(here.curves, spread.curves)
    pd.testing.assert_frame_equal(here.picks, spread.picks)
    assert np.isfinite(here.curves["floor_left"]).all()
