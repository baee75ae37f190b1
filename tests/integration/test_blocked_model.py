"""A model whose large stage is conditioned in blocks of whole hosts, used end to end.

Every table here is INVENTED (dopantgap.world); none of it is physics or data. The
outside reference for the blocked process itself is in tests/unit/test_blocks.py.
"""

import numpy as np
import pytest

from dopantgap.explain import explain_model
from dopantgap.fill import fill_table
from dopantgap.learners.blocks import BlockedGPR
from dopantgap.picker import pick_next
from dopantgap.surrogate import Surrogate
from dopantgap.surrogate.stages import _gaussian_process
from dopantgap.world import SECOND_ELEMENTS, invent_second_world, observe

ELEMENTS = SECOND_ELEMENTS[:16]
# binary hosts as in benchmarks/bench_scale.py: the cation and anion sites and two interstitials
HOSTS = {
    formula: (f"sub_{cation}", f"sub_{anion}", "int_oct", "int_tet")
    for formula, cation, anion in (("MgO", "Mg", "O"), ("GaN", "Ga", "N"), ("CaS", "Ca", "S"), ("ZnSe", "Zn", "Se"))
}


@pytest.fixture(scope="module")
def table():
    world = invent_second_world(element_symbols=ELEMENTS, hosts=HOSTS, seed=4)
    return observe(world, expensive_fraction=0.4, missing_fraction=0.15, seed=4)


@pytest.fixture(scope="module")
def blocked(table):
    return Surrogate(learner="gp", n_folds=2, max_block_rows=100, n_jobs=1, suspect_values="warn").fit(table)


def _regressor(surrogate, key):
    return _gaussian_process(surrogate.stages_[key].learner).regressor_


def test_the_large_stage_is_blocked_by_host(blocked, table):
    stage_rows = int(((table["quantity"] == "E_sol") & (table["method"] == "gga")).sum())
    assert stage_rows > 100
    regressor = _regressor(blocked, ("E_sol", "gga"))
    assert isinstance(regressor, BlockedGPR)
    assert len(regressor.experts_) >= 2
    assert all(len(rows) <= 100 for rows in regressor.expert_rows_)
    assert set(regressor.block_of_group_) == set(HOSTS)


def test_fill_next_and_explain_work_on_a_blocked_model(blocked, table):
    filled = fill_table(blocked)
    computed = filled[filled["status"] == "computed"]
    merged = computed.merge(table, on=["element", "host", "site", "method", "quantity"], suffixes=("", "_table"))
    np.testing.assert_array_equal(merged["value"], merged["value_table"])  # never changed
    predicted = filled[filled["status"] != "computed"]
    assert len(predicted) and np.all(np.isfinite(predicted["value"])) and np.all(predicted["std"] > 0)
    assert np.all((predicted["lo"] < predicted["value"]) & (predicted["value"] < predicted["hi"]))
    picks = pick_next(blocked, count=3)
    assert 1 <= len(picks) <= 3 and np.all(picks["benefit"] > 0)
    explanation = explain_model(blocked, targets=None)
    sums = explanation.shap_values.groupby(["target", "element"])["shap"].sum()
    base = explanation.base_values.set_index(["target", "element"])
    # SHAP local accuracy (Lundberg & Lee 2017, property 1) holds through the blocked predict
    assert float(np.max(np.abs(base["base_value"] + sums.loc[base.index] - base["prediction"]))) < 1e-6


def test_one_block_when_the_stage_fits(table):
    roomy = Surrogate(learner="gp", n_folds=2, n_jobs=1, suspect_values="warn").fit(table)
    assert not isinstance(_regressor(roomy, ("E_sol", "gga")), BlockedGPR)
