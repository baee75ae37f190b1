"""Replay finished rounds of calculations: would the picker have found the answers sooner than chance?

On a table the user has already completed, part of it is hidden, a surrogate learns
the rest, and calculations are "run" round by round by revealing hidden values: once
with the cells the picker (:func:`dopantgap.picker.pick_next`) proposes, and with
cells drawn at random among the same candidates, for several seeds. The learning
curves show how fast each strategy brings the hidden cells within reach.

Hiding rule
-----------
It mimics real rounds of calculations: the cheap level is known everywhere, the expensive level
for a few elements. With ``method`` the level replayed (default the most costly in ``cost``;
without costs the last of :func:`dopantgap.surrogate.order_levels`): a seeded ``keep_fraction``
(default 20 %, at least 2 and at most all but one) of the elements that have cells of
``method`` keep them visible; the ``method`` cells of every other element are hidden.
Cells of every other method stay visible. The candidates of both strategies are the
hidden cells (and only those: a cell the completed table lacks cannot be revealed);
the picker sees only the visible table, plus the names of elements whose every cell is
hidden (``element_symbols``), and its picks are filtered to revealable cells.

Rounds
------
The surrogate is fitted once on the visible table; after each round it is relearned on
the grown table, for the picker's next round and for the figures: by default by a full
fit, the loop a user runs between rounds (``next``, ``add``, ``fit``), or with
``relearn="refresh"`` by :meth:`Surrogate.refreshed` (seconds instead of a fit per
round; learner, correction form, hyperparameters and calibration kept until a stage
outgrows them). The two tell different stories where a refit would change the model's
form (``benchmarks/bench_replay.py --relearn`` measures both; DEVELOPERS.md). The
strategies, and the floor's groups, are independent: they run side by side in worker
processes (or on a Dask cluster), each strategy's rounds in order.

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
distance between its quartile seeds' excesses and the share read against each of them.
"""

import contextlib
import json
import math
import warnings
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd
from joblib import delayed
from sklearn.base import clone
from threadpoolctl import threadpool_limits

from dopantgap.atomic import write_text_atomic
from dopantgap.progress import step
from dopantgap.reproducible import canonical_order, seed_integer
from dopantgap.rounds import DECIDED_PROBABILITY
from dopantgap.errors import DopantgapError, SuspectValueWarning
from dopantgap.sites import site_preference, site_quantities
from dopantgap.surrogate import Surrogate, order_levels
from dopantgap.surrogate.crossval import n_workers
from dopantgap.table import KEY_COLUMNS, REQUIRED_COLUMNS, check_frame, write_table
from dopantgap.workers import worker_pool

__all__ = [
    "FLOOR_GROUPS",
    "RELEARN",
    "CURVE_COLUMNS",
    "SUMMARY_COLUMNS",
    "ReplayResult",
    "hide_cells",
    "random_picks",
    "replay",
    "replay_text",
    "savings",
    "write_replay",
]

CURVE_COLUMNS = (
    "strategy", "seed", "round", "n_revealed", "cost_spent", "error", "rmse", "mean_std",
    "decided", "decided_wrong", "n_site_questions", "n_hidden_left", "floor_left",
)
SUMMARY_COLUMNS = (
    "goal", "method", "metric", "better", "picks", "picker_final", "random_median_final",
    "ratio", "picker_picks_to_match", "picks_saved", "cost_saved", "n_random_seeds", "floor",
    "share_removed", "random_excess", "random_excess_spread", "share_low", "share_high", "note",
)
RANDOM = "random"
#: How a replay's model learns each round's new cells (``replay(relearn=...)``).
RELEARN = ("refresh", "fit")
#: Groups the oracle floor hides the hidden cells in, one relearned model each (common
#: practice, no source: more groups move the floor little and cost a refit each).
FLOOR_GROUPS = 5
# fewest elements that keep their replayed-level cells visible (common practice, no source)
_KEEP_MIN_ELEMENTS = 2


