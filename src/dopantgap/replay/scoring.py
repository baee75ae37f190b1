"""A replay's figures: errors and decided sites per round, the floor, and what the picker saved.

Figures per strategy, seed and round (``curves``)
--------------------------------------------------
``n_revealed`` and ``cost_spent`` (cost per cell of ``method``, default 1);
``error``: mean absolute error (eV) of the predicted values of the hidden cells not
yet revealed, against the completed table (or against ``reference`` values when given:
an invented world's noise-free truth, so that the figure measures the model and not
the noise of the numbers it is compared with); ``rmse`` likewise; ``mean_std``: their mean
calibrated predicted std; ``decided``: number of site questions (element, host,
quantity with two or more sites, at ``method``, all sites in the completed table)
whose most probable lowest site has ``p_lowest > 0.9`` and is the completed table's
(or the reference's) lowest; ``decided_wrong``: those above 0.9 that name another site;
``floor_left``: the floor's mean error (``oracle_floor``) over the cells still hidden
(NaN without the floor). Round 0 is the start, the same for every strategy. The picker's rows have ``seed`` 0; the random
rows have the seed number ``s`` of their generator ``numpy.random.default_rng((random_state, s))``.

Summary
-------
For each picker goal and figure (``error``: lower is better, ``decided``: higher is
better): the picker's final figure, the median over random seeds after the same
number of picks, their ratio, and "calculations saved": random's number of picks minus
the picks the picker's own curve needed to reach random's final figure (linear
interpolation between rounds, first crossing; a picker that finds nothing worth
computing spends nothing in a round, so it may end with fewer picks than random). A picker that never reached random's
final figure saved nothing (0, with a ``note`` saying so): a saving is never negative.
For the error, also the floor (``oracle_floor``: each hidden cell predicted with every
other hidden cell known, the lowest error any picker could leave), and the share of
random's excess error the picker removed, each strategy's excess read over the floor of
the very cells it still hides (curve column ``floor_left``), so that revealing the
hardest cells first is not mistaken for learning, with random's median excess, the
distance between its quartile seeds' excesses and the share read against each of them,
and the range of shares random's own seeds read against the others (``chance_shares``:
what a picker no better than random is credited with).
"""

import math

import numpy as np
import pandas as pd

from dopantgap.progress import step
from dopantgap.rounds import DECIDED_PROBABILITY
from dopantgap.sites import site_preference, site_quantities
from dopantgap.table import KEY_COLUMNS

__all__ = ["FLOOR_GROUPS", "RANDOM", "SUMMARY_COLUMNS", "chance_shares", "oracle_floor", "savings"]

SUMMARY_COLUMNS = (
    "goal", "method", "metric", "better", "picks", "picker_final", "random_median_final",
    "ratio", "picker_picks_to_match", "picks_saved", "cost_saved", "n_random_seeds", "floor",
    "share_removed", "random_excess", "random_excess_spread", "share_low", "share_high",
    "chance_share_low", "chance_share_high", "note",
)
RANDOM = "random"
#: Groups the oracle floor hides the hidden cells in, one relearned model each (common
#: practice, no source: more groups move the floor little and cost a refit each).
FLOOR_GROUPS = 5


def _site_truth(completed, method, quantities):
    """(element, host, quantity) -> lowest site of the completed table at ``method``,
    for the questions whose every site of the host is in the completed table."""
    rows = completed[(completed["method"] == method) & completed["quantity"].isin(quantities)]
    truth = {}
    for quantity in quantities:
        part = rows[rows["quantity"] == quantity]
        for host, host_rows in part.groupby("host", sort=False):
            sites = set(host_rows["site"])
            if len(sites) < 2:
                continue
            for element, cells in host_rows.groupby("element", sort=False):
                if set(cells["site"]) == sites:
                    truth[(element, host, quantity)] = cells["site"].iat[int(np.argmin(cells["value"].to_numpy()))]
    return truth


