"""The replay's rounds: the picker's picks and random picks revealed, the model relearned.

On a table the user has already completed, part of it is hidden, a surrogate learns
the rest, and calculations are "run" round by round by revealing hidden values: once
with the cells the picker (:func:`dopantgap.picker.pick_next`) proposes, and with
cells drawn at random among the same candidates, for several seeds. The learning
curves show how fast each strategy brings the hidden cells within reach.

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
"""

import contextlib
import math
import warnings
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from joblib import delayed
from sklearn.base import clone
from threadpoolctl import threadpool_limits

from dopantgap.errors import DopantgapError, SuspectValueWarning
from dopantgap.progress import step
from dopantgap.replay.hiding import hide_cells
from dopantgap.replay.scoring import (
    RANDOM,
    SUMMARY_COLUMNS,
    Scorer,
    floor_group_errors,
    floor_groups,
    floor_left_errors,
    savings,
)
from dopantgap.reproducible import canonical_order, seed_integer
from dopantgap.surrogate import Surrogate, order_levels
from dopantgap.surrogate.crossval import n_workers
from dopantgap.table import KEY_COLUMNS, REQUIRED_COLUMNS, check_frame
from dopantgap.workers import worker_pool

__all__ = ["CURVE_COLUMNS", "RELEARN", "ReplayResult", "random_picks", "replay"]

CURVE_COLUMNS = (
    "strategy", "seed", "round", "n_revealed", "cost_spent", "error", "rmse", "mean_std",
    "decided", "decided_wrong", "n_site_questions", "n_hidden_left", "floor_left",
)
#: How a replay's model learns each round's new cells (``replay(relearn=...)``).
RELEARN = ("refresh", "fit")


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
    scorer = Scorer(table, method, random_state, reference)
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
    floor_masks = floor_groups(hidden_cells, random_state) if floor and len(hidden) else []
    tasks += [
        delayed(floor_group_errors)(relearned, scorer, visible, hidden_cells, held) for held in floor_masks
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
        curves["floor_left"] = floor_left_errors(curves, picks, hidden_cells, floor_errors)
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
