"""The surrogate's promises, measured on invented worlds whose truth is known.

Statistical checks use fixed seeds; each states its tolerance and why.
"""

import numpy as np
import pandas as pd
import pytest

from dopantgap.errors import DopantgapError
from dopantgap.sites import site_preference
from dopantgap.surrogate import Surrogate
from dopantgap.table import KEY_COLUMNS
from dopantgap.world import DEMO_ELEMENTS, invent_world, observe

pytestmark = pytest.mark.slow

ELEMENTS = (
    "Li Be B N O Na Mg Al P S K Ca Ti V Cr Mn Fe Co Ni Cu Zn Ga As Se Sr Zr Mo Pd Ag Cd In Sn Sb Te Ba W Pt Au Pb Bi"
).split()
# never computed: enough elements that new-element coverage is measured on more than a handful
ABSENT = ("Be", "Co", "Sn", "Te", "Pt", "Rb", "Nb", "Rh", "Hf", "Re", "Ir", "Tl", "Sc", "Br", "Ce", "Cs")
ONE_HOST = {"ZnS": ("sub_Zn", "sub_S", "int_tet_Zn", "int_hex")}


def _scored(model, world):
    predicted = model.predict(world[["element", "host", "site", "method", "quantity"]])
    predicted["truth"] = world["truth"].to_numpy()
    predicted["noisy"] = world["value"].to_numpy()
    return predicted[predicted["status"] == "predicted"]


@pytest.fixture(scope="module")
def rough():
    """A world with an element term of 0.3 eV that no descriptor explains."""
    world = invent_world(DEMO_ELEMENTS, hosts=ONE_HOST, element_sd=0.3, noise_sd=0.05, seed=11)
    table = observe(world, expensive_fraction=0.3, missing_fraction=0.25, absent=ABSENT, seed=11)
    model = Surrogate(learner="gp", random_state=0).fit(table)
    return world, table, model, _scored(model, world)


def test_computed_cells_pass_through_unchanged(rough):
    _world, table, model, _scores = rough
    result = model.predict(table)
    assert (result["status"] == "computed").all()
    assert np.array_equal(result["value"].to_numpy(), table["value"].to_numpy())
    assert (result["std"] == 0).all() and (result["lo"] == result["value"]).all()


def test_known_element_cells_beat_never_computed_elements(rough):
    """An element's computed cells inform its missing ones (its shared offset)."""
    scores = rough[3]
    mae = scores.groupby("scenario").apply(lambda part: np.mean(np.abs(part["value"] - part["truth"])))
    # the element term (0.3 eV) is invisible to descriptors, so a never-computed
    # element's error is at least of its size; a computed element's is not
    assert mae["new-cell"] < 0.6 * mae["new-element"]


def test_intervals_cover_in_every_scenario(rough):
    """90 % intervals cover 80-98 % of noisy truth per scenario.

    The band is wider than 85-95 % because the cells of one element share its offset:
    with 16 never-computed elements the effective sample is nearer 16 than the ~220
    cells (common practice, no source). The benchmark measures the 85-95 % target over
    several worlds.
    """
    scores = rough[3]
    for scenario, part in scores.groupby("scenario"):
        inside = np.mean((part["noisy"] >= part["lo"]) & (part["noisy"] <= part["hi"]))
        assert 0.80 <= inside <= 0.98, (scenario, inside, len(part))


def test_scenarios_are_tagged_as_documented(rough):
    world, table, _model, scores = rough
    assert set(scores.loc[scores["element"].isin(ABSENT), "scenario"]) == {"new-element"}
    cheap = set(zip(table["element"], table["host"], table["site"], table["quantity"]))
    upgrade = scores[scores["scenario"] == "upgrade"]
    assert len(upgrade) > 0
    assert all(key in cheap for key in zip(upgrade["element"], upgrade["host"], upgrade["site"], upgrade["quantity"]))
    assert set(upgrade["method"]) == {"hyb"}


def test_joint_std_matches_marginal_std(rough):
    _world, _table, model, _scores = rough
    cells = pd.DataFrame(
        {"element": "Fe", "host": "ZnS", "site": list(ONE_HOST["ZnS"]), "method": "hyb", "quantity": "E_sol"}
    )
    marginal = model.predict(cells)
    mean, cov = model.predict_joint(cells)
    assert np.allclose(mean, marginal["value"])
    assert np.allclose(np.sqrt(np.diag(cov)), marginal["std"], rtol=1e-6, atol=1e-9)
    # an element's sites share its offset: their errors are positively correlated
    predicted = np.flatnonzero(marginal["status"] == "predicted")
    if len(predicted) >= 2:
        first, second = predicted[:2]
        assert cov[first, second] > 0


