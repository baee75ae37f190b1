"""Replay: hiding rule, candidates, learning curves, savings, reproducibility, CLI."""

import json
import math

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from dopantgap.cli import main
from dopantgap.errors import DopantgapError, SuspectValueWarning
from dopantgap.replay import (
    CURVE_COLUMNS,
    SUMMARY_COLUMNS,
    chance_shares,
    hide_cells,
    random_picks,
    replay,
    replay_text,
    savings,
    write_replay,
)
from dopantgap.surrogate import Surrogate
from dopantgap.table import KEY_COLUMNS, write_table
from dopantgap.world import invent_world

pytestmark = pytest.mark.slow

ELEMENTS = ("Li", "B", "N", "Mg", "Al", "P", "Ti", "Fe", "Cu", "Ga", "As", "Sn", "Sb", "Ba", "W", "Pb")
ROUNDS, PER_ROUND, SEEDS = 2, 3, 2
COST = {"gga": 1.0, "hyb": 30.0}


def _keys(frame):
    return set(frame[list(KEY_COLUMNS)].itertuples(index=False, name=None))


@pytest.fixture(scope="module")
def completed():
    """An invented completed table (not DFT data); one element has only hyb cells,
    so that hiding leaves it with no visible cell at all."""
    world = invent_world(element_symbols=ELEMENTS, seed=3).drop(columns="truth")
    return world[~((world["element"] == "W") & (world["method"] == "gga"))].reset_index(drop=True)


@pytest.fixture(scope="module")
def result(completed):
    # no method given: the most costly one is replayed
    return replay(completed, goal=("table", "site"), rounds=ROUNDS, per_round=PER_ROUND, cost=COST,
                  n_random_seeds=SEEDS, random_state=4, keep_fraction=0.25,
                  estimator=Surrogate(learner="gp", n_folds=2), relearn="refresh")


def test_hiding_rule_keeps_the_cheap_level_and_a_few_expensive_elements(completed):
    visible, hidden, method = hide_cells(completed, method="hyb", keep_fraction=0.25, random_state=4)
    assert method == "hyb"
    assert set(hidden["method"]) == {"hyb"}
    assert _keys(visible[visible["method"] == "gga"]) == _keys(completed[completed["method"] == "gga"])
    kept = set(visible.loc[visible["method"] == "hyb", "element"])
    assert len(kept) == round(0.25 * len(ELEMENTS))
    assert not kept & set(hidden["element"])
    assert len(visible) + len(hidden) == len(completed)
    assert _keys(visible).isdisjoint(_keys(hidden))


def test_replay_never_reveals_a_visible_cell_and_picks_only_hidden_cells(completed, result):
    hidden = _keys(result.hidden)
    visible = _keys(completed) - hidden
    picked = _keys(result.picks)
    assert picked <= hidden
    assert picked.isdisjoint(visible)
    assert set(result.picks["method"]) == {"hyb"}
    # no strategy reveals a cell twice, and the revealed values are the completed table's
    for (strategy, _seed), part in result.picks.groupby(["strategy", "seed"]):
        assert len(_keys(part)) == len(part)
        # the site goal never pads a round with picks that decide nothing, so it may
        # reveal fewer cells than asked; the others always take a full round
        if strategy == "site":
            assert 0 < len(part) <= ROUNDS * PER_ROUND
        else:
            assert len(part) == ROUNDS * PER_ROUND
    merged = result.picks.merge(completed, on=list(KEY_COLUMNS), suffixes=("", "_completed"))
    assert len(merged) == len(result.picks)
    assert (merged["value"].to_numpy() == merged["value_completed"].to_numpy()).all()
    # W has no visible cell: it is a candidate only through element_symbols
    assert "W" in result.settings["elements_all_hidden"]


