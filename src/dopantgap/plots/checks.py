"""Figures of the validation: parity and calibration."""


import numpy as np
import pandas as pd
from scipy.stats import norm

from dopantgap.calibration import SCENARIOS, cross_conformal_covered
from dopantgap.plots.style import CATEGORY_COLOURS, _figure, _plain_text, _require

_SCENARIO_STYLE = {
    "new-cell": ("#0072B2", "o"),
    "new-element": ("#D55E00", "s"),
    "upgrade": ("#009E73", "^"),
    "sparse-host": ("#E69F00", "v"),
    "new-host": ("#CC79A7", "D"),
}


# ----------------------------------------------------------------------------- validation
def _calibrated_std(residuals, calibration):
    if "std" in residuals.columns:
        return residuals["std"].astype(float).to_numpy()
    raw = residuals["raw_std"].astype(float).to_numpy()
    if calibration is None:
        return raw
    scale = np.array(
        [calibration.std_scale(s, q) for s, q in zip(residuals["scenario"], residuals["quantity"])]
    )
    return raw * scale


# Markers paired with CATEGORY_COLOURS, so that groups differ in shape as well as colour.
_GROUP_MARKERS = ("o", "s", "^", "D", "v", "P", "X")
_OTHER_COLOUR = "#8C8C8C"
_EDGE = "#222222"
# Words of a grouping column in titles.
_GROUP_WORDS = {"scenario": "scenario", "quantity": "quantity", "host": "host", "method": "level", "site": "site"}


def _group_order(values, grouping, levels):
    """Groups in reading order: scenarios as in SCENARIOS, levels cheapest first, the
    rest largest first (ties by name)."""
    counts = pd.Series(values).value_counts()
    names = list(counts.index)
    if grouping == "scenario":
        return [s for s in SCENARIOS if s in counts] + sorted(set(names) - set(SCENARIOS))
    if grouping == "method" and levels:
        return [m for m in levels if m in counts] + sorted(set(names) - set(levels))
    return sorted(names, key=lambda name: (-counts[name], str(name)))


def _cell_label(row, columns):
    return "/".join(str(row[column]) for column in ("element", "host", "site") if column in columns)


def _draw_parity_panel(ax, residuals, std, grouping, levels, n_labelled, limits):
    truth = residuals["value"].astype(float).to_numpy()
    mean = residuals["mean"].astype(float).to_numpy()
    error = np.abs(truth - mean)
    overall = float(np.mean(error)) if len(error) else float("nan")
    low, high = limits
    diagonal = np.array([low, high])
    if len(error):
        ax.fill_between(diagonal, diagonal - overall, diagonal + overall, color="#E6E6E6", linewidth=0,
                        label=f"within the mean |error| ({overall:.3f} eV)", zorder=0)
    ax.plot(diagonal, diagonal, color="black", linewidth=0.9, linestyle="--", label="predicted = computed", zorder=1)
    values = residuals[grouping].astype(str).to_numpy()
    order = _group_order(values, grouping, levels)
    shown = order if len(order) <= len(CATEGORY_COLOURS) else order[: len(CATEGORY_COLOURS) - 1]
    series = [(name, values == name, CATEGORY_COLOURS[i], _GROUP_MARKERS[i]) for i, name in enumerate(shown)]
    if len(shown) < len(order):
        rest = ~np.isin(values, shown)
        series.append((f"other ({len(order) - len(shown)} {_GROUP_WORDS.get(grouping, grouping)}s)", rest,
                       _OTHER_COLOUR, "."))
    for name, rows, colour, marker in series:
        ax.errorbar(
            truth[rows], mean[rows], yerr=None if std is None else std[rows], fmt=marker, markersize=4.2,
            color=colour, markeredgecolor=_EDGE, markeredgewidth=0.4, ecolor=colour, elinewidth=0.5,
            alpha=0.85, capsize=0, zorder=2,
            label=f"{name}: {int(rows.sum())} cells, mean |error| {float(np.mean(error[rows])):.3f} eV",
        )
    worst = np.argsort(-error, kind="stable")[: max(0, int(n_labelled))]
    labels = [_cell_label(residuals.iloc[position], residuals.columns) for position in worst]
    if len(set(labels)) < len(labels):
        # one element and site at two levels or quantities: say which cell is which
        labels = [
            f"{label} ({', '.join(str(residuals[c].iat[p]) for c in ('method', 'quantity') if c in residuals)})"
            for label, p in zip(labels, worst)
        ]
    for rank, position in enumerate(worst):
        # each worst cell carries its number; the numbered names stand in a column in the
        # lower right corner, below the diagonal (empty in a parity plot; the legend sits
        # above it), so no name hides a point and no leader line crosses a name
        ax.annotate(
            str(rank + 1), xy=(truth[position], mean[position]), xytext=(4, -4), textcoords="offset points",
            ha="left", va="top", fontsize=7, fontweight="bold", color=_EDGE, zorder=4,
            gid=f"mark-outlier-{rank}",
        ).set_in_layout(False)
        annotation = ax.annotate(
            f"{rank + 1}. {labels[rank]}", xy=(truth[position], mean[position]),
            xytext=(0.97, 0.04 + 0.065 * (len(worst) - 1 - rank)), textcoords="axes fraction",
            ha="right", va="bottom", fontsize=7, zorder=3, gid=f"outlier-{rank}",
            bbox={"boxstyle": "round,pad=0.2", "facecolor": "white", "edgecolor": "#BBBBBB", "linewidth": 0.5},
        )
        annotation.set_in_layout(False)  # a long label must not shrink the panel
    ax.set_xlim(low, high)
    ax.set_ylim(low, high)
    ax.set_aspect("equal")
    ax.grid(True, color="#F0F0F0", linewidth=0.6, zorder=0)
    ax.set_xlabel("computed (eV)")
    ax.set_ylabel("predicted, held out (eV)")
    ax.legend(fontsize=6.5, loc="upper left", framealpha=0.9)
    word = _GROUP_WORDS.get(grouping, grouping)
    if len(error):
        ax.set_title(f"By {word}: mean |error| {overall:.3f} eV over {len(error)} cells", fontsize=9)
    else:
        ax.set_title(f"By {word}: no held-out cells", fontsize=9)


