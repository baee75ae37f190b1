"""Figures of an explanation: descriptor importance, one element's breakdown, and one
figure per target group (importance of every target of the group, then a breakdown of
each chosen element for each target)."""


import numpy as np
import pandas as pd
from matplotlib import colormaps
from matplotlib.cm import ScalarMappable
from matplotlib.colors import Normalize

from dopantgap.errors import DopantgapError
from dopantgap.plots.style import CATEGORY_COLOURS, SPREAD_CMAP, _figure, _plain_text, _require, _short


# ----------------------------------------------------------------------------- explanations
@_plain_text
def importance_figure(importance, shap_values, target, top_n=12):
    """Which features move one target's predictions, and how.

    Parameters
    ----------
    importance : DataFrame
        Columns target, feature, importance (mean |SHAP|, eV).
    shap_values : DataFrame
        Columns target, element, feature, feature_value, shap (eV).
    target : str
    top_n : int, default=12
        Features shown, most important first.

    Returns
    -------
    Figure
        Left: bars of mean |SHAP|. Right: each element's SHAP value of each feature
        as a dot, coloured by the feature's value (ranked within the feature).
    """
    _require(importance, ["target", "feature", "importance"], "The importance table")
    _require(shap_values, ["target", "element", "feature", "feature_value", "shap"], "The SHAP value table")
    ranked = importance[importance["target"] == target].sort_values("importance", ascending=False).head(top_n)
    if len(ranked) == 0:
        raise DopantgapError(f"The importance table has no rows for target {target!r}.")
    features = list(ranked["feature"])
    points = shap_values[(shap_values["target"] == target) & shap_values["feature"].isin(features)]
    figure = _figure(10.0, 0.42 * len(features) + 1.8)
    bar_axes, dot_axes = figure.subplots(1, 2, sharey=True, gridspec_kw={"width_ratios": [1, 1.6]})
    positions = np.arange(len(features))[::-1]
    bar_axes.barh(positions, ranked["importance"].astype(float).to_numpy(), color=CATEGORY_COLOURS[4],
                  edgecolor="black", linewidth=0.5, height=0.65)
    bar_axes.set_yticks(positions)
    bar_axes.set_yticklabels(features, fontsize=8)
    bar_axes.set_xlabel("mean |SHAP value| (eV)")
    bar_axes.set_title("Importance", fontsize=9)
    rng = np.random.default_rng(0)  # fixed jitter: the same input draws the same figure
    colour_map = colormaps[SPREAD_CMAP]
    for position, feature in zip(positions, features):
        rows = points[points["feature"] == feature]
        if len(rows) == 0:
            continue
        feature_value = pd.to_numeric(rows["feature_value"], errors="coerce").to_numpy(dtype=float)
        rank = pd.Series(feature_value).rank(pct=True).fillna(0.5).to_numpy()
        jitter = rng.uniform(-0.25, 0.25, len(rows))
        dot_axes.scatter(rows["shap"].astype(float).to_numpy(), position + jitter, c=colour_map(rank), s=9,
                         edgecolors="none")
    dot_axes.axvline(0.0, color="black", linewidth=0.7)
    dot_axes.set_xlabel("SHAP value: shift of the prediction (eV)")
    dot_axes.set_title("Per element (dot colour: feature value, low dark, high light)", fontsize=9)
    scalar = ScalarMappable(norm=Normalize(0, 1), cmap=colour_map)
    colour_bar = figure.colorbar(scalar, ax=dot_axes, fraction=0.04, pad=0.01)
    colour_bar.set_label("feature value, rank within feature (fraction)", fontsize=7)
    colour_bar.ax.tick_params(labelsize=6)
    figure.suptitle(f"What drives {target}", fontsize=10)
    return figure


def _plain_name(feature):
    """Descriptor name as words: ``log10_polarisability`` -> ``polarisability``."""
    name = str(feature)
    if name.startswith("log10_"):
        name = name[len("log10_"):]
    return name.replace("_", " ")


def _feature_label(feature, value, unit=""):
    """``covalent radius = 57 pm``; a ``log10_`` feature shows the descriptor itself
    (``polarisability = 16 bohr^3``); the element's own offset has no value."""
    if value is None or pd.isna(value):
        return str(feature)
    unit = "" if unit is None or pd.isna(unit) else str(unit)
    value = float(value)
    if str(feature).startswith("log10_"):
        value = 10.0 ** value
        unit = unit[len("log10("):-1] if unit.startswith("log10(") else ""
    return f"{_plain_name(feature)} = {_short(value)}" + (f" {unit}" if unit else "")


