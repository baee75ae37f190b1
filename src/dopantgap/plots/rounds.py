"""Figures of a replay and of the rounds so far."""


from matplotlib.ticker import MaxNLocator

from dopantgap.plots.style import CATEGORY_COLOURS, _figure, _plain_text, _require


# ----------------------------------------------------------------------------- campaigns
def _strategy_label(strategy, n_seeds):
    return f"{strategy} ({n_seeds} seed{'s' if n_seeds != 1 else ''})"


@_plain_text
def learning_curve_figure(curves, cost_unit="cost units"):
    """Error against cost spent for each picking strategy, over replayed seeds.

    Parameters
    ----------
    curves : DataFrame
        Columns strategy, seed, round, cost_spent, error (eV), decided (count).
    cost_unit : str, default="cost units"

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
    """How a campaign's uncertainty and decisions moved, round by round.

    Parameters
    ----------
    history : DataFrame
        Columns round, mean_std (eV), decided (count), cost_spent.
    cost_unit : str, default="cost units"

    Returns
    -------
    Figure
    """
    _require(history, ["round", "mean_std", "decided", "cost_spent"], "The campaign history")
    history = history.sort_values("round")
    figure = _figure(10.0, 3.4)
    panels = figure.subplots(1, 3)
    for axes, column, label, colour in (
        (panels[0], "mean_std", "mean predicted std (eV)", CATEGORY_COLOURS[4]),
        (panels[1], "decided", "site questions decided (count)", CATEGORY_COLOURS[5]),
        (panels[2], "cost_spent", f"cost spent ({cost_unit})", CATEGORY_COLOURS[2]),
    ):
        axes.plot(history["round"].to_numpy(), history[column].astype(float).to_numpy(), marker="o",
                  markersize=3.5, color=colour, linewidth=1.4)
        axes.set_xlabel("round (count)")
        axes.set_ylabel(label)
        axes.grid(alpha=0.3, linewidth=0.5)
    figure.suptitle("Campaign history", fontsize=10)
    return figure