@dataclass
class ReplayResult:
    """What :func:`replay` found.

    Attributes
    ----------
    curves : DataFrame
        ``CURVE_COLUMNS``, one row per strategy, seed and round (module docstring).
    summary : DataFrame
        ``SUMMARY_COLUMNS``, one row per picker goal and figure.
    picks : DataFrame
        Every revealed cell: strategy, seed, round, the cell and its value.
    hidden : DataFrame
        The cells hidden at the start (cell and value).
    settings : dict
        The arguments, and the counts of visible and hidden cells.
    """

    curves: pd.DataFrame
    summary: pd.DataFrame
    picks: pd.DataFrame
    hidden: pd.DataFrame
    settings: dict = field(default_factory=dict)


def _whole(value, name, minimum):
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < minimum:
        raise DopantgapError(f"{name} must be a whole number of at least {minimum}, got {value!r}.")
    return int(value)


def hide_cells(table, method=None, keep_fraction=0.2, random_state=0, levels=None):
    """Split a completed table into what the replay starts from and what it hides.

    Parameters
    ----------
    table : DataFrame
        The completed long table.
    method : str or None, default=None
        Level replayed; None: the most expensive (``order_levels(table, levels)``).
    keep_fraction : float, default=0.2
        Share of the elements with ``method`` cells that keep them visible.
    random_state : None, int, RandomState or Generator, default=0
        Seed of the draw (``reproducible.seed_integer``); the elements kept do not
        depend on the order of the table's rows.
    levels : sequence of str or None, default=None
        Methods cheapest first, as for ``Surrogate(levels=...)``.

    Returns
    -------
    visible : DataFrame
        Rows of ``table`` left visible (all columns, in table order).
    hidden : DataFrame
        The hidden rows (all columns, in table order).
    method : str
    """
    seed = seed_integer(random_state)
    methods = order_levels(table, levels)
    if method is None:
        method = methods[-1]
    if method not in methods:
        raise DopantgapError(f"--method: {method!r} is not a method of the table; choose one of {', '.join(methods)}.")
    if not 0.0 < float(keep_fraction) < 1.0:
        raise DopantgapError(f"--keep-fraction must lie strictly between 0 and 1 (e.g. 0.2), got {keep_fraction}.")
    with_method = sorted(set(table.loc[table["method"] == method, "element"]))
    if len(with_method) < _KEEP_MIN_ELEMENTS + 1:
        raise DopantgapError(
            f"the table has {method!r} cells for {len(with_method)} element(s); a replay needs at least "
            f"{_KEEP_MIN_ELEMENTS + 1} (some kept to learn from, some hidden to reveal)."
        )
    n_keep = int(round(float(keep_fraction) * len(with_method)))
    n_keep = min(max(n_keep, _KEEP_MIN_ELEMENTS), len(with_method) - 1)
    rng = np.random.default_rng(seed)
    kept = set(rng.choice(with_method, size=n_keep, replace=False).tolist())
    is_hidden = ((table["method"] == method) & ~table["element"].isin(kept)).to_numpy()
    return table[~is_hidden], table[is_hidden], method


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


class _Scorer:
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


class _Relearn:
    """Grown table -> relearned model, as ``replay(relearn=...)`` says: a full fit of a
    clone of ``estimator``, or ``base.refreshed``. A class, not a closure, so that it
    travels to worker processes and Dask workers as plain data."""

    def __init__(self, estimator, base, mode):
        self.estimator = estimator
        self.base = base
        self.mode = mode

    def __call__(self, grown):
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", SuspectValueWarning)
            if self.mode == "fit":
                return clone(self.estimator).fit(grown)
            return self.base.refreshed(grown)


def _side_by_side(estimator, tasks, steps, progress):
    """The results of the delayed ``tasks``, in order, run in the estimator's ``n_jobs``
    workers (``workers.worker_pool``; the fits inside a task then run in its worker);
    ``progress`` is told ``steps[i]`` when task ``i`` ends."""
    tagged = [delayed(_tagged)(index, task) for index, task in enumerate(tasks)]
    results = [None] * len(tasks)
    pool = worker_pool(n_jobs=n_workers(estimator, len(tasks)), return_as="generator_unordered")
    # a pool of one runs here, held to one BLAS/OpenMP thread as a worker is, so that
    # the replay gives the same figures whatever n_jobs (``crossval._each`` does the same)
    with threadpool_limits(limits=1) if pool.n_jobs == 1 else contextlib.nullcontext():
        for index, result in pool(tagged):
            results[index] = result
            step(progress, steps[index])
    return results