def _steps(rows, top_n):
    """(label, shift) of the largest contributions, the rest summed into one step."""
    rows = rows.assign(size=rows["shap"].astype(float).abs()).sort_values("size", ascending=False, kind="stable")
    shown = rows.head(top_n)
    units = shown["unit"] if "unit" in shown.columns else [""] * len(shown)
    steps = [
        (_feature_label(feature, value, unit), float(shift))
        for feature, value, unit, shift in zip(shown["feature"], shown["feature_value"], units, shown["shap"])
    ]
    rest = rows.iloc[top_n:]
    if len(rest):
        steps.append((f"{len(rest)} other features", float(rest["shap"].astype(float).sum())))
    return steps


def _draw_breakdown(ax, steps, base, fontsize=8):
    """Bars from the base value, each starting where the previous ended; returns the end."""
    start = base
    positions = np.arange(len(steps))[::-1]
    for position, (label, shift) in zip(positions, steps):
        rising = shift >= 0
        ax.barh(position, shift, left=start, height=0.62,
                color=CATEGORY_COLOURS[5] if rising else CATEGORY_COLOURS[1],
                hatch=None if rising else "////", edgecolor="black", linewidth=0.5,
                gid="step-up" if rising else "step-down")
        ax.text(start + shift, position, f" {shift:+.3f}" if rising else f"{shift:+.3f} ",
                ha="left" if rising else "right", va="center", fontsize=fontsize - 1)
        start += shift
    ax.axvline(base, color="black", linewidth=0.8, linestyle="--")
    ax.axvline(start, color="black", linewidth=1.2)
    ax.set_yticks(positions)
    ax.set_yticklabels([label for label, _ in steps], fontsize=fontsize)
    ends = np.cumsum([base] + [shift for _, shift in steps])
    low, high = float(ends.min()), float(ends.max())
    # room for the step labels on both sides
    pad = 0.35 * (high - low or 0.1)
    ax.set_xlim(low - pad, high + pad)
    ax.set_ylim(-0.8, len(steps) - 0.2)
    ax.tick_params(axis="x", labelsize=fontsize - 1)
    return start


_BREAKDOWN_KEY = "plain bars raise the prediction, hatched bars lower it; dashed line: base value, solid: prediction"


@_plain_text
def breakdown_figure(shap_values, base_values, target, element, top_n=10):
    """Steps from the base value to one element's prediction, feature by feature.

    Parameters
    ----------
    shap_values : DataFrame
        Columns target, element, feature, feature_value, shap (eV); an optional unit
        column labels the descriptor values (``covalent radius = 57 pm``).
    base_values : DataFrame
        Columns target, element, base_value (eV), prediction (eV).
    target, element : str
    top_n : int, default=10
        Largest contributions shown; the rest are summed into one step.

    Returns
    -------
    Figure
        Each bar starts where the previous one ended; the last ends at base value +
        the sum of all SHAP values (the prediction, by SHAP's local accuracy).
    """
    _require(shap_values, ["target", "element", "feature", "feature_value", "shap"], "The SHAP value table")
    _require(base_values, ["target", "element", "base_value", "prediction"], "The base value table")
    rows = shap_values[(shap_values["target"] == target) & (shap_values["element"] == element)]
    base_rows = base_values[(base_values["target"] == target) & (base_values["element"] == element)]
    if len(rows) == 0 or len(base_rows) == 0:
        raise DopantgapError(f"No SHAP values for element {element!r} and target {target!r}.")
    base = float(base_rows["base_value"].iat[0])
    prediction = float(base_rows["prediction"].iat[0])
    steps = _steps(rows, top_n)
    figure = _figure(8.0, 0.42 * len(steps) + 2.4)
    ax = figure.add_subplot()
    start = _draw_breakdown(ax, steps, base)
    ax.set_xlabel(f"{target} (eV)")
    ax.set_title(f"base value {base:.3f} eV -> prediction {prediction:.3f} eV", fontsize=9)
    figure.suptitle(f"{element}: how its prediction is built", fontsize=10)
    figure.supxlabel(_BREAKDOWN_KEY, fontsize=7)
    figure.breakdown_end_ = start
    return figure


def _short_target(target, group):
    """The part of a target's name its group does not already say."""
    shared = {part.strip() for part in str(group).split("|")[1:]}
    parts = [part.strip() for part in str(target).split("|")]
    rest = [part for part in parts if part not in shared]
    return " | ".join(rest) if rest else str(target)


