"""Breakdowns of out-of-fold residuals: per element, per group of elements, per fold.

Every frame here is built by hand (no surrogate is fitted), so each figure can be
worked out on paper. With fewer than 20 residuals, ``ScenarioCalibration`` pools all
the other folds' |z|, and for n <= 18 of them the 90 % half-width multiplier is the
largest of them (rank ceil(0.9 (n + 1)) > n, so the Gaussian quantile times
``std_scale`` = max|z| / z_0.95 is used) and the std scale is max|z| / z_0.95.
"""

import math
import re
from types import SimpleNamespace

import numpy as np
import pandas as pd
import pytest

from dopantgap.breakdown import (
    ELEMENT_COLUMNS,
    FOLD_COLUMNS,
    GROUP_COLUMNS,
    breakdown_text,
    element_breakdown,
    fold_honesty,
    group_breakdown,
)
from dopantgap.calibration import cross_conformal_covered, fit_calibration
from dopantgap.domain import ElementDomain
from dopantgap.validate import ValidationResult, validation_metrics

# standard normal 95th percentile, scipy.stats.norm.ppf(0.95) (the two-sided 90 % quantile)
Z_95 = 1.6448536269514722


def _residuals(cells):
    """Residual frame from (element, fold, error, raw_std[, scenario]) tuples; one host,
    site, method and quantity unless the scenario is given."""
    records = []
    for position, cell in enumerate(cells):
        element, fold, error, raw_std = cell[:4]
        scenario = cell[4] if len(cell) > 4 else "new-element"
        records.append({
            "element": element, "host": "MgO", "site": f"site_{position}", "method": "gga",
            "quantity": "E_sol", "value": 1.0 + error, "scenario": scenario, "fold": fold,
            "mean": 1.0, "error": error, "raw_std": raw_std,
        })
    return pd.DataFrame(records)


# fold 0 hides Fe (every cell far off) and Cu; folds 1 and 2 have |z| at most 0.5, so
# fold 0's half-width multiplier is 0.5 and Fe's cells (|z| = 5, 4, 5) all lie outside
MISSES = _residuals([
    ("Fe", 0, 5.0, 1.0), ("Fe", 0, -4.0, 1.0), ("Fe", 0, 5.0, 1.0),
    ("Cu", 0, 0.1, 1.0), ("Cu", 0, -0.2, 1.0),
    ("Ni", 1, 0.3, 1.0), ("Ni", 1, -0.2, 1.0), ("Zn", 1, 0.5, 1.0),
    ("Ga", 2, 0.4, 1.0), ("Ga", 2, -0.1, 1.0), ("Al", 2, 0.2, 1.0),
])


def test_element_with_every_cell_outside_comes_first_with_hand_computed_figures():
    table = element_breakdown(MISSES)
    assert tuple(table.columns) == ELEMENT_COLUMNS
    first = table.iloc[0]
    assert first["element"] == "Fe" and first["scenario"] == "new-element"
    assert (first["n"], first["n_outside"], first["coverage"]) == (3, 3, 0.0)
    assert first["mae"] == pytest.approx((5 + 4 + 5) / 3)
    # largest |z| 5 over the other folds' largest |z| 0.5
    assert first["worst_ratio"] == pytest.approx(10.0)
    assert first["worst_error"] == pytest.approx(5.0)
    assert first["worst_cell"] == "MgO site_0 gga E_sol"
    # every other element is inside: folds 1 and 2 are judged by widths that include Fe's 5
    rest = table.iloc[1:]
    assert (rest["coverage"] == 1.0).all() and (rest["n_outside"] == 0).all()
    assert set(rest["element"]) == {"Cu", "Ni", "Zn", "Ga", "Al"}
    # Cu: fold 0's multiplier is 0.5, its largest |z| 0.2
    assert table.set_index("element").at["Cu", "worst_ratio"] == pytest.approx(0.4)