def _tagged(index, task):
    function, args, kwargs = task
    return index, function(*args, **kwargs)


def random_picks(n_candidates, count, rng):
    """Positions of ``count`` of ``n_candidates`` candidates, drawn uniformly without
    replacement (every subset equally likely), in increasing order.

    Parameters
    ----------
    n_candidates, count : int
    rng : numpy.random.Generator

    Returns
    -------
    list of int
    """
    return sorted(rng.choice(n_candidates, size=count, replace=False).tolist())


def _picker_choice(surrogate, remaining, count, goal, method, cost, window, element_symbols, random_state):
    """Positions in ``remaining`` of the picker's first ``count`` revealable picks."""
    from dopantgap.picker import pick_next

    position = {key: i for i, key in enumerate(remaining[list(KEY_COLUMNS)].itertuples(index=False, name=None))}
    computed = set(surrogate.table_[list(KEY_COLUMNS)].itertuples(index=False, name=None))
    asked = count
    while True:
        picks = pick_next(
            surrogate, count=asked, goal=goal, method=method, cost=cost, window=window,
            element_symbols=element_symbols, random_state=random_state,
        )
        keys = list(picks[list(KEY_COLUMNS)].itertuples(index=False, name=None))
        if any(key in computed for key in keys):
            # the picker's contract: never a computed cell; a breach would reveal a visible cell
            raise RuntimeError("pick_next proposed a computed cell")
        chosen = [position[key] for key in keys if key in position][:count]
        # fewer picks than asked: the picker has no candidate left
        if len(chosen) == count or len(picks) < asked:
            return chosen
        asked *= 2


def _run_strategy(strategy, seed, base, visible, hidden, rounds, per_round, method, cost_per_cell,
                  cost, window, element_symbols, scorer, random_state, progress, relearn):
    curves, revealed = [], []
    grown = visible
    remaining = hidden.reset_index(drop=True)
    surrogate = base
    rng = np.random.default_rng((random_state, seed))
    figures = scorer(surrogate, remaining)
    n_revealed = 0
    curves.append({"strategy": strategy, "seed": seed, "round": 0, "n_revealed": 0, "cost_spent": 0.0,
                   **figures, "n_hidden_left": len(remaining)})
    for round_number in range(1, rounds + 1):
        count = min(per_round, len(remaining))
        chosen = []
        if count and strategy == RANDOM:
            chosen = random_picks(len(remaining), count, rng)
        elif count:
            symbols = [s for s in element_symbols if s not in set(grown["element"])]
            chosen = _picker_choice(surrogate, remaining, count, strategy, method, cost, window,
                                    symbols, random_state)
        if not chosen:
            # nothing left, or nothing the goal finds worth computing: the round spends
            # nothing and the figures stand, so that every strategy has every round
            curves.append({"strategy": strategy, "seed": seed, "round": round_number, "n_revealed": n_revealed,
                           "cost_spent": n_revealed * cost_per_cell, **figures, "n_hidden_left": len(remaining)})
            step(progress)
            continue
        picked = remaining.iloc[chosen]
        part = picked[list(REQUIRED_COLUMNS)].copy()
        part.insert(0, "round", round_number)
        part.insert(0, "seed", seed)
        part.insert(0, "strategy", strategy)
        revealed.append(part)
        grown = pd.concat([grown, picked], ignore_index=True)
        remaining = remaining.drop(index=remaining.index[chosen]).reset_index(drop=True)
        n_revealed += len(chosen)
        surrogate = relearn(grown)
        figures = scorer(surrogate, remaining)
        curves.append({"strategy": strategy, "seed": seed, "round": round_number, "n_revealed": n_revealed,
                       "cost_spent": n_revealed * cost_per_cell, **figures, "n_hidden_left": len(remaining)})
        step(progress)
    return curves, revealed


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
    for held in _floor_groups(hidden, random_state, groups):
        errors[held] = _floor_group_errors(relearn, scorer, visible, hidden, held)
        step(progress)
    return errors


def _floor_groups(hidden, random_state, groups=FLOOR_GROUPS):
    """Boolean masks over ``hidden`` (reset index), one per floor group."""
    rng = np.random.default_rng((random_state, 7))
    group_of = rng.permutation(len(hidden)) % max(1, min(groups, len(hidden)))
    return [group_of == group for group in np.unique(group_of)]


