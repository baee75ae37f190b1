"""Figures of a filled table, its validation, explanations and campaigns.

Every function returns a :class:`matplotlib.figure.Figure` built without pyplot's
global state (Agg canvas), so figures can be made in threads and tests; importing this
module leaves matplotlib's backend as it was. Text is drawn as written: a ``$`` in a
label is a dollar sign, never the start of mathtext. Colour maps
are perceptually uniform and keep their order in grey (cividis, viridis); categories
use the Okabe-Ito palette (Okabe & Ito 2008, "Color Universal Design", colour-blind
safe) together with hatching or letters, so that a greyscale print still reads.
"""

import base64
import functools
import io
import sys

import matplotlib
import numpy as np
import pandas as pd
from matplotlib import colormaps
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.cm import ScalarMappable
from matplotlib.colors import Normalize, to_rgb
from matplotlib.figure import Figure
from matplotlib.patches import Patch, Rectangle
from matplotlib.ticker import MaxNLocator
from scipy.stats import norm

from dopantgap import elements
from dopantgap.atomic import write_bytes_atomic
from dopantgap.calibration import SCENARIOS, cross_conformal_covered
from dopantgap.errors import DopantgapError
from dopantgap.symbols import SYMBOLS

__all__ = [
    "CATEGORY_COLOURS",
    "CATEGORY_HATCHES",
    "VALUE_CMAP",
    "SPREAD_CMAP",
    "breakdown_figure",
    "calibration_figure",
    "column_values",
    "figure_to_data_uri",
    "history_figure",
    "importance_figure",
    "learning_curve_figure",
    "luminance",
    "parity_figure",
    "periodic_map",
    "save_png",
    "site_preference_map",
    "spread_map",
    "table_position",
]

#: Colour map of values (dark = low, light = high; readable in grey and with CVD).
VALUE_CMAP = "cividis"
#: Colour map of uncertainties.
SPREAD_CMAP = "viridis"
#: Okabe-Ito colours (black left out: symbols are printed on the boxes).
CATEGORY_COLOURS = ("#E69F00", "#56B4E9", "#009E73", "#F0E442", "#0072B2", "#D55E00", "#CC79A7")
#: Hatches paired with the categories, for greyscale prints.
CATEGORY_HATCHES = ("", "////", "....", "xxxx", "\\\\\\\\", "++++", "oooo")
_SCENARIO_STYLE = {
    "new-cell": ("#0072B2", "o"),
    "new-element": ("#D55E00", "s"),
    "upgrade": ("#009E73", "^"),
}
_EMPTY_FACE = "#eeeeee"
_EMPTY_EDGE = "#c4c4c4"
_COMPUTED_FRAME = 2.4
_PREDICTED_FRAME = 0.5
# the f-block rows sit below the main table, after a gap of half a row
_F_ROW_OFFSET = 2.5
_F_FIRST_COLUMN = 4
_BOTTOM = 9.5 + 0.62
_TOP = 0.38


# ----------------------------------------------------------------------------- helpers
# Labels come from the user's table (hosts, sites, methods, quantities, elements): drawn
# with mathtext they could fail to parse (``$x^$``) or say something else than written.
_PLAIN_TEXT = {"text.parse_math": False, "text.usetex": False}


def _plain_text(function):
    """Run ``function`` with every text it creates drawn as written (no mathtext, no TeX)."""

    @functools.wraps(function)
    def wrapper(*args, **kwargs):
        with matplotlib.rc_context(_PLAIN_TEXT):
            return function(*args, **kwargs)

    return wrapper


def _figure(width, height):
    figure = Figure(figsize=(width, height), layout="constrained")
    FigureCanvasAgg(figure)
    return figure


def luminance(colour):
    """Relative luminance of a colour, 0 (black) to 1 (white).

    The sRGB linearisation and weights of W3C, "Web Content Accessibility Guidelines
    (WCAG) 2.0", 2008, definition of relative luminance.
    """
    rgb = np.asarray(to_rgb(colour), dtype=float)
    linear = np.where(rgb <= 0.03928, rgb / 12.92, ((rgb + 0.055) / 1.055) ** 2.4)
    return float(linear @ np.array([0.2126, 0.7152, 0.0722]))


