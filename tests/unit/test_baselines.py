"""Tests of dopantgap.baselines: each reference rule against hand-computed values.

All hosts, sites and energies below are invented for the tests (host ZnS, and host C
for an unseen column); none is a computed or measured value.
"""

import numpy as np
import pandas as pd
import pandas.testing as pdt
import pytest
from sklearn.ensemble import HistGradientBoostingRegressor

from dopantgap.baselines import (
    BASELINES,
    BASELINE_SCENARIOS,
    baseline_applies,
    boosted_trees_baseline,
    column_mean_baseline,
    group_neighbour_baseline,
    level_shift_baseline,
    predict_baseline,
)
from dopantgap.elements import descriptor_table
from dopantgap.errors import DopantgapError
from dopantgap.symbols import SYMBOLS
from dopantgap.table import KEY_COLUMNS

LEVELS = ["gga", "hyb"]
FORMATION = "formation_energy"
LEVEL = "transition_level"

# (element, host, site, method, quantity, value); invented numbers chosen to be easy to add.
_ROWS = [
    ("B", "ZnS", "sub_Zn", "gga", FORMATION, 1.0),
    ("Al", "ZnS", "sub_Zn", "gga", FORMATION, 2.0),
    ("In", "ZnS", "sub_Zn", "gga", FORMATION, 4.0),
    ("Zn", "ZnS", "sub_Zn", "gga", FORMATION, 0.5),
    ("Cd", "ZnS", "sub_Zn", "gga", FORMATION, 0.7),
    ("B", "ZnS", "sub_Zn", "hyb", FORMATION, 1.5),
    ("Al", "ZnS", "sub_Zn", "hyb", FORMATION, 2.8),
    ("In", "ZnS", "sub_Zn", "hyb", FORMATION, 4.4),
    ("Al", "ZnS", "int_hex", "gga", FORMATION, 3.0),
    ("Ga", "ZnS", "int_hex", "gga", FORMATION, 3.5),
    ("Cd", "ZnS", "int_hex", "gga", FORMATION, 1.0),
    ("Al", "ZnS", "int_hex", "hyb", FORMATION, 3.6),
    ("Zn", "C", "sub_C", "gga", FORMATION, 2.2),
    ("Ga", "ZnS", "sub_Zn", "gga", LEVEL, 0.3),
    ("In", "ZnS", "sub_Zn", "gga", LEVEL, 0.9),
]


def make_training():
    frame = pd.DataFrame(_ROWS, columns=list(KEY_COLUMNS) + ["value"])
    frame["note"] = "invented"  # an extra column the baselines must ignore
    return frame


def make_cells(*keys):
    return pd.DataFrame(list(keys), columns=list(KEY_COLUMNS))


@pytest.fixture()
def training():
    return make_training()


def column_values(frame, **match):
    rows = np.ones(len(frame), dtype=bool)
    for column, wanted in match.items():
        rows &= (frame[column] == wanted).to_numpy()
    return frame.loc[rows, "value"].to_numpy()


# ------------------------------------------------------------------ column mean
def test_column_mean_equals_numpy_mean_of_the_column(training):
    cells = make_cells(("Ga", "ZnS", "sub_Zn", "gga", FORMATION), ("Ga", "ZnS", "int_hex", "hyb", FORMATION))
    mean = predict_baseline("column-mean baseline", training, cells, LEVELS)
    # Reference: numpy.mean of the column's training values; by hand (1+2+4+0.5+0.7)/5 = 1.64.
    expected = np.mean(column_values(training, host="ZnS", site="sub_Zn", method="gga", quantity=FORMATION))
    assert mean[0] == pytest.approx(expected, abs=1e-12)
    assert mean[0] == pytest.approx(1.64, abs=1e-12)
    assert mean[1] == pytest.approx(3.6, abs=1e-12)  # the column's only value


def test_column_mean_fallbacks_method_quantity_then_quantity_then_all(training):
    cells = make_cells(
        ("Ga", "MgO", "sub_Mg", "gga", FORMATION),   # unseen column: (gga, formation) mean
        ("Ga", "MgO", "sub_Mg", "scan", FORMATION),  # unseen method: formation mean
        ("Ga", "MgO", "sub_Mg", "gga", "band_gap"),  # unseen quantity: mean of all values
    )
    mean = column_mean_baseline(training, cells)
    gga_formation = [1.0, 2.0, 4.0, 0.5, 0.7, 3.0, 3.5, 1.0, 2.2]
    formation = gga_formation + [1.5, 2.8, 4.4, 3.6]
    everything = formation + [0.3, 0.9]
    assert mean == pytest.approx([np.mean(gga_formation), np.mean(formation), np.mean(everything)], abs=1e-12)