def _floor_group_errors(relearn, scorer, visible, hidden, held):
    """Absolute errors of the ``held`` hidden cells, predicted with every other cell known."""
    known = pd.concat([visible, hidden[~held]], ignore_index=True)
    return scorer.absolute_errors(relearn(known), hidden[held].reset_index(drop=True))


def _floor_left(curves, picks, hidden, floor_errors):
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
    return {
        "goal": goal, "method": "", "metric": metric, "better": "higher" if higher else "lower",
        "picks": picks, "picker_final": picker_final, "random_median_final": random_final, "ratio": ratio,
        "picker_picks_to_match": needed, "picks_saved": saved, "cost_saved": saved * cost_per_cell,
        "n_random_seeds": int(randoms["seed"].nunique()), "floor": floor if metric == "error" else math.nan,
        "share_removed": share, "random_excess": float(random_excess), "random_excess_spread": random_spread,
        "share_low": share_low, "share_high": share_high, "note": note,
    }


def replay(table, goal="table", rounds=4, per_round=5, method=None, cost=None, n_random_seeds=5,
           random_state=0, progress=None, keep_fraction=0.2, window=None, estimator=None, reference=None,
           floor=True, relearn="fit"):
    """Replay a completed table: the picker's rounds against random picks.

    Parameters
    ----------
    table : DataFrame
        The completed long table (``read_table`` output).
    goal : str or sequence of str, default="table"
        Picker goal(s) (``picker.GOALS``); each is replayed as a strategy of its own.
    rounds : int, default=4
    per_round : int, default=5
        Cells revealed per round by every strategy.
    method : str or None, default=None
        Level replayed (hidden and picked); None: the most costly in ``cost``, or
        without ``cost`` the last of ``order_levels`` (the least computed; on a
        completed table with equal counts, the last by name: give ``method`` or ``cost``).
    cost : dict or None, default=None
        Method -> cost of one cell (``picker.parse_cost`` output); None: 1 each. The
        picker sees it; ``cost_spent`` uses the cost of ``method``.
    n_random_seeds : int, default=5
    random_state : None, int, RandomState or Generator, default=0
        Seed of the hiding, the fit, the picker and the random draws
        (``reproducible.seed_integer``, checked before any work). The table's rows are
        put in ``reproducible.canonical_order`` first, so their order changes nothing.
    progress : object or None, default=None
        Told ``update(1)`` after the first fit, ``update(rounds)`` as each strategy ends
        and ``update(1)`` as each of the floor's ``FLOOR_GROUPS`` models ends
        (``progress.bar``).
    keep_fraction : float, default=0.2
        See ``hide_cells``.
    window : tuple or str or None, default=None
        For the window goal (``picker.parse_window``).
    estimator : Surrogate or None, default=None
        Unfitted surrogate to clone and fit; None: ``Surrogate(random_state=random_state)``.
        Its ``n_jobs`` workers run the strategies and the floor's groups side by side
        (each strategy's rounds in order; on a Dask cluster inside ``cluster.on_cluster``,
        as many at once as the cluster takes); the figures do not depend on it.
        Its ``suspect_values`` policy judges the completed table once, before any work;
        the parts fitted later are not judged again (a part can make a right value look
        wrong, e.g. a correction that jumps for a few elements, seen through those kept).
    reference : DataFrame or None, default=None
        Values the figures are scored against instead of the completed table's (cell
        columns and ``value``, covering every cell of ``table``): for benchmarks on an
        invented world, its noise-free truth. The picker only ever sees ``table``.
    floor : bool, default=True
        Measure the error floor (``oracle_floor``: a few refreshed models more).
    relearn : {"fit", "refresh"}, default="fit"
        How the model learns each round's new cells: a full ``fit`` of the grown table,
        as a user does between rounds (``next``, ``add``, ``fit``; one fit per strategy
        and round, and five for the floor), or ``Surrogate.refreshed`` (seconds;
        learner, correction form, hyperparameters and calibration kept until a stage
        outgrows them), a quick approximation that can tell another story.

    Returns
    -------
    ReplayResult
    """
    random_state = seed_integer(random_state)
    table = canonical_order(table)
    goals = [goal] if isinstance(goal, str) else list(goal)
    from dopantgap.picker import GOALS

    for name in goals:
        if name not in GOALS:
            raise DopantgapError(f"--goal: {name!r} is not a goal; choose from {', '.join(GOALS)}.")
    if not goals or len(set(goals)) != len(goals):
        raise DopantgapError("--goal: give one or more different goals, e.g. --goal table,site.")
    if relearn not in RELEARN:
        raise DopantgapError(f"--relearn: {relearn!r} is not a way to relearn; choose one of {', '.join(RELEARN)}.")
    rounds = _whole(rounds, "--rounds", 1)
    per_round = _whole(per_round, "--per-round", 1)
    n_random_seeds = _whole(n_random_seeds, "--seeds", 1)
    cost = {} if cost is None else dict(cost)
    estimator = Surrogate(random_state=random_state) if estimator is None else clone(estimator)
    unknown = [name for name in cost if name not in set(table["method"])]
    if unknown:
        raise DopantgapError(f"--cost names {', '.join(map(repr, unknown))}, not a method of the table.")
    if method is None and cost:
        # a completed table has as many cells at every level: its counts cannot tell the
        # expensive one, the costs can
        ordered = order_levels(table, estimator.levels)
        method = max(ordered, key=lambda name: (float(cost.get(name, 1.0)), ordered.index(name)))
    # the values are judged once, on the completed table, as the estimator's policy says;
    # a part of it can make a right value look wrong (a correction that jumps for a few
    # elements, seen through the few kept), so the parts are fitted without judging again
    check_frame(table, suspect_values=estimator.suspect_values)
    estimator = estimator.set_params(suspect_values="warn")
    visible, hidden, method = hide_cells(table, method, keep_fraction, random_state, levels=estimator.levels)
    cost_per_cell = float(cost.get(method, 1.0))
    element_symbols = [s for s in dict.fromkeys(table["element"]) if s not in set(visible["element"])]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", SuspectValueWarning)
        base = clone(estimator).fit(visible.reset_index(drop=True))
    step(progress)
    relearned = _Relearn(estimator, base, relearn)

    if reference is not None:
        missing = [column for column in REQUIRED_COLUMNS if column not in reference.columns]
        if missing:
            raise DopantgapError(f"reference lacks the column(s) {', '.join(missing)}.")
        covered = set(reference[list(KEY_COLUMNS)].itertuples(index=False, name=None))
        if any(key not in covered for key in table[list(KEY_COLUMNS)].itertuples(index=False, name=None)):
            raise DopantgapError("reference must give a value for every cell of the completed table.")
    scorer = _Scorer(table, method, random_state, reference)
    strategies = [(name, 0) for name in goals] + [(RANDOM, seed) for seed in range(n_random_seeds)]
    visible = visible.reset_index(drop=True)
    hidden_cells = hidden.reset_index(drop=True)
    # every strategy and every floor group is independent of the others: they go to the
    # workers together (each strategy's rounds stay in order inside its task)
    tasks = [
        delayed(_run_strategy)(
            strategy, seed, base, visible, hidden_cells, rounds, per_round, method,
            cost_per_cell, cost, window, element_symbols, scorer, random_state, None, relearned,
        )
        for strategy, seed in strategies
    ]
    floor_masks = _floor_groups(hidden_cells, random_state) if floor and len(hidden) else []
    tasks += [
        delayed(_floor_group_errors)(relearned, scorer, visible, hidden_cells, held) for held in floor_masks
    ]
    steps = [rounds] * len(strategies) + [1] * len(floor_masks)
    results = _side_by_side(estimator, tasks, steps, progress)
    curves, revealed = [], []
    for part_curves, part_revealed in results[: len(strategies)]:
        curves += part_curves
        revealed += part_revealed
    curves = pd.DataFrame(curves, columns=list(CURVE_COLUMNS))
    error_floor = math.nan
    picks_columns = ["strategy", "seed", "round"] + list(REQUIRED_COLUMNS)
    picks = pd.concat(revealed, ignore_index=True) if revealed else pd.DataFrame(columns=picks_columns)
    if floor_masks:
        floor_errors = np.full(len(hidden_cells), np.nan)
        for held, errors in zip(floor_masks, results[len(strategies):]):
            floor_errors[held] = errors
        error_floor = float(np.mean(floor_errors))
        curves["floor_left"] = _floor_left(curves, picks, hidden_cells, floor_errors)
    rows = []
    for name in goals:
        for metric in ("error", "decided"):
            row = savings(curves, name, metric, cost_per_cell, floor=error_floor)
            row["method"] = method
            rows.append(row)
    summary = pd.DataFrame(rows, columns=list(SUMMARY_COLUMNS))
    settings = {
        "goals": goals, "rounds": rounds, "per_round": per_round, "method": method,
        "cost": {str(k): float(v) for k, v in cost.items()}, "n_random_seeds": n_random_seeds,
        "random_state": int(random_state), "keep_fraction": float(keep_fraction),
        "window": None if window is None else list(window) if not isinstance(window, str) else window,
        "scored_against": "completed table" if reference is None else "reference values",
        "n_visible": int(len(visible)), "n_hidden": int(len(hidden)), "relearn": relearn,
        "elements_all_hidden": element_symbols, "learner": base.learner_,
        "hiding_rule": (f"{method} cells hidden for all but a seeded {keep_fraction:.0%} of the elements "
                        f"that have them; every other method visible"),
    }
    hidden_table = hidden[list(REQUIRED_COLUMNS)].reset_index(drop=True)
    return ReplayResult(curves=curves, summary=summary, picks=picks[picks_columns], hidden=hidden_table,
                        settings=settings)