def _ink_for(face):
    return "black" if luminance(face) > 0.33 else "white"


def _blend_with_white(colour, weight):
    rgb = np.asarray(to_rgb(colour), dtype=float)
    return tuple(weight * rgb + (1.0 - weight) * np.ones(3))


def _require(frame, columns, what):
    missing = [column for column in columns if column not in frame.columns]
    if missing:
        raise DopantgapError(
            f"{what} lacks the column(s) {', '.join(missing)}; expected {', '.join(columns)}."
        )


def _as_series(values):
    if values is None:
        return pd.Series(dtype=float)
    if isinstance(values, pd.Series):
        return values
    if isinstance(values, dict):
        return pd.Series(values)
    return pd.Series(dict(values))


def _positions():
    table = elements.descriptor_table(list(SYMBOLS))
    positions = {}
    for symbol, row in table.iterrows():
        number = int(row["atomic_number"])
        if int(row["block_index"]) == 3:
            first = 58 if number < 90 else 90
            positions[symbol] = (float(row["period"]) + _F_ROW_OFFSET, float(_F_FIRST_COLUMN + number - first))
        else:
            positions[symbol] = (float(row["period"]), float(row["group"]))
    return positions


_POSITION_CACHE = {}


def table_position(symbol):
    """Row and column of an element's box in the periodic-table maps.

    Main-table elements sit at (period, group) of the 18-column table (La and Ac in
    group 3); the f-block elements (Ce-Lu, Th-Lr) in two rows below, starting under
    group 4.

    Parameters
    ----------
    symbol : str

    Returns
    -------
    (float, float)
        Row (1 = top) and column (1 = left).
    """
    if not _POSITION_CACHE:
        _POSITION_CACHE.update(_positions())
    return _POSITION_CACHE[symbol]


def column_values(filled, host, site, method, quantity):
    """One filled column as a per-element frame for :func:`periodic_map`.

    Parameters
    ----------
    filled : DataFrame
        Output of ``fill.fill_table`` (element, host, site, method, quantity, value,
        std, status, ...).
    host, site, method, quantity : str
        The column.

    Returns
    -------
    DataFrame
        Index element; columns value (eV), std (eV), computed (bool).
    """
    _require(filled, ["element", "host", "site", "method", "quantity", "value", "std", "status"], "The filled table")
    rows = filled[
        (filled["host"] == host) & (filled["site"] == site)
        & (filled["method"] == method) & (filled["quantity"] == quantity)
    ]
    result = pd.DataFrame(
        {
            "value": rows["value"].astype(float).to_numpy(),
            "std": rows["std"].astype(float).to_numpy(),
            "computed": (rows["status"] == "computed").to_numpy(),
        },
        index=pd.Index(rows["element"].to_numpy(), name="element"),
    )
    return result


def _draw_grid(ax):
    ax.set_xlim(0.5, 18.5)
    ax.set_ylim(_BOTTOM, _TOP)
    ax.set_aspect("equal")
    ax.set_xticks(range(1, 19))
    ax.set_yticks(range(1, 8))
    ax.tick_params(length=0, labelsize=7, labeltop=True, labelbottom=False)
    ax.set_xlabel("group")
    ax.xaxis.set_label_position("top")
    ax.set_ylabel("period")
    for side in ax.spines.values():
        side.set_visible(False)
    ax.text(_F_FIRST_COLUMN - 0.6, 6 + _F_ROW_OFFSET, "4f", ha="right", va="center", fontsize=7)
    ax.text(_F_FIRST_COLUMN - 0.6, 7 + _F_ROW_OFFSET, "5f", ha="right", va="center", fontsize=7)


def _box(ax, symbol, face, edge, linewidth, linestyle="-", hatch=None, hatch_colour=None):
    row, column = table_position(symbol)
    patch = Rectangle(
        (column - 0.46, row - 0.46), 0.92, 0.92,
        facecolor=face, edgecolor=edge, linewidth=linewidth, linestyle=linestyle,
        hatch=hatch or None, gid=f"box-{symbol}",
    )
    if hatch:
        # hatch lines take the edge colour; a separate frame keeps the frame style
        patch.set_edgecolor(hatch_colour or "#333333")
        patch.set_linewidth(0.0)
        ax.add_patch(patch)
        frame = Rectangle(
            (column - 0.46, row - 0.46), 0.92, 0.92, fill=False,
            edgecolor=edge, linewidth=linewidth, linestyle=linestyle, gid=f"frame-{symbol}",
        )
        ax.add_patch(frame)
        return frame
    ax.add_patch(patch)
    return patch