@_plain_text
def group_figure(targets, importance, shap_values, base_values, element_symbols=(), top_n=8, steps_shown=5):
    """One figure for a group of targets: what drives each, and how chosen elements' predictions are built.

    Parameters
    ----------
    targets : DataFrame
        Rows of ``Explanation.targets`` of one group (columns target, group).
    importance : DataFrame
        Columns target, feature, importance (mean |SHAP|, eV).
    shap_values : DataFrame
        Columns target, element, feature, feature_value, shap (eV), optional unit.
    base_values : DataFrame
        Columns target, element, base_value, prediction (eV).
    element_symbols : sequence of str, default=()
        Elements broken down, one row of panels each (every one given is drawn).
    top_n : int, default=8
        Features in the importance panel, by mean importance over the group.
    steps_shown : int, default=5
        Largest contributions per breakdown panel; the rest are summed.

    Returns
    -------
    Figure
        Top: a feature x target grid, each disc's area the mean |SHAP| (eV, also
        printed). Below: per element (rows) and target (columns), the steps from the
        base value to the prediction.
    """
    _require(targets, ["target", "group"], "The target table")
    _require(importance, ["target", "feature", "importance"], "The importance table")
    _require(shap_values, ["target", "element", "feature", "feature_value", "shap"], "The SHAP value table")
    _require(base_values, ["target", "element", "base_value", "prediction"], "The base value table")
    names = list(dict.fromkeys(targets["target"].astype(str)))
    if not names:
        raise DopantgapError("The target table has no rows for this group.")
    group = str(targets["group"].iat[0])
    part = importance[importance["target"].astype(str).isin(names)]
    if len(part) == 0:
        raise DopantgapError(f"The importance table has no rows for the targets of {group!r}.")
    ranked = part.groupby("feature", sort=False)["importance"].mean().sort_values(ascending=False, kind="stable")
    features = list(ranked.index[:top_n])
    grid = part.pivot_table(index="feature", columns="target", values="importance", aggfunc="mean")
    grid = grid.reindex(index=features, columns=names)
    symbols = [symbol for symbol in element_symbols
               if ((base_values["element"] == symbol) & base_values["target"].astype(str).isin(names)).any()]
    n_columns = len(names)
    panel_width = 3.9
    width = max(9.0, panel_width * n_columns)
    top_height = 0.34 * len(features) + 1.9
    panel_height = 0.36 * (steps_shown + 1) + 1.0
    figure = _figure(width, top_height + panel_height * len(symbols) + 0.8)
    sub = figure.subfigures(1 + len(symbols), 1, height_ratios=[top_height] + [panel_height] * len(symbols))
    sub = np.atleast_1d(sub)
    # importance grid
    ax = sub[0].add_subplot()
    values = grid.to_numpy(dtype=float)
    largest = float(np.nanmax(values)) if np.isfinite(values).any() else 1.0
    for row, feature in enumerate(features):
        for column, target in enumerate(names):
            value = values[row, column]
            if not np.isfinite(value):
                continue
            ax.scatter(column, row, s=900.0 * value / (largest or 1.0) + 4.0, color=CATEGORY_COLOURS[4],
                       edgecolors="black", linewidths=0.5, alpha=0.85, zorder=2)
            ax.text(column + 0.12, row - 0.28, f"{value:.2f}", fontsize=7, ha="left", va="center", zorder=3)
    units = {}
    if "unit" in shap_values.columns:
        units = dict(zip(shap_values["feature"], shap_values["unit"]))
    ax.set_yticks(range(len(features)))
    ax.set_yticklabels([
        _plain_name(feature) + (f" ({units[feature]})" if isinstance(units.get(feature), str) and units[feature] else "")
        for feature in features
    ], fontsize=8)
    ax.set_xticks(range(n_columns))
    ax.set_xticklabels([_short_target(name, group) for name in names], fontsize=8)
    ax.set_xlim(-0.6, n_columns - 0.2)
    ax.set_ylim(len(features) - 0.5, -0.6)
    ax.grid(color="#dddddd", linewidth=0.5, zorder=0)
    ax.set_title("mean |SHAP value| (eV) over the table's elements: disc area and number", fontsize=9)
    figure.suptitle(f"What drives {group}", fontsize=11)
    for row, symbol in enumerate(symbols):
        panel = sub[1 + row]
        axes = np.atleast_1d(panel.subplots(1, n_columns))
        for ax, target in zip(axes, names):
            rows = shap_values[(shap_values["target"].astype(str) == target) & (shap_values["element"] == symbol)]
            bases = base_values[(base_values["target"].astype(str) == target) & (base_values["element"] == symbol)]
            if len(rows) == 0 or len(bases) == 0:
                ax.set_axis_off()
                continue
            base = float(bases["base_value"].iat[0])
            prediction = float(bases["prediction"].iat[0])
            _draw_breakdown(ax, _steps(rows, steps_shown), base, fontsize=7)
            ax.set_title(f"{_short_target(target, group)}: {base:.2f} -> {prediction:.2f} eV", fontsize=8)
        panel.suptitle(f"{symbol}: from the base value to the prediction", fontsize=9, x=0.02, ha="left")
    if symbols:
        figure.supxlabel(_BREAKDOWN_KEY, fontsize=7)
    return figure