_RELEARN_WORDS = {
    "refresh": "the model refreshed after each round (hyperparameters kept until a stage outgrows them)",
    "fit": "the model fitted in full after each round",
}


def replay_text(result):
    """Plain-text summary of a replay, lines ending ``\\n``."""
    settings = result.settings
    lines = [
        f"Replay of {settings['method']}: {settings['n_hidden']} cells hidden, {settings['n_visible']} visible "
        f"({settings['hiding_rule']}).",
        f"{settings['rounds']} rounds of {settings['per_round']} picks; random picks over "
        f"{settings['n_random_seeds']} seeds among the same hidden cells (median shown); "
        f"{_RELEARN_WORDS[settings.get('relearn', 'refresh')]}.",
        f"Figures scored against the {settings.get('scored_against', 'completed table')}.",
        "",
        f"  {'goal':<8} {'figure':<8} {'picks':>5} {'picker':>9} {'random':>9} {'ratio':>6} "
        f"{'picker needs':>13} {'saved':>7}",
    ]
    for row in result.summary.itertuples(index=False):
        digits = 3 if row.metric == "error" else 1
        needs = "never" if math.isnan(row.picker_picks_to_match) else f"{row.picker_picks_to_match:.1f}"
        if row.picker_picks_to_match == 0.0:
            needs = "at start"
        saved = "none" if row.picks_saved <= 0.0 else f"{row.picks_saved:.1f}"
        label = "MAE eV" if row.metric == "error" else "decided"
        lines.append(
            f"  {row.goal:<8} {label:<8} {row.picks:>5} {row.picker_final:>9.{digits}f} "
            f"{row.random_median_final:>9.{digits}f} {row.ratio:>6.2f} {needs:>13} {saved:>7}"
        )
    lines.append("")
    lines.append("saved: random's picks minus those the picker's curve needed (interpolated) to reach "
                 "random's final figure (median over seeds); never negative")
    lines += _round_lines(result)
    for row in result.summary.itertuples(index=False):
        if row.note:
            lines.append(f"note: {row.goal}/{row.metric}: {row.note}")
    return "\n".join(lines) + "\n"