def test_column_mean_averages_repeated_cells_and_skips_non_finite_values(training):
    extra = pd.DataFrame(
        [("Ga", "ZnS", "int_hex", "hyb", FORMATION, 4.0), ("Ga", "ZnS", "int_hex", "hyb", FORMATION, np.nan)],
        columns=list(KEY_COLUMNS) + ["value"],
    )
    grown = pd.concat([training, extra], ignore_index=True)
    mean = column_mean_baseline(grown, make_cells(("B", "ZnS", "int_hex", "hyb", FORMATION)))
    assert mean == pytest.approx([(3.6 + 4.0) / 2], abs=1e-12)


# -------------------------------------------------------------- group neighbour
def test_periodic_groups_match_iupac():
    # Outside check: IUPAC, Nomenclature of Inorganic Chemistry, Recommendations 2005
    # (Red Book), periodic table of the front matter: Al, Ga, In in group 13; Zn, Cd in 12.
    groups = descriptor_table(["Al", "Ga", "In", "Zn", "Cd"])["group"].to_numpy()
    assert groups.tolist() == [13, 13, 13, 12, 12]


def test_group_neighbour_tie_goes_to_the_lighter_element(training):
    # Ga (Z 31) in sub_Zn/gga: group-13 neighbours B (5), Al (13), In (49);
    # Al and In are both 18 away, so the lighter Al wins: 2.0, not In's 4.0.
    mean = group_neighbour_baseline(training, make_cells(("Ga", "ZnS", "sub_Zn", "gga", FORMATION)))
    assert mean == pytest.approx([2.0], abs=1e-12)


def test_group_neighbour_without_tie_picks_the_nearest(training):
    cells = make_cells(
        ("In", "ZnS", "sub_Zn", "hyb", FORMATION),  # In 49: Al (13) 36 away, B (5) 44 away -> Al 2.8
        ("Tl", "ZnS", "sub_Zn", "gga", FORMATION),  # Tl 81: In (49) nearest -> 4.0
        ("Zn", "ZnS", "int_hex", "gga", FORMATION),  # Zn 30, group 12: Cd (48) -> 1.0
        ("Ga", "ZnS", "int_hex", "hyb", FORMATION),  # only Al in that column -> 3.6
    )
    mean = predict_baseline("group-neighbour baseline", training, cells, LEVELS)
    assert mean == pytest.approx([2.8, 4.0, 1.0, 3.6], abs=1e-12)


def test_group_neighbour_never_uses_the_cells_own_element(training):
    # Al's own sub_Zn/gga value 2.0 is in training; its nearest other group-13
    # element there is B (8 away; In is 36 away): 1.0.
    mean = group_neighbour_baseline(training, make_cells(("Al", "ZnS", "sub_Zn", "gga", FORMATION)))
    assert mean == pytest.approx([1.0], abs=1e-12)


def test_group_neighbour_falls_back_on_the_column_mean(training):
    cells = make_cells(
        ("Zn", "ZnS", "int_hex", "hyb", FORMATION),  # no group-12 element in that column
        ("Cd", "ZnS", "sub_Zn", "hyb", FORMATION),
        ("Cd", "MgO", "sub_Mg", "gga", FORMATION),   # unseen column altogether
    )
    neighbour = group_neighbour_baseline(training, cells)
    assert neighbour == pytest.approx(column_mean_baseline(training, cells), abs=1e-12)
    assert neighbour[:2] == pytest.approx([3.6, np.mean([1.5, 2.8, 4.4])], abs=1e-12)


# ------------------------------------------------------------------ level shift
def test_level_shift_adds_the_mean_column_difference(training):
    cells = make_cells(
        ("Ga", "ZnS", "int_hex", "hyb", FORMATION),  # 3.5 + (3.6 - 3.0)
        ("Zn", "ZnS", "sub_Zn", "hyb", FORMATION),   # 0.5 + mean(0.5, 0.8, 0.4)
    )
    mean = predict_baseline("level-shift baseline", training, cells, LEVELS)
    assert mean == pytest.approx([3.5 + 0.6, 0.5 + (0.5 + 0.8 + 0.4) / 3], abs=1e-12)


