"""``learner="auto"``'s first look: a learner losing by a wide margin on a sample of
whole elements is left out before the full cross-validation (successive halving).

The size threshold and the margin are lowered here so that a small INVENTED table
reaches them; their values are a benchmark's business (benchmarks/bench_scale.py).
"""

import json

import numpy as np
import pandas as pd
import pytest

from dopantgap.store import load_model, save_model
from dopantgap.surrogate import Surrogate, crossval
from dopantgap.validate import validate
from dopantgap.world import invent_world, observe

pytestmark = pytest.mark.slow

ELEMENTS = "Li Na K Mg Ca Sr Al Ga In Ti Zr V Nb Cr Mo Mn Fe Co Ni Cu Zn Ag Cd Sn Pb Bi Sb".split()
HOSTS = {"ZnS": ("sub_Zn", "int_hex")}


@pytest.fixture(scope="module")
def table():
    world = invent_world(ELEMENTS, hosts=HOSTS, noise_sd=0.05, seed=3)
    return observe(world, expensive_fraction=0.4, missing_fraction=0.2, absent=("Co", "Sb"), seed=3)


@pytest.fixture(scope="module")
def looked(table):
    """An ``auto`` fit whose first look leaves out whichever learner loses at all."""
    with pytest.MonkeyPatch.context() as patch:
        patch.setattr(crossval, "FIRST_LOOK_MIN_CELLS", 1)
        patch.setattr(crossval, "FIRST_LOOK_MARGIN", 1.0)
        return Surrogate(learner="auto", n_jobs=1).fit(table)


def test_the_loser_is_left_out_and_the_winner_fitted_as_alone(looked, table):
    record = looked.first_look_
    assert list(record["learner"]) == ["gp", "boost"]
    assert record["kept"].sum() == 1
    winner = record.loc[record["kept"], "learner"].item()
    assert winner == record.loc[record["mae"].idxmin(), "learner"]
    assert looked.learner_ == winner
    # the learner left out is not half-reported: no metrics, residuals or nested choice
    assert set(looked.cv_metrics_["learner"]) == {winner}
    assert list(looked.cv_residuals_by_learner_) == [winner]
    assert looked.selection_residuals_ is None
    # the sample: whole elements, about a third of the cells
    assert 0 < record["cells"].iloc[0] < len(table)
    assert record["elements"].iloc[0] < table["element"].nunique()
    # the winner's model is the one a fit with that learner alone gives
    alone = Surrogate(learner=winner, n_jobs=1).fit(table)
    assert alone.first_look_ is None  # one candidate: nothing to look at
    cells = table[["element", "host", "site", "method", "quantity"]].drop_duplicates()
    ours, theirs = looked.predict(cells), alone.predict(cells)
    np.testing.assert_array_equal(ours["value"].to_numpy(), theirs["value"].to_numpy())
    np.testing.assert_array_equal(ours["std"].to_numpy(), theirs["std"].to_numpy())


def test_a_close_race_runs_every_learner_in_full(table):
    with pytest.MonkeyPatch.context() as patch:
        patch.setattr(crossval, "FIRST_LOOK_MIN_CELLS", 1)
        patch.setattr(crossval, "FIRST_LOOK_MARGIN", 1e6)
        model = Surrogate(learner="auto", n_jobs=1).fit(table)
    assert model.first_look_["kept"].all()
    assert set(model.cv_metrics_["learner"]) == {"gp", "boost"}
    assert model.selection_residuals_ is not None
    assert "all cross-validated in full" in crossval.first_look_text(model)


def test_validate_skips_the_first_look(table, monkeypatch):
    monkeypatch.setattr(crossval, "FIRST_LOOK_MIN_CELLS", 1)
    monkeypatch.setattr(crossval, "FIRST_LOOK_MARGIN", 1.0)
    # validate scores every learner, whatever the first look would say
    result = validate(table, Surrogate(learner="auto", n_jobs=1))
    assert result.surrogate.first_look_ is None and crossval.first_look_text(result.surrogate) == ""
    assert {"gp", "boost"} <= set(result.metrics["model"])


def test_the_first_look_is_told_and_kept_in_the_model_folder(looked, tmp_path):
    text = crossval.first_look_text(looked)
    left_out = looked.first_look_.loc[~looked.first_look_["kept"], "learner"].item()
    assert f"left out as more than 1x {looked.learner_}'s error: {left_out}" in text
    assert f"--learner {left_out} fits it anyway" in text
    manifest = save_model(looked, tmp_path / "model")
    on_disk = json.loads((tmp_path / "model" / "manifest.json").read_text())
    assert on_disk["first_look"] == manifest["first_look"]
    assert [row["learner"] for row in on_disk["first_look"]] == ["gp", "boost"]
    reloaded, _manifest = load_model(tmp_path / "model")
    pd.testing.assert_frame_equal(reloaded.first_look_, looked.first_look_)


def test_first_look_must_be_a_boolean(table):
    from dopantgap.errors import DopantgapError

    with pytest.raises(DopantgapError, match="first_look must be True or False"):
        Surrogate(first_look="yes").fit(table)


def test_few_elements_are_not_sampled(table, monkeypatch):
    """A sample of a third of ten elements would leave folds of one element each."""
    monkeypatch.setattr(crossval, "FIRST_LOOK_MIN_CELLS", 1)
    few = table[table["element"].isin(sorted(table["element"].unique())[:10])]
    model = Surrogate(learner="auto", n_jobs=1).fit(few)
    assert model.first_look_ is None
    assert set(model.cv_metrics_["learner"]) == {"gp", "boost"}