@_plain_text
def parity_figure(cv_residuals, scenario=None, calibration=None, groupings=None, levels=None, n_labelled=4):
    """Out-of-fold predictions against the computed values they hid, one panel per grouping.

    Each panel shows every hidden cell once, coloured and shaped by one grouping
    (quantity, host, level ...; Okabe-Ito colours, each with its own marker, the
    groups beyond seven pooled as "other"), the line predicted = computed, a grey band
    of +/- the mean |error| around it, the mean |error| per group in the legend and
    overall in the title, and the worst cells labelled element/host/site.

    Parameters
    ----------
    cv_residuals : DataFrame
        ``Surrogate.cv_residuals_`` or the kept learner's rows of ``validate``'s
        predictions: value (computed), mean (out-of-fold prediction), scenario,
        quantity and the grouping columns; element, host and site name the labelled
        cells. Error bars (1 std): a ``std`` column as is, else ``raw_std`` scaled by
        ``calibration``, else none.
    scenario : str or None, default=None
        Only this scenario; None: all.
    calibration : ScenarioCalibration or None, default=None
        Turns raw_std into the calibrated std of the error bars.
    groupings : sequence of str or None, default=None
        Columns, one panel each. None: quantity, host and method (the level),
        preceded by scenario when cells of several scenarios are drawn.
    levels : sequence of str or None, default=None
        Methods cheapest first, the order of the level panel's legend.
    n_labelled : int, default=4
        Cells with the largest |error| labelled in each panel.

    Returns
    -------
    Figure
    """
    _require(cv_residuals, ["value", "mean", "scenario", "quantity"], "The cross-validated residuals")
    residuals = cv_residuals
    if scenario is not None:
        residuals = residuals[residuals["scenario"] == scenario]
    residuals = residuals.reset_index(drop=True)
    if groupings is None:
        groupings = [g for g in ("quantity", "host", "method") if g in residuals.columns]
        if scenario is None and residuals["scenario"].nunique() > 1:
            groupings = ["scenario"] + groupings
    groupings = list(groupings)
    _require(residuals, groupings, "The cross-validated residuals")
    std = None
    if "std" in residuals.columns or "raw_std" in residuals.columns:
        std = _calibrated_std(residuals, calibration)
    truth = residuals["value"].astype(float).to_numpy()
    mean = residuals["mean"].astype(float).to_numpy()
    if len(truth):
        low = float(min(truth.min(), mean.min()))
        high = float(max(truth.max(), mean.max()))
    else:
        low, high = 0.0, 1.0
    pad = 0.05 * (high - low or 1.0)
    limits = (low - pad, high + pad)
    n_panels = max(1, len(groupings))
    columns = n_panels if n_panels <= 3 else 2
    rows = int(np.ceil(n_panels / columns))
    figure = _figure(4.4 * columns, 4.9 * rows)
    for index, grouping in enumerate(groupings):
        ax = figure.add_subplot(rows, columns, index + 1)
        _draw_parity_panel(ax, residuals, std, grouping, levels, n_labelled, limits)
    title = "Held-out cells predicted against computed"
    if scenario is not None:
        title += f" ({scenario})"
    if std is not None:
        title += "; bars: 1 calibrated std" if ("std" in residuals.columns or calibration is not None) else "; bars: 1 std"
    figure.suptitle(title, fontsize=10)
    return figure