def _round_lines(result):
    """Error per round: each goal, random's median and spread over seeds, and the floor."""
    curves = result.curves
    randoms = curves[curves["strategy"] == RANDOM].groupby("round")["error"]
    goals = [goal for goal in dict.fromkeys(curves["strategy"]) if goal != RANDOM]
    if curves.empty or randoms.ngroups == 0 or curves["error"].isna().all():
        return []
    median, low, high = randoms.median(), randoms.quantile(0.25), randoms.quantile(0.75)
    picks = curves[curves["strategy"] == RANDOM].groupby("round")["n_revealed"].median()
    lines = ["", "MAE (eV) per round; random: median [quartiles] over seeds:",
             f"  {'round':>5} {'picks':>5} " + " ".join(f"{goal:>8}" for goal in goals) + "  random"]
    for number in median.index:
        picked = [
            curves[(curves["strategy"] == goal) & (curves["round"] == number)]["error"] for goal in goals
        ]
        shown = " ".join(f"{part.iat[0]:>8.4f}" if len(part) else f"{'':>8}" for part in picked)
        lines.append(f"  {number:>5} {int(picks.at[number]):>5} {shown}  {median.at[number]:.4f} "
                     f"[{low.at[number]:.4f}, {high.at[number]:.4f}]")
    error_rows = result.summary[result.summary["metric"] == "error"]
    floor = float(error_rows["floor"].iat[0]) if len(error_rows) and "floor" in error_rows else math.nan
    if not math.isnan(floor):
        lines.append(f"floor: {floor:.4f} eV over all hidden cells, each predicted with every other hidden "
                     "cell known")
        last = curves["round"].max()
        for row in error_rows.itertuples(index=False):
            share = "n/a (random at the floor)" if math.isnan(row.share_removed) else f"{row.share_removed:.0%}"
            final = curves[(curves["strategy"] == row.goal) & (curves["round"] == last)]
            left = float(final["floor_left"].iat[0]) if len(final) and "floor_left" in final else math.nan
            over = f" (floor {left:.4f} eV over the cells it left hidden)" if not math.isnan(left) else ""
            lines.append(f"  {row.goal}: share of random's excess error removed, each over the floor of the "
                         f"cells it still hides: {share}{over}")
            lines += _share_spread_lines(row)
    return lines