def test_curves_have_the_documented_columns_and_rounds(result):
    curves = result.curves
    assert tuple(curves.columns) == CURVE_COLUMNS
    assert sorted(set(curves["strategy"])) == ["random", "site", "table"]
    for (strategy, seed), part in curves.groupby(["strategy", "seed"]):
        assert part["round"].tolist() == list(range(ROUNDS + 1))
        revealed = part["n_revealed"].to_numpy()
        if strategy == "site":  # no padding: at most a full round each time
            assert revealed[0] == 0 and ((np.diff(revealed) >= 0) & (np.diff(revealed) <= PER_ROUND)).all()
            picked = result.picks[(result.picks["strategy"] == strategy) & (result.picks["seed"] == seed)]
            assert revealed[-1] == len(picked)
        else:
            assert revealed.tolist() == [PER_ROUND * r for r in range(ROUNDS + 1)]
        assert (part["n_hidden_left"] == result.settings["n_hidden"] - part["n_revealed"]).all()
        assert (part["cost_spent"] == COST["hyb"] * part["n_revealed"]).all()
    start = curves[curves["round"] == 0]
    # round 0 is the same model for every strategy
    assert start["error"].nunique() == 1 and start["decided"].nunique() == 1
    assert (curves["error"] > 0).all() and (curves["decided"] <= curves["n_site_questions"]).all()
    assert sorted(set(curves.loc[curves["strategy"] == "random", "seed"])) == list(range(SEEDS))
    assert tuple(result.summary.columns) == SUMMARY_COLUMNS
    assert len(result.summary) == 4


def test_random_strategy_with_a_fixed_seed_is_reproducible(completed, result):
    again = replay(completed, goal="table", rounds=ROUNDS, per_round=PER_ROUND, n_random_seeds=SEEDS, cost=COST,
                   random_state=4, keep_fraction=0.25, estimator=Surrogate(learner="gp", n_folds=2),
                   relearn="refresh")
    for frame_a, frame_b in ((result.picks, again.picks), (result.curves, again.curves)):
        kept_a = frame_a[frame_a["strategy"].isin(["random", "table"])].reset_index(drop=True)
        kept_b = frame_b.reset_index(drop=True)
        pd.testing.assert_frame_equal(kept_a, kept_b)
    other_seed = random_picks(100, 5, np.random.default_rng((4, 0)))
    assert other_seed == random_picks(100, 5, np.random.default_rng((4, 0)))


def test_random_picks_are_uniform_over_candidates():
    """Outside check: Pearson's chi-square goodness-of-fit test (K. Pearson 1900, Phil. Mag.
    50:157; scipy.stats.chisquare). Drawing 4 of 12 candidates without replacement, each
    candidate is included with probability 4/12; over 6000 draws the inclusion counts must
    fit the uniform expectation (p > 0.001; a fixed seed, so the test is deterministic)."""
    rng = np.random.default_rng(2024)
    counts = np.zeros(12)
    for _ in range(6000):
        chosen = random_picks(12, 4, rng)
        assert len(set(chosen)) == 4 and chosen == sorted(chosen)
        counts[chosen] += 1
    assert stats.chisquare(counts).pvalue > 1e-3
    # and a deliberately biased draw is caught by the same test
    biased = counts.copy()
    biased[0] *= 1.2
    assert stats.chisquare(biased, f_exp=np.full(12, biased.sum() / 12)).pvalue < 1e-3


def test_savings_interpolate_the_pickers_curve_to_randoms_final_figure():
    rows = []
    for seed, errors in enumerate([[1.0, 0.8, 0.6, 0.4], [1.0, 0.9, 0.7, 0.5], [1.0, 0.7, 0.5, 0.3]]):
        for number, error in enumerate(errors):
            rows.append({"strategy": "random", "seed": seed, "round": number, "n_revealed": 10 * number,
                         "error": error, "decided": number})
    for number, error in enumerate([1.0, 0.6, 0.35, 0.3]):
        rows.append({"strategy": "table", "seed": 0, "round": number, "n_revealed": 10 * number,
                     "error": error, "decided": 0})
    curves = pd.DataFrame(rows)
    error = savings(curves, "table", "error", cost_per_cell=30.0)
    # random median 1.0, 0.8, 0.6, 0.4: its final 0.4 is reached by the picker's curve
    # (1.0, 0.6, 0.35, 0.3) between 10 and 20 picks; reference: numpy.interp on the
    # decreasing curve (reversed to increasing x for interp)
    expected = float(np.interp(0.4, [0.35, 0.6], [20.0, 10.0]))
    assert math.isclose(error["picker_picks_to_match"], expected)
    assert math.isclose(error["picks_saved"], 30.0 - expected)
    assert math.isclose(error["cost_saved"], 30.0 * (30.0 - expected))
    assert math.isclose(error["ratio"], 0.3 / 0.4)
    assert error["note"] == ""
    # the picker decided nothing while random decided 3: never a negative saving
    decided = savings(curves, "table", "decided")
    assert math.isnan(decided["picker_picks_to_match"])
    assert decided["picks_saved"] == 0.0 and decided["cost_saved"] == 0.0
    assert "nothing saved" in decided["note"]