@pytest.mark.parametrize("adaptive", [False, True])
def test_ratio_above_one_exactly_when_the_cross_conformal_flag_says_outside(adaptive):
    """The ratio is judged against the same widths as ``covered``, cell by cell, also
    when the residuals carry difficulty features and the widths differ per cell."""
    rng = np.random.default_rng(3)
    cells = [
        # element E2's errors are four times wider, so it has misses to find
        (f"E{index % 9}", index % 4, float(rng.normal(0, 4 if index % 9 == 2 else 1)), float(rng.uniform(0.5, 1.5)))
        for index in range(60)
    ]
    rows = _residuals(cells)
    rows["z"] = rows["error"] / rows["raw_std"]
    if adaptive:
        # E2 lies far from the others and has few cells: the difficulty model learns it
        far = (rows["element"] == "E2").to_numpy()
        rows["domain_ratio"] = np.where(far, 2.0, 0.5) + rng.uniform(0, 0.2, len(rows))
        rows["element_cells"] = np.where(far, 1, 6)
        assert np.any(fit_calibration(rows, "z").difficulty_["new-element"].slopes_ > 0)
    covered = cross_conformal_covered(rows, "z", 0.9)
    table = element_breakdown(rows)
    outside_by_element = (~pd.Series(covered)).groupby(rows["element"]).sum()
    indexed = table.set_index("element")
    for element, n_outside in outside_by_element.items():
        assert indexed.at[element, "n_outside"] == n_outside
        assert (indexed.at[element, "worst_ratio"] > 1.0) == (n_outside > 0)
    assert table["coverage"].is_monotonic_increasing


def test_given_covered_flags_are_used_as_they_are():
    rows = MISSES.assign(covered=True)
    rows.loc[rows["element"] == "Zn", "covered"] = False
    table = element_breakdown(rows)
    assert table.iloc[0]["element"] == "Zn" and table.iloc[0]["coverage"] == 0.0
    assert table.set_index("element").at["Fe", "coverage"] == 1.0


# seven elements of four blocks; new-cell cells carry distance 0 (their element is in the
# fold's training table), new-element cells the element's distance from the others
_DISTANCES = {"Li": 0.9, "Na": 0.1, "B": 0.5, "N": 0.3, "Fe": 0.2, "Cu": 0.7, "Ce": 1.4}


def _with_distances():
    cells, distances = [], []
    for fold, (element, distance) in enumerate(_DISTANCES.items()):
        error = 0.1 * (fold + 1)
        cells += [(element, fold, error, 1.0), (element, fold, -error, 1.0), (element, 9, error, 1.0, "new-cell")]
        distances += [distance, distance, 0.0]
    return _residuals(cells).assign(domain_distance=distances)


def test_terciles_split_elements_into_three_near_equal_groups_by_distance():
    groups = group_breakdown(_with_distances())
    assert tuple(groups.columns) == GROUP_COLUMNS
    terciles = groups[(groups["kind"] == "distance tercile") & (groups["scenario"] == "new-element")]
    assert list(terciles["group"]) == ["near", "middle", "far"]
    # seven elements: 3, 2, 2 (numpy.array_split)
    assert list(terciles["n_elements"]) == [3, 2, 2]
    # sorted by the largest per-cell distance: Na 0.1, Fe 0.2, N 0.3 | B 0.5, Cu 0.7 | Li 0.9, Ce 1.4
    assert list(terciles["distance_min"]) == [0.1, 0.5, 0.9]
    assert list(terciles["distance_max"]) == [0.3, 0.7, 1.4]
    far = terciles.set_index("group").loc["far"]
    # Li (fold 0, |error| 0.1) and Ce (fold 6, |error| 0.7), two cells each
    assert far["n"] == 4 and far["mae"] == pytest.approx((0.1 + 0.7) / 2)


def test_blocks_follow_the_periodic_table():
    groups = group_breakdown(_with_distances())
    blocks = groups[(groups["kind"] == "block") & (groups["scenario"] == "new-element")]
    assert list(blocks["group"]) == ["s", "p", "d", "f"]
    assert list(blocks["n_elements"]) == [2, 2, 2, 1]
    f_block = blocks.set_index("group").loc["f"]
    # Ce alone: fold 6, errors +-0.7
    assert f_block["n"] == 2 and f_block["mae"] == pytest.approx(0.7)
    new_cell = groups[(groups["kind"] == "block") & (groups["scenario"] == "new-cell")]
    assert new_cell["n"].sum() == len(_DISTANCES)