def test_new_element_folds_keep_elements_whole(rough):
    """No element straddles training and test in the new-element scenario (no leakage)."""
    _world, table, model, _scores = rough
    core = table.reset_index(drop=True)
    for test in model._fold_masks(core):
        hidden = core[test]
        trained = set(core.loc[~test, "element"])
        wholly_hidden = {e for e in hidden["element"] if e not in trained}
        assert wholly_hidden, "each fold hides some elements entirely"
        for element in wholly_hidden:
            assert test[core["element"] == element].all()


def test_correction_beats_learning_the_expensive_level_alone():
    """With a smooth cheap-to-expensive correction, learning the correction wins."""
    world = invent_world(ELEMENTS, hosts=ONE_HOST, element_sd=0.2, noise_sd=0.03, seed=5)
    table = observe(world, expensive_fraction=0.3, absent=(), seed=5)
    errors = {}
    for correction in (True, False):
        model = Surrogate(learner="gp", correction=correction, n_folds=3, random_state=0).fit(table)
        scores = _scored(model, world)
        expensive = scores[scores["method"] == "hyb"]
        errors[correction] = np.mean(np.abs(expensive["value"] - expensive["truth"]))
    assert errors[True] < 0.7 * errors[False], errors


def test_site_preference_is_decided_where_energies_are_far_apart():
    """Two sites, one element far below, one near a tie (constructed case)."""
    rows = []
    for element, sub, interstitial in [("Fe", 1.0, 3.0), ("Cu", 2.0, 2.02), ("Ni", 1.5, 2.5), ("Zn", 1.2, 3.1),
                                       ("Co", 1.4, 2.6), ("Mn", 1.1, 2.9), ("Cr", 1.3, 2.7), ("V", 1.6, 2.4),
                                       ("Ti", 1.7, 2.5)]:
        rows.append({"element": element, "host": "C", "site": "sub_C", "method": "gga", "quantity": "E_sol", "value": sub})
        rows.append({"element": element, "host": "C", "site": "int_tet", "method": "gga", "quantity": "E_sol", "value": interstitial})
    table = pd.DataFrame(rows)
    model = Surrogate(learner="gp", n_folds=3, random_state=0).fit(table)
    preference = site_preference(model, element_symbols=["Fe", "Cu", "Sc"], n_samples=2000)
    probability = preference.set_index(["element", "site"])["p_lowest"]
    assert probability[("Fe", "sub_C")] == 1.0  # both computed: decided
    assert probability[("Cu", "sub_C")] == 1.0  # computed, even if close: the table's own values
    # Sc never computed: checked against the exact normal formula in test_outside_formulas


@pytest.mark.parametrize(
    "options, message",
    [
        ({"learner": "forest"}, "Unknown learner 'forest'"),
        ({"levels": ["gga", "lda"]}, "--levels names lda"),
        ({"levels": ["hyb"]}, "--levels leaves out gga"),
        ({"descriptors": ["shoe_size"]}, "Unknown descriptor(s) shoe_size"),
    ],
)
def test_bad_options_are_explained(rough, options, message):
    table = rough[1]
    with pytest.raises(DopantgapError, match=message.replace("(", r"\(").replace(")", r"\)")):
        Surrogate(**options).fit(table)


def test_prediction_outside_the_table_is_refused(rough):
    model = rough[2]
    cells = pd.DataFrame([{"element": "Fe", "host": "ZnS", "site": "sub_Zn", "method": "gga", "quantity": "E_mig"}])
    with pytest.raises(DopantgapError, match="no data for quantity 'E_mig'"):
        model.predict(cells)


def test_upgrade_residuals_come_from_elements_computed_at_both_levels(rough):
    """The upgrade loop predicts an expensive cell from its own computed cheap level."""
    _world, table, model, _scores = rough
    upgrade = model.cv_residuals_[model.cv_residuals_["scenario"] == "upgrade"]
    cheap = table[table["method"] == "gga"].set_index(["element", "host", "site", "quantity"])["value"]
    both = set(table.loc[table["method"] == "hyb", "element"]) & set(cheap.index.get_level_values(0))
    assert len(upgrade) > 20
    assert set(upgrade["element"]) <= both
    keys = list(zip(upgrade["element"], upgrade["host"], upgrade["site"], upgrade["quantity"]))
    assert all(key in cheap.index for key in keys)
    # every element computed at both levels is held out once, and only once per cell
    assert not upgrade.duplicated(["element", "host", "site", "quantity"]).any()