def test_level_shift_fallbacks(training):
    cells = make_cells(
        ("Zn", "C", "sub_C", "hyb", FORMATION),       # no pair in the column: pooled formation/hyb pairs
        ("Ga", "ZnS", "sub_Zn", "hyb", LEVEL),        # no hyb pair for this quantity at all: shift 0
        ("Ga", "ZnS", "sub_Zn", "gga", FORMATION),    # cheapest level: column mean
        ("Cd", "ZnS", "int_hex", "hyb", FORMATION),   # has a gga twin (1.0) -> shifted, not column mean
        ("B", "ZnS", "int_hex", "hyb", FORMATION),    # no gga twin: column mean 3.6
        ("Ga", "ZnS", "sub_Zn", "scan", FORMATION),   # method not in levels: column-mean rule
    )
    mean = level_shift_baseline(training, cells, LEVELS)
    pooled = np.mean([0.5, 0.8, 0.4, 0.6])
    expected = [
        2.2 + pooled,
        0.3 + 0.0,
        np.mean([1.0, 2.0, 4.0, 0.5, 0.7]),
        1.0 + 0.6,
        3.6,
        column_mean_baseline(training, cells.iloc[[5]])[0],
    ]
    assert mean == pytest.approx(expected, abs=1e-12)


def test_level_shift_uses_only_the_next_cheaper_level(training):
    three_levels = ["gga", "hyb", "rpa"]
    cells = make_cells(("Al", "ZnS", "sub_Zn", "rpa", FORMATION), ("In", "ZnS", "int_hex", "rpa", FORMATION))
    mean = level_shift_baseline(training, cells, three_levels)
    # Al has a hyb value (2.8) and no rpa pair exists: 2.8 + 0; In has no hyb int_hex value,
    # so no shift from gga is tried: the (rpa, formation) column mean falls back to formation.
    formation = column_values(training, quantity=FORMATION)
    assert mean == pytest.approx([2.8, np.mean(formation)], abs=1e-12)


def test_repeated_levels_are_refused(training):
    with pytest.raises(DopantgapError, match="twice"):
        predict_baseline("level-shift baseline", training, make_cells(("Ga", "ZnS", "sub_Zn", "hyb", LEVEL)),
                         ["gga", "gga"])


# ---------------------------------------------------------------- boosted trees
def linear_world():
    """One column whose value is exactly 0.01 x atomic number (invented), elements Z 1-80."""
    symbols = SYMBOLS[:80]
    frame = pd.DataFrame({"element": symbols, "host": "ZnS", "site": "sub_Zn", "method": "gga",
                          "quantity": FORMATION})
    frame["value"] = 0.01 * np.arange(1, 81)
    return frame


def test_boosted_trees_fits_a_linear_column():
    world = linear_world()
    mean = predict_baseline("boosted-trees baseline", world, world[list(KEY_COLUMNS)], LEVELS)
    truth = world["value"].to_numpy()
    assert not np.isnan(mean).any()
    errors = np.abs(mean - truth)
    # Default leaves hold at least 20 rows, so the ends are flattened; over a range of 0.8
    # a mean error below 0.04 and a worst error below 0.15 show the trend was learnt
    # (common practice, no source), far better than the column mean (mean error 0.2).
    assert errors.mean() < 0.04
    assert errors.max() < 0.15
    assert errors.mean() < 0.25 * np.mean(np.abs(truth - truth.mean()))


def test_boosted_trees_matches_scikit_learn_on_the_documented_features():
    # Reference library: scikit-learn HistGradientBoostingRegressor (Pedregosa et al.,
    # "Scikit-learn: Machine Learning in Python", JMLR 12, 2825-2830, 2011), fitted here on
    # the features the docstring states: atomic number + sorted one-hot host, site, method, quantity.
    world = linear_world()
    world.loc[world.index % 2 == 1, "site"] = "int_hex"
    world.loc[world.index % 2 == 1, "value"] += 0.5
    cells = make_cells(("Ga", "ZnS", "int_hex", "gga", FORMATION), ("Ga", "MgO", "sub_Mg", "gga", FORMATION))
    mean = boosted_trees_baseline(world, cells, random_state=3)

    def features(atomic_numbers, site_codes):
        rows = []
        for number, site in zip(atomic_numbers, site_codes):
            site_columns = [1.0 if site == "int_hex" else 0.0, 1.0 if site == "sub_Zn" else 0.0]
            rows.append([number, 1.0] + site_columns + [1.0, 1.0])  # host ZnS, gga, formation
        return np.array(rows)

    model = HistGradientBoostingRegressor(random_state=3)
    model.fit(features(np.arange(1, 81), world["site"]), world["value"].to_numpy())
    cell_features = features([31, 31], ["int_hex", "sub_Mg"])
    cell_features[1, 1] = 0.0  # unseen host MgO: all host indicators zero
    assert mean == pytest.approx(model.predict(cell_features), abs=1e-12)