def test_without_a_distance_column_the_leave_one_out_domain_distance_is_used():
    rows = _with_distances().drop(columns="domain_distance")
    domain = ElementDomain().fit(list(_DISTANCES))
    expected = pd.Series(domain.loo_distances_, index=domain.symbols_)
    # ElementDomain.distance would be 0 for each of them: they are its training elements
    assert (domain.distance(list(_DISTANCES)) == 0).all() and (expected > 0).all()
    groups = group_breakdown(rows, domain=domain)
    terciles = groups[(groups["kind"] == "distance tercile") & (groups["scenario"] == "new-element")]
    ranked = expected.sort_values(kind="mergesort")
    assert list(terciles["distance_min"]) == pytest.approx([ranked.iloc[0], ranked.iloc[3], ranked.iloc[5]])
    assert list(terciles["distance_max"]) == pytest.approx([ranked.iloc[2], ranked.iloc[4], ranked.iloc[6]])
    # with no domain given, one is fitted on the residuals' elements: the same figures
    pd.testing.assert_frame_equal(group_breakdown(rows), groups)


def test_the_distance_column_survives_validation_and_is_preferred():
    """A surrogate whose residuals carry domain_distance: predictions keep the column and
    the groups use it (the stand-in has no element_domain, so a fallback would fail)."""
    residuals = _with_distances()
    residuals["z"] = residuals["error"] / residuals["raw_std"]
    stand_in = SimpleNamespace(learner_="gp", cv_residuals_=residuals, cv_residuals_by_learner_={"gp": residuals})
    metrics, predictions = validation_metrics(stand_in, baselines=())
    assert "domain_distance" in predictions
    result = ValidationResult(metrics=metrics, predictions=predictions, surrogate=stand_in)
    groups = group_breakdown(result)
    far = groups[(groups["group"] == "far") & (groups["scenario"] == "new-element")]
    assert far["distance_max"].iat[0] == 1.4


FOLDS = _residuals([
    ("Fe", 0, 0.2, 0.1), ("Fe", 0, -0.4, 0.2),   # z 2, -2
    ("Cu", 1, 0.3, 0.1), ("Cu", 1, 0.3, 0.3),    # z 3, 1
    ("Ni", 2, -0.1, 0.1),                        # z -1
])


def test_fold_honesty_ratio_equals_the_hand_computed_value():
    folds = fold_honesty(FOLDS).set_index("fold")
    assert tuple(folds.reset_index().columns) == FOLD_COLUMNS
    # fold 0: the other folds' largest |z| is 3, so std_scale = 3 / z_0.95;
    # real RMSE = sqrt((0.2^2 + 0.4^2) / 2) = sqrt(0.1)
    # claimed RMSE = std_scale * sqrt((0.1^2 + 0.2^2) / 2) = std_scale * sqrt(0.025)
    scale = 3 / Z_95
    assert folds.at[0, "real_rmse"] == pytest.approx(math.sqrt(0.1))
    assert folds.at[0, "claimed_rmse"] == pytest.approx(scale * math.sqrt(0.025))
    assert folds.at[0, "ratio"] == pytest.approx(2 * Z_95 / 3)
    # fold 1: other folds' largest |z| is 2; real 0.3, claimed (2 / z_0.95) sqrt(0.05)
    assert folds.at[1, "ratio"] == pytest.approx(0.3 / (2 / Z_95 * math.sqrt(0.05)))
    assert folds.at[0, "elements"] == "Fe" and folds.at[0, "n"] == 2
    # fold 1 (z 3 and 1) against the others' largest |z| 2: one cell outside
    assert folds.at[1, "coverage"] == 0.5