def test_savings_give_the_share_of_randoms_excess_removed_over_the_same_cells():
    def rows(strategy, seed, errors, floors):
        return [{"strategy": strategy, "seed": seed, "round": r, "n_revealed": 10 * r, "error": e, "decided": 0,
                 "floor_left": f} for r, (e, f) in enumerate(zip(errors, floors))]

    curves = pd.DataFrame(
        rows("random", 0, [1.0, 0.8, 0.6], [0.2, 0.2, 0.2]) + rows("random", 1, [1.0, 0.9, 0.7], [0.2, 0.2, 0.1])
        + rows("table", 0, [1.0, 0.7, 0.5], [0.2, 0.2, 0.2])
    )
    error = savings(curves, "table", "error", floor=0.2)
    # random's excesses over the floors of the cells they left: 0.6 - 0.2 and 0.7 - 0.1, median 0.5;
    # the picker's 0.5 - 0.2 = 0.3: 1 - 0.3 / 0.5 removed (by hand)
    assert math.isclose(error["share_removed"], 0.4) and error["floor"] == 0.2
    # random's quartile excesses by linear interpolation between its two seeds (Hyndman & Fan,
    # "Sample quantiles in statistical packages", 1996, definition 7): 0.45 and 0.55
    assert math.isclose(error["random_excess"], 0.5) and math.isclose(error["random_excess_spread"], 0.1)
    assert math.isclose(error["share_low"], 1 - 0.3 / 0.45) and math.isclose(error["share_high"], 1 - 0.3 / 0.55)
    assert math.isnan(savings(curves, "table", "decided", floor=0.2)["share_removed"])
    # two random seeds: one other seed is no median, so no range of chance is given
    assert math.isnan(error["chance_share_low"]) and math.isnan(error["chance_share_high"])
    # a picker that only left the easy cells behind is not credited for it
    easy = curves.copy()
    easy.loc[(easy["strategy"] == "table") & (easy["round"] == 2), "floor_left"] = 0.0
    assert math.isclose(savings(easy, "table", "error", floor=0.2)["share_removed"], 0.0, abs_tol=1e-12)


def test_the_share_is_flagged_unreadable_where_randoms_seeds_spread_as_much_as_its_excess(result):
    def rows(strategy, seed, final):
        return [{"strategy": strategy, "seed": seed, "round": r, "n_revealed": 10 * r, "error": e, "decided": 0,
                 "floor_left": 0.2} for r, e in enumerate([1.0, final])]

    def text_for(random_finals, picker_final=0.25):
        curves = pd.DataFrame(
            [row for seed, final in enumerate(random_finals) for row in rows("random", seed, final)]
            + rows("table", 0, picker_final)
        )
        summary = pd.DataFrame([savings(curves, "table", "error", floor=0.2)], columns=list(SUMMARY_COLUMNS))
        return replay_text(result.__class__(curves=curves, summary=summary, picks=result.picks,
                                            hidden=result.hidden, settings=result.settings))

    # random 0.01-0.09 eV above the floor: quartiles 0.04 apart, median excess 0.05
    lucky = text_for([0.21, 0.23, 0.25, 0.27, 0.29])
    assert "share of random's excess error removed" in lucky and "cannot be read" not in lucky
    assert "against random's quartile seeds the share is -67% to 29%" in lucky
    # random 0.01-0.29 eV above the floor, median 0.05: its seeds spread more than its excess
    unreadable = text_for([0.21, 0.24, 0.25, 0.45, 0.49])
    assert "cannot be read" in unreadable
    # a picker 0.05 below the floor gains more against the nearer seed: 1 + 0.05 / 0.03 and
    # 1 + 0.05 / 0.07, shown lowest first
    below = text_for([0.21, 0.23, 0.25, 0.27, 0.29], picker_final=0.15)
    assert "the share is 171% to 267%" in below
    # random's seeds as pickers (excesses 0.01-0.09, by hand): 1 - 0.09 / 0.04 = -125 % up to
    # 1 - 0.01 / 0.06 = 83 %; a share of 0 % lies inside, 200 % above, -200 % below
    assert "a picker no better than random reads -125% to 83% here" in lucky
    assert "inside it, so this replay cannot tell the picker from chance" in lucky
    assert "lies above that range" in below
    behind = text_for([0.21, 0.23, 0.25, 0.27, 0.29], picker_final=0.35)
    assert "lies below it: random picks did better here" in behind