def _share_spread_lines(row):
    """How far random's own seeds move the share: it is read only where they move it little."""
    if math.isnan(row.random_excess) or row.random_excess <= 0:
        return []

    def percent(value):
        return "n/a" if math.isnan(value) else f"{value:.0%}"

    # a picker below the floor of the cells it left gains more against the nearer seed
    shares = [share for share in (row.share_low, row.share_high) if not math.isnan(share)]
    reading = f"{percent(min(shares))} to {percent(max(shares))}"
    if len(shares) < 2:
        reading = f"{percent(row.share_high)} (its lower quartile seed reached the floor)"
    lines = [f"    random's median excess {row.random_excess:.4f} eV, its seeds' quartiles "
             f"{row.random_excess_spread:.4f} eV apart; against random's quartile seeds the share is {reading}"]
    if row.random_excess_spread >= row.random_excess:
        lines.append("    the share cannot be read here: random's seeds spread as much as their excess over the "
                     "floor (random nearly reached the floor)")
    return lines


def write_replay(result, out_dir):
    """Write a replay's files into ``out_dir`` (created if needed).

    Files: ``curves.csv``, ``summary.csv``, ``picks.csv`` (revealed cells),
    ``hidden.csv`` (cells hidden at the start), ``settings.json`` and
    ``learning_curves.png`` (``plots.learning_curve_figure``).

    Returns
    -------
    dict
        Name -> path written.
    """
    out_dir = Path(out_dir)
    paths = {
        "curves": out_dir / "curves.csv",
        "summary": out_dir / "summary.csv",
        "picks": out_dir / "picks.csv",
        "hidden": out_dir / "hidden.csv",
        "settings": out_dir / "settings.json",
    }
    write_table(result.curves, paths["curves"])
    write_table(result.summary, paths["summary"])
    write_table(result.picks, paths["picks"])
    write_table(result.hidden, paths["hidden"])
    write_text_atomic(paths["settings"], json.dumps(result.settings, indent=2, sort_keys=True) + "\n")
    from dopantgap import plots  # matplotlib only when files are written

    unit = "cost units" if result.settings.get("cost") else "calculations"
    paths["png"] = out_dir / "learning_curves.png"
    floors = result.summary.loc[result.summary["metric"] == "error", "floor"] if "floor" in result.summary else []
    floor = float(floors.iat[0]) if len(floors) else None
    plots.save_png(plots.learning_curve_figure(result.curves, cost_unit=unit, floor=floor), paths["png"])
    return paths