def test_claimed_error_includes_each_cells_difficulty():
    """With difficulty features, the claimed std is raw_std * std_scale * difficulty of a
    calibration fitted on the other folds (the calibrated std ``Surrogate.predict`` gives)."""
    rng = np.random.default_rng(4)
    far = np.arange(80) % 8 == 3
    rows = _residuals([
        (f"E{index % 8}", index % 4, float(rng.normal(0, 3 if far[index] else 1)), 1.0) for index in range(80)
    ])
    rows["domain_ratio"] = np.where(far, 2.0, 0.4) + rng.uniform(0, 0.2, len(rows))
    rows["element_cells"] = 4
    rows["z"] = rows["error"]
    folds = fold_honesty(rows).set_index("fold")
    for fold in range(4):
        inside = (rows["fold"] == fold).to_numpy()
        calibration = fit_calibration(rows[~inside], "z")
        difficulty = calibration.difficulty("new-element", rows[inside])
        if far[inside].any():
            assert np.ptp(difficulty) > 0.1  # the widths really differ from cell to cell
        claimed = calibration.std_scale("new-element", "E_sol") * difficulty
        assert folds.at[fold, "claimed_rmse"] == pytest.approx(float(np.sqrt(np.mean(claimed**2))))
    assert far[(rows["fold"] == 3).to_numpy()].any()  # the check above ran at least once


def test_fold_honesty_counts_only_the_chosen_scenario():
    rows = pd.concat([FOLDS, _residuals([("Zn", 3, 9.0, 0.1, "new-cell")])], ignore_index=True)
    folds = fold_honesty(rows)
    assert list(folds["fold"]) == [0, 1, 2]
    # the new-cell cell of fold 3 still widens the other folds' calibration (|z| 90)
    assert folds.set_index("fold").at[0, "claimed_rmse"] == pytest.approx(90 / Z_95 * math.sqrt(0.025))
    assert list(fold_honesty(rows, scenario="new-cell")["fold"]) == [3]


def test_summary_names_the_worst_elements_in_plain_words():
    text = breakdown_text(element_breakdown(MISSES), group_breakdown(_with_distances()), fold_honesty(FOLDS))
    lines = text.splitlines()
    assert lines[0].startswith("Elements whose 90 % intervals failed most")
    assert lines[1].split()[0] == "Fe"
    assert "3 of 3 cells outside (0 % inside)" in lines[1]
    assert "10.0 times the interval's half-width" in lines[1]
    assert "Cu" not in text.split("Elements never seen")[0]  # inside its interval: not named
    assert "near" in text and "far" in text
    median = np.median([2 * Z_95 / 3, 0.3 / (2 / Z_95 * math.sqrt(0.05)), fold_honesty(FOLDS)["ratio"].iat[2]])
    assert f"median {median:.2f}" in text
    assert "Worst: the fold hiding" in text


def test_summary_names_at_most_five_elements_and_says_when_none_failed():
    symbols = ["Li", "Be", "B", "C", "N", "O", "F", "Na", "Mg", "Al", "P", "S", "Cl", "K", "Ca", "Sc"]
    rows = _residuals([(symbol, index, 1.0, 1.0) for index, symbol in enumerate(symbols)])
    # eight elements missed, given as flags: the summary reads them, not the widths
    rows["covered"] = [False] * 8 + [True] * 8
    table = element_breakdown(rows)
    text = breakdown_text(table, group_breakdown(rows), fold_honesty(rows), count=5)
    named = [line.split()[0] for line in text.splitlines() if line.startswith("  ") and "cells outside" in line]
    assert len(named) == 5 and set(named) <= set(symbols[:8])
    calm = breakdown_text(element_breakdown(MISSES).assign(n_outside=0), pd.DataFrame(columns=GROUP_COLUMNS),
                          pd.DataFrame(columns=FOLD_COLUMNS))
    assert calm == "Every hidden cell lay inside its 90 % interval: no element stands out.\n"


def test_residuals_without_the_needed_columns_are_refused():
    with pytest.raises(ValueError, match=re.escape("lack the column(s) raw_std")):
        element_breakdown(MISSES.drop(columns="raw_std"))
    with pytest.raises(ValueError, match="several models"):
        fold_honesty(pd.concat([MISSES.assign(model="gp"), MISSES.assign(model="boost")]))