def test_chance_shares_read_each_random_seed_against_the_others():
    # by hand: excesses 0.01, 0.03, 0.05, 0.07, 0.09; the others' medians 0.06, 0.06, 0.05,
    # 0.04, 0.04
    shares = chance_shares([0.01, 0.03, 0.05, 0.07, 0.09])
    np.testing.assert_allclose(shares, [1 - 0.01 / 0.06, 1 - 0.03 / 0.06, 0.0, 1 - 0.07 / 0.04, 1 - 0.09 / 0.04])
    assert len(chance_shares([0.01, 0.02])) == 0
    # others at the floor give no share rather than a division by zero
    # (0.0 and 0.0 read against a median of 0.1; 0.1 and 0.3 against one of 0.0: dropped)
    np.testing.assert_allclose(chance_shares([0.0, 0.0, 0.1, 0.3]), [1.0, 1.0])


def test_the_floor_lies_below_every_strategys_error_and_is_printed(result):
    floor = result.summary.loc[result.summary["metric"] == "error", "floor"]
    assert floor.nunique() == 1 and 0.0 < floor.iat[0]
    # with all but a fifth of the hidden cells known, the model does better than any
    # strategy that knows the visible cells and a handful of picks
    assert floor.iat[0] < result.curves["error"].min()
    assert "floor:" in replay_text(result) and "[" in replay_text(result)
    # before any pick every strategy hides every hidden cell: its floor is the whole floor
    start = result.curves[result.curves["round"] == 0]
    np.testing.assert_allclose(start["floor_left"], floor.iat[0], rtol=1e-12)
    assert (result.curves["floor_left"] < result.curves["error"]).all()


def test_write_replay_files(result, tmp_path):
    paths = write_replay(result, tmp_path / "out")
    for name in ("curves", "summary", "picks", "hidden", "settings"):
        assert paths[name].is_file()
    curves = pd.read_csv(paths["curves"])
    assert tuple(curves.columns) == CURVE_COLUMNS and len(curves) == len(result.curves)
    assert json.loads(paths["settings"].read_text())["method"] == "hyb"


@pytest.mark.parametrize(
    "options, word",
    [
        (["--rounds", "two"], "--rounds"),
        (["--per-round", "0"], "--per-round"),
        (["--goal", "fastest"], "--goal"),
        (["--method", "ccsd"], "--method"),
        (["--cost", "hyb"], "--cost"),
        (["--keep-fraction", "1.5"], "--keep-fraction"),
    ],
)
def test_cli_bad_input_is_one_line_and_status_2(completed, tmp_path, capsys, options, word):
    table_path = tmp_path / "completed.csv"
    write_table(completed, table_path)
    status = main(["replay", str(table_path), "--out", str(tmp_path / "out"), "--learner", "gp", *options])
    assert status == 2
    error = capsys.readouterr().err
    assert error.count("\n") == 1 and word in error


def test_cli_replay_end_to_end(tmp_path, capsys):
    world = invent_world(element_symbols=ELEMENTS[:10], seed=5).drop(columns="truth")
    table_path = tmp_path / "completed.csv"
    write_table(world, table_path)
    out = tmp_path / "replay"
    status = main(["replay", str(table_path), "--goal", "table", "--rounds", "1", "--per-round", "2",
                   "--seeds", "1", "--method", "hyb", "--learner", "gp", "--relearn", "refresh", "--out", str(out)])
    assert status == 0
    printed = capsys.readouterr().out
    assert "saved" in printed and "MAE eV" in printed
    # a refreshed replay says it is a first look, and how to run the loop a user runs
    assert "a first look only" in printed and "--relearn fit, the default" in printed
    assert sorted(p.name for p in out.iterdir()) == [
        "curves.csv", "hidden.csv", "learning_curves.png", "picks.csv", "settings.json", "summary.csv"
    ]
    summary = pd.read_csv(out / "summary.csv")
    assert summary["metric"].tolist() == ["error", "decided"] and (summary["picks"] == 2).all()


def test_replay_refuses_too_few_elements():
    world = invent_world(element_symbols=("Li", "B"), seed=1).drop(columns="truth")
    with pytest.raises(DopantgapError, match="at least 3"):
        hide_cells(world)