def _axes_fraction(column, row):
    return (column - 0.5) / 18.0, (_BOTTOM - row) / (_BOTTOM - _TOP)


@_plain_text
def periodic_map(values, title, unit="eV", computed=None, cmap=VALUE_CMAP, tags=None,
                 annotate=True, value_format="{:.2f}"):
    """A periodic table coloured by one value per element.

    Parameters
    ----------
    values : Series or dict
        Element symbol -> value; elements absent or NaN get a grey, empty box.
    title : str
        Figure title; also the colour bar's label (with ``unit``).
    unit : str, default="eV"
    computed : Series, dict, set or None, default=None
        Which elements' values are the user's own (bold frame) rather than predicted
        (thin frame). A set or list names the computed ones; None marks none.
    cmap : str, default=VALUE_CMAP
    tags : dict or None, default=None
        Symbol -> short text printed in the box's top-right corner (e.g. "R" for
        radioactive); explained by the caller.
    annotate : bool, default=True
        Print the value under the symbol.
    value_format : str, default="{:.2f}"

    Returns
    -------
    Figure
    """
    values = _as_series(values).astype(float)
    if isinstance(computed, (set, frozenset, list, tuple)):
        computed = {symbol: True for symbol in computed}
    computed = _as_series(computed)
    tags = dict(tags or {})
    finite = values[np.isfinite(values.to_numpy())]
    low, high = (float(finite.min()), float(finite.max())) if len(finite) else (0.0, 1.0)
    if high - low < 1e-12:
        low, high = low - 0.5, high + 0.5
    norm_ = Normalize(low, high)
    colour_map = colormaps[cmap]

    figure = _figure(10.5, 6.6)
    ax = figure.add_subplot()
    _draw_grid(ax)
    for symbol in SYMBOLS:
        row, column = table_position(symbol)
        value = values.get(symbol, np.nan)
        if value is None or not np.isfinite(value):
            _box(ax, symbol, _EMPTY_FACE, _EMPTY_EDGE, 0.5)
            ax.text(column, row, symbol, ha="center", va="center", fontsize=7, color="#9a9a9a")
            continue
        face = colour_map(norm_(value))
        is_computed = bool(computed.get(symbol, False))
        _box(
            ax, symbol, face, "black",
            _COMPUTED_FRAME if is_computed else _PREDICTED_FRAME,
            "-" if is_computed else (0, (2, 1.5)),
        )
        ink = _ink_for(face)
        ax.text(column, row - (0.12 if annotate else 0.0), symbol, ha="center", va="center",
                fontsize=8, fontweight="bold", color=ink, gid=f"symbol-{symbol}")
        if annotate:
            ax.text(column, row + 0.24, value_format.format(value), ha="center", va="center",
                    fontsize=5.2, color=ink)
        if symbol in tags:
            ax.text(column + 0.4, row - 0.38, tags[symbol], ha="right", va="top", fontsize=5,
                    color=ink, fontweight="bold")
    # the empty middle of periods 1-3 holds the colour bar and the legend
    x0, y0 = _axes_fraction(3.6, 1.9)
    x1, _ = _axes_fraction(12.4, 1.9)
    bar_axes = ax.inset_axes([x0, y0, x1 - x0, 0.035])
    scalar = ScalarMappable(norm=norm_, cmap=colour_map)
    colour_bar = figure.colorbar(scalar, cax=bar_axes, orientation="horizontal")
    colour_bar.set_label(f"{title} ({unit})" if unit else title, fontsize=8)
    colour_bar.ax.tick_params(labelsize=7)
    handles = [
        Patch(facecolor="white", edgecolor="black", linewidth=_COMPUTED_FRAME, label="computed (bold frame)"),
        Patch(facecolor="white", edgecolor="black", linewidth=_PREDICTED_FRAME, linestyle=(0, (2, 1.5)),
              label="predicted (thin dashed frame)"),
        Patch(facecolor=_EMPTY_FACE, edgecolor=_EMPTY_EDGE, label="no value"),
    ]
    lx, ly = _axes_fraction(8.0, 0.95)
    ax.legend(handles=handles, loc="upper center", bbox_to_anchor=(lx, ly), ncol=3, fontsize=7,
              frameon=False, handlelength=1.6)
    figure.suptitle(title, fontsize=11)
    return figure


