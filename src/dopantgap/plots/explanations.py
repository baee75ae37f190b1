"""Figures of an explanation: descriptor importance and one element's breakdown."""


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


@_plain_text
def breakdown_figure(shap_values, base_values, target, element, top_n=10):
    """Steps from the base value to one element's prediction, feature by feature.

    Parameters
    ----------
    shap_values : DataFrame
        Columns target, element, feature, feature_value, shap (eV).
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
    rows = rows.assign(size=rows["shap"].astype(float).abs()).sort_values("size", ascending=False)
    shown = rows.head(top_n)
    steps = [
        # the element's own offset has no descriptor value to show
        (feature if pd.isna(value) else f"{feature} = {_short(value)}", float(shift))
        for feature, value, shift in zip(shown["feature"], shown["feature_value"], shown["shap"])
    ]
    rest = rows.iloc[top_n:]
    if len(rest):
        steps.append((f"{len(rest)} other features", float(rest["shap"].astype(float).sum())))
    figure = _figure(8.0, 0.42 * len(steps) + 2.0)
    ax = figure.add_subplot()
    start = base
    positions = np.arange(len(steps))[::-1]
    for position, (label, shift) in zip(positions, steps):
        rising = shift >= 0
        ax.barh(position, shift, left=start, height=0.62,
                color=CATEGORY_COLOURS[5] if rising else CATEGORY_COLOURS[1],
                hatch=None if rising else "////", edgecolor="black", linewidth=0.5,
                gid="step-up" if rising else "step-down")
        ax.text(start + shift, position, f" {shift:+.3f}" if rising else f"{shift:+.3f} ",
                ha="left" if rising else "right", va="center", fontsize=7)
        start += shift
    ax.axvline(base, color="black", linewidth=0.8, linestyle="--", label=f"base value {base:.3f} eV")
    ax.axvline(start, color="black", linewidth=1.2, label=f"base + SHAP {start:.3f} eV")
    ax.set_yticks(positions)
    ax.set_yticklabels([label for label, _ in steps], fontsize=8)
    ax.set_xlabel(f"{target} (eV)")
    figure.legend(fontsize=7, loc="outside lower center", ncol=2, frameon=False)
    ax.set_title(
        f"{element}: from the base value to the prediction ({prediction:.3f} eV); "
        f"plain bars raise, hatched bars lower", fontsize=9,
    )
    ends = np.cumsum([base] + [shift for _, shift in steps])
    low, high = float(ends.min()), float(ends.max())
    pad = 0.3 * (high - low or 0.1)
    ax.set_xlim(low - pad, high + pad)
    ax.set_ylim(-0.8, len(steps) - 0.2)
    figure.breakdown_end_ = start
    return figure