def test_boosted_trees_is_repeatable_for_a_seed():
    world = linear_world()
    first = predict_baseline("boosted-trees baseline", world, world, LEVELS, random_state=7)
    second = predict_baseline("boosted-trees baseline", world, world, LEVELS, random_state=7)
    assert np.array_equal(first, second)


def test_boosted_trees_with_few_rows_is_the_column_mean(training):
    few = training.iloc[:4]  # four sub_Zn/gga rows
    cells = make_cells(("Ga", "ZnS", "sub_Zn", "gga", FORMATION), ("Ga", "ZnS", "int_hex", "gga", FORMATION))
    mean = predict_baseline("boosted-trees baseline", few, cells, LEVELS)
    assert mean == pytest.approx([np.mean([1.0, 2.0, 4.0, 0.5])] * 2, abs=1e-12)
    assert mean == pytest.approx(column_mean_baseline(few, cells), abs=1e-12)


# ------------------------------------------------------------------- data flow
def garbage_cells():
    cells = make_cells(
        ("Ga", "ZnS", "sub_Zn", "gga", FORMATION),
        ("Ga", "ZnS", "int_hex", "hyb", FORMATION),
        ("Zn", "ZnS", "sub_Zn", "hyb", FORMATION),
        ("Tl", "C", "sub_C", "hyb", LEVEL),
        ("Cd", "ZnS", "sub_Zn", "hyb", FORMATION),
        ("In", "ZnS", "int_hex", "gga", FORMATION),
    )
    cells.index = [50, 7, 3, 11, 0, 9]  # an index out of order must not reorder the output
    return cells


@pytest.mark.parametrize("name", BASELINES)
def test_cells_value_column_is_ignored(training, name):
    clean = garbage_cells()
    with_garbage = clean.assign(value=[1e6, -1e6, np.nan, 99.0, 0.0, 5.0])
    with_text = clean.assign(value=["x", "", "nan", "?", "1", "2"])
    expected = predict_baseline(name, training, clean, LEVELS)
    assert np.array_equal(predict_baseline(name, training, with_garbage, LEVELS), expected)
    assert np.array_equal(predict_baseline(name, training, with_text, LEVELS), expected)
    assert not np.isnan(expected).any()
    assert expected.dtype == np.float64 and expected.shape == (len(clean),)


@pytest.mark.parametrize("name", BASELINES)
def test_inputs_are_not_modified(training, name):
    cells = garbage_cells().assign(value=np.nan)
    cells["element"] = cells["element"].str.lower()  # lower case is accepted, and must stay lower case
    training_copy, cells_copy = training.copy(deep=True), cells.copy(deep=True)
    predict_baseline(name, training, cells, LEVELS)
    pdt.assert_frame_equal(training, training_copy)
    pdt.assert_frame_equal(cells, cells_copy)


@pytest.mark.parametrize("name", BASELINES)
def test_output_follows_cell_rows(training, name):
    cells = garbage_cells()
    whole = predict_baseline(name, training, cells, LEVELS)
    one_by_one = [predict_baseline(name, training, cells.iloc[[row]], LEVELS)[0] for row in range(len(cells))]
    assert whole == pytest.approx(one_by_one, abs=1e-12)


def test_extra_training_columns_are_ignored(training):
    cells = garbage_cells()
    for name in BASELINES:
        plain = predict_baseline(name, training.drop(columns="note"), cells, LEVELS)
        assert np.array_equal(predict_baseline(name, training, cells, LEVELS), plain)


def test_unknown_name_lists_the_baselines(training):
    with pytest.raises(DopantgapError) as caught:
        predict_baseline("median baseline", training, make_cells(("Ga", "ZnS", "sub_Zn", "gga", FORMATION)), LEVELS)
    message = str(caught.value)
    assert "median baseline" in message
    assert all(name in message for name in BASELINES)


def test_missing_column_and_bad_symbol_are_user_errors(training):
    with pytest.raises(DopantgapError, match="quantity"):
        predict_baseline("column-mean baseline", training, make_cells(("Ga", "ZnS", "sub_Zn", "gga", FORMATION))
                         .drop(columns="quantity"), LEVELS)
    with pytest.raises(DopantgapError, match="Xx"):
        predict_baseline("group-neighbour baseline", training, make_cells(("Xx", "ZnS", "sub_Zn", "gga", FORMATION)),
                         LEVELS)