class Scorer:
    """The figures of one round, for a surrogate and the hidden cells still hidden."""

    def __init__(self, completed, method, random_state, reference=None):
        self.method = method
        self.random_state = random_state
        self.symbols = list(dict.fromkeys(completed["element"]))
        self.quantities = site_quantities(completed)
        scored = completed if reference is None else reference
        self.truth = _site_truth(scored, method, self.quantities)
        self.reference = None
        if reference is not None:
            keys = reference[list(KEY_COLUMNS)].itertuples(index=False, name=None)
            self.reference = dict(zip(keys, reference["value"].to_numpy(dtype=float)))

    def _scored_values(self, remaining):
        if self.reference is None:
            return remaining["value"].to_numpy(dtype=float)
        keys = remaining[list(KEY_COLUMNS)].itertuples(index=False, name=None)
        return np.array([self.reference[key] for key in keys], dtype=float)

    def absolute_errors(self, surrogate, cells):
        """|predicted - scored value| of each of ``cells`` (eV)."""
        predicted = surrogate.predict(cells[list(KEY_COLUMNS)])
        return np.abs(predicted["value"].to_numpy() - self._scored_values(cells))

    def __call__(self, surrogate, remaining, sites=True):
        figures = {"error": np.nan, "rmse": np.nan, "mean_std": np.nan}
        if len(remaining):
            predicted = surrogate.predict(remaining[list(KEY_COLUMNS)])
            difference = predicted["value"].to_numpy() - self._scored_values(remaining)
            figures["error"] = float(np.mean(np.abs(difference)))
            figures["rmse"] = float(np.sqrt(np.mean(difference**2)))
            figures["mean_std"] = float(predicted["std"].mean())
        decided = wrong = 0
        if self.truth and sites:
            quantities = sorted({quantity for _e, _h, quantity in self.truth})
            preference = site_preference(
                surrogate, element_symbols=self.symbols, quantities=quantities, random_state=self.random_state
            )
            best = preference[(preference["rank"] == 1) & (preference["method"] == self.method)]
            for element, host, quantity, site, p_lowest in best[
                ["element", "host", "quantity", "site", "p_lowest"]
            ].itertuples(index=False, name=None):
                key = (element, host, quantity)
                if key in self.truth and p_lowest > DECIDED_PROBABILITY:
                    if site == self.truth[key]:
                        decided += 1
                    else:
                        wrong += 1
        figures.update(decided=decided, decided_wrong=wrong, n_site_questions=len(self.truth))
        return figures


def _crossing(n_picks, figures, target, higher_is_better):
    """Picks at which a curve first reaches ``target`` (linear interpolation), or NaN."""
    reached = figures >= target if higher_is_better else figures <= target
    if not reached.any():
        return math.nan
    first = int(np.argmax(reached))
    if first == 0:
        return float(n_picks[0])
    x0, x1 = float(n_picks[first - 1]), float(n_picks[first])
    y0, y1 = float(figures[first - 1]), float(figures[first])
    if y1 == y0:
        return x1
    return x0 + (target - y0) * (x1 - x0) / (y1 - y0)


def oracle_floor(base, visible, hidden, scorer, random_state, groups=FLOOR_GROUPS, relearn=None, progress=None):
    """The lowest error a picker could leave in a replay, measured on the data, per hidden cell.

    The hidden cells are cut into ``groups`` random groups; for each group the model is
    relearned (as the replay relearns it between rounds: ``relearn``) on the visible
    cells and every other hidden cell, and the group is predicted. What is left is the
    table's own noise and what the model cannot learn even with all but a few cells
    computed. A strategy's error is over the cells it has not revealed yet, so the replay
    compares it with the mean of these errors over the same cells (``floor_left``): a
    picker that reveals the hardest cells first is not credited for leaving easy ones.

    Parameters
    ----------
    base : Surrogate
        The replay's model fitted on the visible cells.
    visible, hidden : DataFrame
        The replay's visible and hidden cells (long tables).
    scorer : callable
        The replay's scorer (``absolute_errors`` of cells against the scored values).
    random_state : int
    groups : int, default=5
    relearn : callable or None, default=None
        Table -> fitted model; None: ``base.refreshed``.
    progress : object or None, default=None
        Told ``update(1)`` after each group.

    Returns
    -------
    ndarray of shape (len(hidden),)
        Absolute error (eV) of each hidden cell, in ``hidden``'s order.
    """
    relearn = base.refreshed if relearn is None else relearn
    hidden = hidden.reset_index(drop=True)
    errors = np.full(len(hidden), np.nan)
    for held in floor_groups(hidden, random_state, groups):
        errors[held] = floor_group_errors(relearn, scorer, visible, hidden, held)
        step(progress)
    return errors


def floor_groups(hidden, random_state, groups=FLOOR_GROUPS):
    """Boolean masks over ``hidden`` (reset index), one per floor group."""
    rng = np.random.default_rng((random_state, 7))
    group_of = rng.permutation(len(hidden)) % max(1, min(groups, len(hidden)))
    return [group_of == group for group in np.unique(group_of)]


def floor_group_errors(relearn, scorer, visible, hidden, held):
    """Absolute errors of the ``held`` hidden cells, predicted with every other cell known."""
    known = pd.concat([visible, hidden[~held]], ignore_index=True)
    return scorer.absolute_errors(relearn(known), hidden[held].reset_index(drop=True))


def floor_left_errors(curves, picks, hidden, floor_errors):
    """Mean floor error over the cells each curve row still hides (NaN when none)."""
    position = {key: i for i, key in enumerate(hidden[list(KEY_COLUMNS)].itertuples(index=False, name=None))}
    values = []
    for strategy, seed, round_number in curves[["strategy", "seed", "round"]].itertuples(index=False, name=None):
        shown = picks[(picks["strategy"] == strategy) & (picks["seed"] == seed) & (picks["round"] <= round_number)]
        left = np.ones(len(hidden), dtype=bool)
        left[[position[key] for key in shown[list(KEY_COLUMNS)].itertuples(index=False, name=None)]] = False
        values.append(float(np.mean(floor_errors[left])) if left.any() else math.nan)
    return values