@_plain_text
def spread_map(column, title, unit="eV", tags=None):
    """The uncertainty (calibrated std) of one filled column as a periodic map.

    Parameters
    ----------
    column : DataFrame
        Output of :func:`column_values` (value, std, computed).
    title : str
    unit : str, default="eV"
    tags : dict or None

    Returns
    -------
    Figure
        Computed cells show std 0 with a bold frame.
    """
    return periodic_map(
        column["std"], title, unit=unit, computed=column["computed"], cmap=SPREAD_CMAP,
        tags=tags, value_format="{:.2f}",
    )


@_plain_text
def site_preference_map(preference, host, method, quantity, tags=None):
    """Most probable lowest-energy site of each element in one host, as a periodic map.

    Parameters
    ----------
    preference : DataFrame
        Output of ``sites.site_preference`` (element, host, method, quantity, site,
        p_lowest, rank, ...).
    host, method, quantity : str
    tags : dict or None

    Returns
    -------
    Figure
        Colour, hatch and letter name the site; the colour's strength is the
        probability that it is the lowest (pale: uncertain), printed under the letter.
    """
    _require(preference, ["element", "host", "method", "quantity", "site", "p_lowest", "rank"], "The site preference table")
    rows = preference[
        (preference["host"] == host) & (preference["method"] == method) & (preference["quantity"] == quantity)
    ]
    if len(rows) == 0:
        raise DopantgapError(f"No site preference for host {host!r}, method {method!r}, quantity {quantity!r}.")
    sites = list(dict.fromkeys(rows["site"]))
    if len(sites) > len(CATEGORY_COLOURS):
        raise DopantgapError(
            f"Host {host!r} has {len(sites)} sites; the map tells at most {len(CATEGORY_COLOURS)} apart."
        )
    letters = {site: chr(ord("A") + index) for index, site in enumerate(sites)}
    best = rows[rows["rank"] == 1].drop_duplicates("element").set_index("element")
    tags = dict(tags or {})

    figure = _figure(10.5, 6.6)
    ax = figure.add_subplot()
    _draw_grid(ax)
    for symbol in SYMBOLS:
        row, column = table_position(symbol)
        if symbol not in best.index:
            _box(ax, symbol, _EMPTY_FACE, _EMPTY_EDGE, 0.5)
            ax.text(column, row, symbol, ha="center", va="center", fontsize=7, color="#9a9a9a")
            continue
        site = best.at[symbol, "site"]
        probability = float(best.at[symbol, "p_lowest"])
        index = sites.index(site)
        face = _blend_with_white(CATEGORY_COLOURS[index], 0.25 + 0.75 * probability)
        _box(ax, symbol, face, "black", 0.6, hatch=CATEGORY_HATCHES[index], hatch_colour="#555555")
        ax.text(column, row - 0.16, symbol, ha="center", va="center", fontsize=8, fontweight="bold",
                color="black", gid=f"symbol-{symbol}",
                bbox={"boxstyle": "round,pad=0.08", "facecolor": face, "edgecolor": "none"})
        ax.text(column, row + 0.25, f"{letters[site]} {probability:.2f}", ha="center", va="center",
                fontsize=5.2, color="black",
                bbox={"boxstyle": "round,pad=0.05", "facecolor": face, "edgecolor": "none"})
        if symbol in tags:
            ax.text(column + 0.4, row - 0.38, tags[symbol], ha="right", va="top", fontsize=5, fontweight="bold")
    handles = [
        Patch(facecolor=CATEGORY_COLOURS[i], edgecolor="#555555", hatch=CATEGORY_HATCHES[i] or None,
              label=f"{letters[site]} = {site}")
        for i, site in enumerate(sites)
    ]
    lx, ly = _axes_fraction(8.0, 0.95)
    ax.legend(handles=handles, loc="upper center", bbox_to_anchor=(lx, ly), ncol=min(3, len(handles)),
              fontsize=7, frameon=False,
              title="lowest site: letter, then its probability (pale box: less sure)",
              title_fontsize=7)
    figure.suptitle(f"Most probable lowest site: {quantity} in {host} at {method}", fontsize=11)
    return figure


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