def test_reference_values_change_the_score_and_nothing_the_picker_sees(completed, result):
    """Scored against reference values shifted by a constant 0.3 eV, the error of every
    round of every strategy moves (the picks do not: the picker sees only the table)."""
    shifted = completed.copy()
    shifted["value"] = shifted["value"] + 0.3
    again = replay(completed, goal=("table", "site"), rounds=ROUNDS, per_round=PER_ROUND, cost=COST,
                   n_random_seeds=SEEDS, random_state=4, keep_fraction=0.25,
                   estimator=Surrogate(learner="gp", n_folds=2), reference=shifted, relearn="refresh")
    pd.testing.assert_frame_equal(again.picks, result.picks)
    assert again.settings["scored_against"] == "reference values"
    assert (again.curves["error"] > result.curves["error"]).all()
    with pytest.raises(DopantgapError, match="every cell"):
        replay(completed, rounds=1, per_round=1, n_random_seeds=1, cost=COST, reference=shifted.iloc[:5])


def test_relearn_fit_scores_each_round_with_a_full_fit_as_a_user_runs_it(completed):
    """With relearn="fit", the figures after a round are those of a model fitted in full on
    the visible cells plus the round's picks (next, add, fit), not of a refreshed one."""
    estimator = Surrogate(learner="gp", n_folds=2, random_state=4)
    result = replay(completed, goal="table", rounds=1, per_round=3, cost=COST, n_random_seeds=1,
                    random_state=4, keep_fraction=0.25, estimator=estimator, floor=False)
    assert result.settings["relearn"] == "fit"  # the default: the loop a user runs
    assert "fitted in full after each round" in replay_text(result)
    visible, hidden, _method = hide_cells(completed, method="hyb", keep_fraction=0.25, random_state=4)
    for strategy, seed in (("table", 0), ("random", 0)):
        picked = result.picks[(result.picks["strategy"] == strategy) & (result.picks["seed"] == seed)]
        grown = pd.concat([visible, picked.drop(columns=["strategy", "seed", "round"])], ignore_index=True)
        model = Surrogate(learner="gp", n_folds=2, random_state=4).fit(grown.reset_index(drop=True))
        left = hidden[~hidden.set_index(list(KEY_COLUMNS)).index.isin(picked.set_index(list(KEY_COLUMNS)).index)]
        expected = float(np.mean(np.abs(model.predict(left[list(KEY_COLUMNS)])["value"].to_numpy()
                                        - left["value"].to_numpy())))
        curve = result.curves[(result.curves["strategy"] == strategy) & (result.curves["seed"] == seed)]
        assert curve.loc[curve["round"] == 1, "error"].iat[0] == pytest.approx(expected, rel=1e-9)
    with pytest.raises(DopantgapError, match="--relearn"):
        replay(completed, rounds=1, per_round=1, n_random_seeds=1, cost=COST, relearn="sometimes")


def test_suspect_values_are_judged_once_on_the_completed_table(completed):
    """A flipped sign in the completed table is refused before any fit; kept with
    suspect_values="warn", it is warned of once, not again by the fit of every part
    (a part can make a right value look wrong, e.g. a correction that jumps for the few
    elements kept)."""
    flipped = completed.copy()
    rows = (
        (flipped["element"] == "Fe") & (flipped["host"] == "ZnS") & (flipped["method"] == "gga")
        & (flipped["quantity"] == "E_bind")
    )
    flipped.loc[rows, "value"] *= -1.0

    class Ticks:
        count = 0

        def update(self, n=1):
            Ticks.count += n

    with pytest.raises(DopantgapError, match="flipped sign.*--suspect-values warn"):
        replay(flipped, rounds=1, per_round=1, n_random_seeds=1, cost=COST, progress=Ticks(),
               estimator=Surrogate(learner="gp", n_folds=2), relearn="refresh", floor=False)
    assert Ticks.count == 0
    with pytest.warns(SuspectValueWarning) as caught:
        done = replay(flipped, goal="table", rounds=1, per_round=2, n_random_seeds=1, cost=COST,
                      estimator=Surrogate(learner="gp", n_folds=2, suspect_values="warn"),
                      relearn="refresh", floor=False)
    suspect = [w for w in caught if issubclass(w.category, SuspectValueWarning)]
    assert len(suspect) == 1 and "Fe at ZnS/sub_Zn/gga/E_bind" in str(suspect[0].message)
    assert len(done.picks) == 2 * 2