def savings(curves, goal, metric, cost_per_cell=1.0, floor=math.nan):
    """Calculations saved by a picker goal against the random median, for one figure.

    Parameters
    ----------
    curves : DataFrame
        ``ReplayResult.curves``.
    goal : str
        Picker strategy (a goal name).
    metric : {"error", "decided"}
    cost_per_cell : float, default=1.0
    floor : float, default=nan
        The error floor over all hidden cells (the mean of ``oracle_floor``), reported in
        the error row. The share of random's excess removed reads each strategy's excess
        over the floor of the cells it still hides (the curves' ``floor_left``): 1 -
        picker's excess / median of random's excesses. ``share_low`` and ``share_high``
        read it against random's lower and upper quartile excesses (NaN where that excess
        is not above zero), and ``random_excess_spread`` is the distance between them: a
        share whose random reference spreads as much as its median excess measures luck.
        ``chance_share_low`` and ``chance_share_high`` are the lowest and highest share a
        picker no better than random reads: each random seed taken as the picker, against
        the median excess of the other seeds (three seeds or more; NaN otherwise). A share
        inside that range cannot tell the picker from chance.

    Returns
    -------
    dict
        One ``SUMMARY_COLUMNS`` row (``method`` left blank).
    """
    higher = metric == "decided"
    picker = curves[curves["strategy"] == goal].sort_values("round")
    randoms = curves[curves["strategy"] == RANDOM]
    median = randoms.groupby("round")[[metric, "n_revealed"]].median().sort_index()
    final = picker.iloc[-1]
    picks = int(final["n_revealed"])
    random_final = float(median.loc[final["round"], metric]) if final["round"] in median.index else math.nan
    picker_final = float(final[metric])
    ratio = picker_final / random_final if random_final not in (0.0,) and not math.isnan(random_final) else math.nan
    needed = _crossing(
        picker["n_revealed"].to_numpy(float), picker[metric].to_numpy(float), random_final, higher
    )
    # random spends every round; a picker with nothing worth computing may stop early
    random_picks_spent = float(median.loc[final["round"], "n_revealed"]) if final["round"] in median.index else picks
    note = ""
    if math.isnan(needed):
        # a saving is never negative: a picker behind random saved nothing
        note = f"the picker did not reach random's final {metric} within {picks} picks: nothing saved"
        saved = 0.0
    else:
        saved = random_picks_spent - needed
    share = share_low = share_high = random_excess = random_spread = math.nan
    chance_low = chance_high = math.nan
    if metric == "error" and "floor_left" in curves and curves["floor_left"].notna().any():
        last = final["round"]
        excesses = (
            randoms.loc[randoms["round"] == last, metric] - randoms.loc[randoms["round"] == last, "floor_left"]
        ).to_numpy(float)
        low_excess, random_excess, high_excess = (
            np.quantile(excesses, [0.25, 0.5, 0.75]) if len(excesses) else (math.nan,) * 3
        )
        random_spread = float(high_excess - low_excess)
        picker_excess = picker_final - float(final["floor_left"])
        if random_excess > 0:
            share = 1.0 - picker_excess / random_excess
        # the same share read against random's quartile seeds: how much of it is random's own luck
        if low_excess > 0:
            share_low = 1.0 - picker_excess / low_excess
        if high_excess > 0:
            share_high = 1.0 - picker_excess / high_excess
        chance = chance_shares(excesses)
        if len(chance):
            chance_low, chance_high = float(chance.min()), float(chance.max())
    return {
        "goal": goal, "method": "", "metric": metric, "better": "higher" if higher else "lower",
        "picks": picks, "picker_final": picker_final, "random_median_final": random_final, "ratio": ratio,
        "picker_picks_to_match": needed, "picks_saved": saved, "cost_saved": saved * cost_per_cell,
        "n_random_seeds": int(randoms["seed"].nunique()), "floor": floor if metric == "error" else math.nan,
        "share_removed": share, "random_excess": float(random_excess), "random_excess_spread": random_spread,
        "share_low": share_low, "share_high": share_high, "chance_share_low": chance_low,
        "chance_share_high": chance_high, "note": note,
    }


def chance_shares(excesses):
    """The share of random's excess each random seed would be credited with as the picker.

    Parameters
    ----------
    excesses : array-like of float
        Each random seed's excess error over the floor of the cells it still hides (eV).

    Returns
    -------
    ndarray
        For each seed, 1 - its excess / the median excess of the other seeds: the shares a
        picker no better than random reads by luck alone. Empty with fewer than three seeds
        (one other seed is no median), NaN where the others' median excess is not above zero.
    """
    excesses = np.asarray(excesses, dtype=float)
    if len(excesses) < 3:
        return np.array([])
    shares = np.full(len(excesses), np.nan)
    for index, own in enumerate(excesses):
        others = np.median(np.delete(excesses, index))
        if others > 0:
            shares[index] = 1.0 - own / others
    return shares[~np.isnan(shares)]