def test_fit_reports_progress_once_per_fit_folds_included():
    from dopantgap.surrogate.crossval import planned_fits
    from dopantgap.table import REQUIRED_COLUMNS

    world = invent_world(ELEMENTS[:14], hosts=ONE_HOST, seed=3)
    table = observe(world, expensive_fraction=0.3, absent=(), seed=3)

    class Counter:
        steps = 0

        def update(self, n=1):
            self.steps += n

    counter = Counter()
    model = Surrogate(learner="auto", n_folds=2, random_state=0).fit(table, progress=counter)
    core = model.table_[list(REQUIRED_COLUMNS)].reset_index(drop=True)
    planned = sum(planned_fits(model, core, name) for name in ("gp", "boost"))
    # per learner: the full fit, 2 main folds and the upgrade loop's folds
    assert counter.steps == planned > 2 * (1 + 2)


def test_refreshed_model_reoptimises_only_stages_that_outgrew_their_hyperparameters(rough):
    """Recorded rounds and replay relearn with the fitted kernels; a stage grown past
    ``_REOPTIMISE_GROWTH`` times the rows its kernel was tuned on gets a new one."""
    world, table, model, _ = rough
    stage_key = ("E_sol", "hyb")
    before = model.stages_[stage_key]
    tuned = before.tuned_rows
    assert tuned == len(model._stage_rows(table[["element", "host", "site", "method", "quantity", "value"]],
                                          "E_sol", 1)[0])
    computed = set(table["element"])
    hyb_computed = set(table.loc[table["method"] == "hyb", "element"])
    fresh_elements = [e for e in dict.fromkeys(world["element"]) if e in computed and e not in hyb_computed]
    hyb = world[(world["method"] == "hyb") & (world["quantity"] == "E_sol")]

    def grown_by(n_elements):
        added = hyb[hyb["element"].isin(fresh_elements[:n_elements])]
        return pd.concat([table, added[table.columns.intersection(added.columns)]], ignore_index=True)

    def process(stage):
        # the expensive stage is a correction: a shift prior around the Gaussian process
        return getattr(stage.learner, "residual_learner_", stage.learner)

    one = model.refreshed(grown_by(1))
    assert process(one.stages_[stage_key]).fixed_kernel is not None  # a few cells: kernel kept
    assert one.stages_[stage_key].tuned_rows == tuned
    many = grown_by(len(fresh_elements))
    grown_rows = len(model._stage_rows(many[["element", "host", "site", "method", "quantity", "value"]], "E_sol", 1)[0])
    assert grown_rows > 1.25 * tuned
    refreshed = model.refreshed(many)
    assert process(refreshed.stages_[stage_key]).fixed_kernel is None  # re-optimised
    assert refreshed.stages_[stage_key].tuned_rows == grown_rows
    # the cheap stage did not grow: its kernel is reused untouched
    cheap = refreshed.stages_[("E_sol", "gga")]
    assert cheap.learner.fixed_kernel is not None
    assert cheap.tuned_rows == model.stages_[("E_sol", "gga")].tuned_rows


@pytest.mark.parametrize("n_expensive", [1, 12])
def test_upgrade_follows_the_level_shift_rule_with_one_expensive_element_and_the_data_with_many(n_expensive):
    """Invented world (dopantgap.world, not DFT data). With one element at the expensive
    level, every upgrade estimate lies within its stated std of the level-shift rule (cheap
    value plus the column's usual shift; baselines.level_shift_baseline). With twelve, the
    correction is learned and beats that rule against the world's truth."""
    from dopantgap.baselines import level_shift_baseline

    hosts = {"ZnS": ("sub_Zn", "int_tet_Zn", "int_hex")}
    world = invent_world(element_symbols=DEMO_ELEMENTS[:40], hosts=hosts, seed=7)
    table = observe(world, missing_fraction=0.1, n_expensive=n_expensive, seed=7)
    model = Surrogate(learner="gp", random_state=0).fit(table)
    grid = world[world["method"] == "hyb"][list(KEY_COLUMNS)].reset_index(drop=True)
    filled = model.predict(grid)
    upgrade = filled[filled["scenario"] == "upgrade"].reset_index(drop=True)
    rule = level_shift_baseline(table, upgrade[list(KEY_COLUMNS)], ["gga", "hyb"])
    truth = upgrade.merge(world, on=list(KEY_COLUMNS), suffixes=("", "_world"))["truth"].to_numpy()
    if n_expensive == 1:
        assert np.all(np.abs(upgrade["value"] - rule) <= upgrade["std"])
    else:
        assert np.mean(np.abs(upgrade["value"] - truth)) < 0.8 * np.mean(np.abs(rule - truth))