_DEFAULT_LEVELS = np.round(np.concatenate([np.arange(0.1, 0.95, 0.05), [0.95, 0.975, 0.99]]), 3)


@_plain_text
def calibration_figure(cv_residuals, calibration, levels=None, show_raw=True, out_of_fold=False):
    """Share of hidden cells inside their central interval, against the interval's level.

    Parameters
    ----------
    cv_residuals : DataFrame
        ``Surrogate.cv_residuals_`` (value, mean, raw_std, scenario, quantity).
    calibration : ScenarioCalibration
        Its ``half_width(scenario, level, quantity) * raw_std`` is the calibrated
        half-width.
    levels : sequence of float or None, default=None
        Nominal levels; None: 0.10 to 0.99.
    show_raw : bool, default=True
        Also draw the uncalibrated Gaussian interval mean +/- z_L * raw_std (dotted).
    out_of_fold : bool, default=False
        Judge each fold's cells by the widths the other folds give
        (``calibration.cross_conformal_covered``; needs a ``fold`` column): a test of
        the calibration. Otherwise the curves are in-sample (the widths come from the
        same residuals) and show how well split-conformal widths fit.

    Returns
    -------
    Figure
    """
    _require(cv_residuals, ["value", "mean", "raw_std", "scenario", "quantity"], "The cross-validated residuals")
    levels = _DEFAULT_LEVELS if levels is None else np.asarray(levels, dtype=float)
    figure = _figure(5.6, 5.2)
    ax = figure.add_subplot()
    error = np.abs(cv_residuals["value"].astype(float).to_numpy() - cv_residuals["mean"].astype(float).to_numpy())
    raw = cv_residuals["raw_std"].astype(float).to_numpy()
    scenarios = cv_residuals["scenario"].to_numpy()
    quantities = cv_residuals["quantity"].to_numpy()
    for name in [s for s in SCENARIOS if s in set(scenarios)]:
        rows = scenarios == name
        colour, marker = _SCENARIO_STYLE[name]
        observed, observed_raw = [], []
        if out_of_fold:
            scored = cv_residuals[rows].assign(z=error[rows] / np.maximum(raw[rows], 1e-12))
        for level in levels:
            if out_of_fold:
                observed.append(float(np.mean(cross_conformal_covered(scored, "z", float(level)))))
            else:
                widths = {q: calibration.half_width(name, level, q) for q in set(quantities[rows])}
                half = np.array([widths[q] for q in quantities[rows]]) * raw[rows]
                observed.append(float(np.mean(error[rows] <= half)))
            observed_raw.append(float(np.mean(error[rows] <= norm.ppf(0.5 + level / 2.0) * raw[rows])))
        kind = "calibrated, out of fold" if out_of_fold else "calibrated"
        ax.plot(levels, observed, marker=marker, markersize=3.5, color=colour, linewidth=1.3,
                label=f"{name}, {kind} ({rows.sum()} cells)")
        if show_raw:
            ax.plot(levels, observed_raw, color=colour, linewidth=1.0, linestyle=":",
                    label=f"{name}, raw Gaussian")
    ax.plot([0, 1], [0, 1], color="black", linewidth=0.9, linestyle="--", label="ideal")
    ax.set_xlim(0, 1)
    ax.set_ylim(0, 1)
    ax.set_aspect("equal")
    ax.set_xlabel("nominal level of the central interval (fraction)")
    ax.set_ylabel("hidden cells inside the interval (fraction)")
    ax.legend(fontsize=7, loc="upper left")
    ax.set_title("Interval coverage in cross-validation", fontsize=9)
    return figure