def test_names_are_the_documented_ones():
    assert BASELINES == (
        "column-mean baseline", "group-neighbour baseline", "level-shift baseline", "boosted-trees baseline",
        "other-hosts baseline", "nearest-host baseline",
    )


def _host_training():
    rows = [
        ("Ti", "Cu", "sub", 1.0), ("Ti", "Ag", "sub", 2.0), ("Ti", "Ni", "sub", 4.0),
        ("V", "Cu", "sub", 0.5), ("V", "Ni", "sub", 1.5),
    ]
    return pd.DataFrame(
        [{"element": e, "host": h, "site": s, "method": "gga", "quantity": "Q", "value": v} for e, h, s, v in rows]
    )


def test_other_hosts_rule_is_the_impurity_mean_elsewhere_by_hand():
    """Ti in Au: mean of Ti in Cu, Ag, Ni = (1 + 2 + 4) / 3; Cr, never computed, falls
    back on the column rules (the table's mean at that method and quantity)."""
    cells = pd.DataFrame({"element": ["Ti", "Cr"], "host": "Au", "site": "sub", "method": "gga", "quantity": "Q"})
    found = predict_baseline("other-hosts baseline", _host_training(), cells, ["gga"])
    assert found[0] == pytest.approx(7.0 / 3.0)
    assert found[1] == pytest.approx((1.0 + 2.0 + 4.0 + 0.5 + 1.5) / 5.0)


def test_site_kinds_tie_differently_named_sites_together():
    training = pd.DataFrame({"element": "Ti", "host": ["MgO", "CaO"], "site": ["sub_Mg", "sub_Ca"],
                             "method": "gga", "quantity": "Q", "value": [1.0, 3.0]})
    cells = pd.DataFrame({"element": ["Ti"], "host": ["SrO"], "site": ["sub_Sr"], "method": "gga", "quantity": "Q"})
    kinds = {("MgO", "sub_Mg"): "cation", ("CaO", "sub_Ca"): "cation", ("SrO", "sub_Sr"): "cation"}
    found = predict_baseline("other-hosts baseline", training, cells, ["gga"], site_kinds=kinds)
    assert found[0] == pytest.approx(2.0)


def test_nearest_host_rule_takes_the_value_in_the_closest_host():
    """Pd's nearest host among Cu, Ag, Ni in the default host descriptors (mendeleev's
    data: electronegativity, covalent radius, valence electrons, first ionisation
    energy) is Ag, then Ni, then Cu. Ti in Pd takes Ti's value in Ag (2.0); V, not
    computed in Ag, takes its value in Ni (1.5)."""
    from dopantgap.domain import HostDomain
    from dopantgap.hosts import host_descriptor_table

    values = host_descriptor_table({h: {h: 1.0} for h in ("Cu", "Ag", "Ni", "Pd")})
    assert HostDomain().fit(values.loc[["Cu", "Ag", "Ni"]]).ranked(values.loc[["Pd"]]) == [["Ag", "Ni", "Cu"]]
    cells = pd.DataFrame({"element": ["Ti", "V"], "host": "Pd", "site": "sub", "method": "gga", "quantity": "Q"})
    found = predict_baseline("nearest-host baseline", _host_training(), cells, ["gga"], host_values=values)
    assert found.tolist() == pytest.approx([2.0, 1.5])


def test_level_shift_is_scored_in_the_upgrade_scenario_only(training):
    """Without the cheaper twin (a new element, or a cell with no cheaper level computed)
    the level-shift rule is the column mean, so validation lists it for upgrade only; the
    host rules are listed for new-host only."""
    from dopantgap.calibration import SCENARIOS

    assert [s for s in SCENARIOS if baseline_applies("level-shift baseline", s)] == ["upgrade"]
    for name in ("other-hosts baseline", "nearest-host baseline"):
        assert [s for s in SCENARIOS if baseline_applies(name, s)] == ["sparse-host", "new-host"]
    for name in BASELINES:
        if name not in BASELINE_SCENARIOS:
            assert all(baseline_applies(name, scenario) for scenario in SCENARIOS)
    no_twin = make_cells(("Ga", "ZnS", "sub_Zn", "hyb", FORMATION), ("B", "ZnS", "int_hex", "hyb", FORMATION))
    np.testing.assert_array_equal(
        level_shift_baseline(training, no_twin, LEVELS), column_mean_baseline(training, no_twin)
    )
