"""Figures of a replay and of the rounds so far."""

import numpy as np
from matplotlib.ticker import MaxNLocator

from dopantgap.plots.style import CATEGORY_COLOURS, _figure, _plain_text, _require


# ----------------------------------------------------------------------------- rounds
def _strategy_label(strategy, n_seeds):
    return f"{strategy} ({n_seeds} seed{'s' if n_seeds != 1 else ''})"


@_plain_text
def learning_curve_figure(curves, cost_unit="cost units", floor=None):
    """Error against cost spent for each picking strategy, over replayed seeds.

    Parameters
    ----------
    curves : DataFrame
        Columns strategy, seed, round, cost_spent, error (eV), decided (count).
    cost_unit : str, default="cost units"
    floor : float or None, default=None
        The replay's measured floor over all hidden cells (the mean of
        ``replay.oracle_floor``), drawn as a dashed line.

    Returns
    -------
    Figure
        Left: median error per round against median cost spent, band from the 25th
        to the 75th percentile over seeds. Right: site questions decided, the same way.
    """
    _require(curves, ["strategy", "seed", "round", "cost_spent", "error", "decided"], "The replay curves")
    figure = _figure(9.5, 4.0)
    error_axes, decided_axes = figure.subplots(1, 2)
    for index, (strategy, rows) in enumerate(curves.groupby("strategy", sort=True)):
        colour = CATEGORY_COLOURS[index % len(CATEGORY_COLOURS)]
        marker = "osD^vP*"[index % 7]
        by_round = rows.groupby("round")
        cost = by_round["cost_spent"].median()
        for axes, column in ((error_axes, "error"), (decided_axes, "decided")):
            middle = by_round[column].median()
            low = by_round[column].quantile(0.25)
            high = by_round[column].quantile(0.75)
            axes.fill_between(cost.to_numpy(), low.to_numpy(), high.to_numpy(), color=colour, alpha=0.2, linewidth=0)
            axes.plot(cost.to_numpy(), middle.to_numpy(), color=colour, marker=marker, markersize=3.5,
                      linewidth=1.4, label=_strategy_label(strategy, rows["seed"].nunique()))
    if floor is not None and np.isfinite(floor):
        error_axes.axhline(floor, color="0.35", linestyle="--", linewidth=1.0,
                           label=f"floor {floor:.3g} eV (all other cells known)")
    error_axes.set_xlabel(f"cost spent ({cost_unit})")
    error_axes.set_ylabel("mean |error| of cells not yet revealed (eV)")
    error_axes.set_title("Error as calculations are added", fontsize=9)
    decided_axes.set_xlabel(f"cost spent ({cost_unit})")
    decided_axes.set_ylabel("site questions decided (count)")
    decided_axes.set_title("Decisions reached", fontsize=9)
    decided_axes.yaxis.set_major_locator(MaxNLocator(integer=True))
    error_axes.legend(fontsize=7)
    figure.suptitle("Replay: median over seeds, band 25th-75th percentile", fontsize=10)
    return figure


@_plain_text
def history_figure(history, cost_unit="cost units"):
    """How the uncertainty moved with the cost spent, and how many site questions were decided.

    Parameters
    ----------
    history : DataFrame
        Columns round, mean_std (eV), decided (count), cost_spent; optional
        ``mean_std_<method>`` columns (eV) add one dashed line per method.
    cost_unit : str, default="cost units"

    Returns
    -------
    Figure
        Left: mean predicted std of the missing cells against the cost spent, each point
        labelled with its round. Right: site questions decided after each round (whole
        rounds and counts on the axes).
    """
    _require(history, ["round", "mean_std", "decided", "cost_spent"], "The history of the rounds")
    history = history.sort_values("round")
    rounds = history["round"].astype(int).to_numpy()
    cost = history["cost_spent"].astype(float).to_numpy()
    figure = _figure(8.0, 3.4)
    std_axes, decided_axes = figure.subplots(1, 2)
    std_axes.plot(cost, history["mean_std"].astype(float).to_numpy(), marker="o", markersize=4,
                  color=CATEGORY_COLOURS[4], linewidth=1.6, label="all methods")
    methods = [name[len("mean_std_"):] for name in history.columns if name.startswith("mean_std_")]
    for index, method in enumerate(methods):
        std_axes.plot(cost, history[f"mean_std_{method}"].astype(float).to_numpy(), marker="osD^vP*"[index % 7],
                      markersize=3, linewidth=1.0, linestyle="--",
                      color=CATEGORY_COLOURS[(index + 5) % len(CATEGORY_COLOURS)], label=method)
    every = max(1, int(np.ceil(len(rounds) / 10)))  # at most about ten labels
    for index, (number, x, y) in enumerate(zip(rounds, cost, history["mean_std"].astype(float).to_numpy())):
        if np.isfinite(y) and (index % every == 0 or index == len(rounds) - 1):
            std_axes.annotate(f"round {number}", (x, y), xytext=(4, 4), textcoords="offset points", fontsize=7)
    std_axes.margins(x=0.12)  # room for the last round's label
    std_axes.set_xlabel(f"cost spent ({cost_unit})")
    std_axes.set_ylabel("mean predicted std of missing cells (eV)")
    std_axes.set_title("Uncertainty against cost spent", fontsize=9)
    if methods:
        std_axes.legend(fontsize=7)
    decided_axes.plot(rounds, history["decided"].astype(float).to_numpy(), marker="o", markersize=4,
                      color=CATEGORY_COLOURS[5], linewidth=1.6)
    decided_axes.set_xlabel("round")
    decided_axes.set_ylabel("site questions decided (count)")
    decided_axes.set_title("Decisions reached", fontsize=9)
    decided_axes.xaxis.set_major_locator(MaxNLocator(integer=True))
    decided_axes.yaxis.set_major_locator(MaxNLocator(integer=True))
    for axes in (std_axes, decided_axes):
        axes.grid(alpha=0.3, linewidth=0.5)
    figure.suptitle("History of the rounds", fontsize=10)
    return figure