@_plain_text
def parity_figure(cv_residuals, scenario=None, calibration=None):
    """Cross-validated predictions against the computed values they hid.

    Parameters
    ----------
    cv_residuals : DataFrame
        ``Surrogate.cv_residuals_``: value (computed), mean (out-of-fold prediction),
        raw_std, scenario, quantity; an optional ``std`` column (calibrated) is used
        as is.
    scenario : str or None, default=None
        Only this scenario; None: all, each with its own colour and marker.
    calibration : ScenarioCalibration or None, default=None
        Turns raw_std into the calibrated std of the error bars (1 std); without it
        and without a ``std`` column the raw std is drawn.

    Returns
    -------
    Figure
    """
    _require(cv_residuals, ["value", "mean", "raw_std", "scenario", "quantity"], "The cross-validated residuals")
    residuals = cv_residuals
    if scenario is not None:
        residuals = residuals[residuals["scenario"] == scenario]
    std = _calibrated_std(residuals, calibration)
    figure = _figure(5.6, 5.2)
    ax = figure.add_subplot()
    truth = residuals["value"].astype(float).to_numpy()
    mean = residuals["mean"].astype(float).to_numpy()
    scenarios = residuals["scenario"].to_numpy()
    order = [s for s in SCENARIOS if s in set(scenarios)] + sorted(set(scenarios) - set(SCENARIOS))
    for name in order:
        rows = scenarios == name
        colour, marker = _SCENARIO_STYLE.get(name, ("#555555", "D"))
        mae = float(np.mean(np.abs(truth[rows] - mean[rows])))
        ax.errorbar(
            truth[rows], mean[rows], yerr=std[rows], fmt=marker, markersize=3.2, color=colour,
            ecolor=colour, elinewidth=0.5, alpha=0.75, capsize=0,
            label=f"{name}: {rows.sum()} cells, mean |error| {mae:.3f} eV",
        )
    if len(truth):
        low = float(min(truth.min(), mean.min()))
        high = float(max(truth.max(), mean.max()))
        pad = 0.04 * (high - low or 1.0)
        ax.plot([low - pad, high + pad], [low - pad, high + pad], color="black", linewidth=0.9,
                linestyle="--", label="predicted = computed")
        ax.set_xlim(low - pad, high + pad)
        ax.set_ylim(low - pad, high + pad)
    ax.set_aspect("equal")
    ax.set_xlabel("computed (eV)")
    ax.set_ylabel("predicted, held out (eV)")
    ax.legend(fontsize=7, loc="upper left")
    ax.set_title("Cross-validation: hidden cells predicted (bars: 1 calibrated std)", fontsize=9)
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


def _short(value):
    try:
        return f"{float(value):.3g}"
    except (TypeError, ValueError):
        return str(value)


# ----------------------------------------------------------------------------- output
@_plain_text
def _png_bytes(figure, dpi):
    buffer = io.BytesIO()
    # no software stamp: the same figure gives the same bytes
    figure.savefig(buffer, format="png", dpi=dpi, metadata={"Software": None})
    return buffer.getvalue()


def _close(figure):
    # figures made here are not registered with pyplot; one that is (made by a caller
    # with pyplot) is released from pyplot's registry too
    pyplot = sys.modules.get("matplotlib.pyplot")
    if pyplot is not None:
        pyplot.close(figure)
    figure.clear()


def save_png(figure, path, dpi=110):
    """Write a figure as PNG atomically, then close it.

    Parameters
    ----------
    figure : Figure
    path : str or Path
    dpi : int, default=110

    Returns
    -------
    int
        Bytes written.
    """
    data = _png_bytes(figure, dpi)
    _close(figure)
    write_bytes_atomic(path, data)
    return len(data)


def figure_to_data_uri(figure, dpi=90):
    """A figure as a ``data:image/png;base64,...`` URI (for self-contained HTML); closes it."""
    data = _png_bytes(figure, dpi)
    _close(figure)
    return "data:image/png;base64," + base64.b64encode(data).decode("ascii")
