"""Periodic-table maps of a filled column, its spread and the site preference."""

import numpy as np
import pandas as pd
from matplotlib import colormaps
from matplotlib.cm import ScalarMappable
from matplotlib.colors import Normalize
from matplotlib.patches import Patch, Rectangle

from dopantgap import elements
from dopantgap.errors import DopantgapError
from dopantgap.symbols import SYMBOLS
from dopantgap.plots.style import (
    CATEGORY_COLOURS, CATEGORY_HATCHES, SPREAD_CMAP, VALUE_CMAP,
    _as_series, _blend_with_white, _figure, _ink_for, _plain_text, _require,
)

_EMPTY_FACE = "#eeeeee"
_EMPTY_EDGE = "#c4c4c4"
_COMPUTED_FRAME = 2.4
_PREDICTED_FRAME = 0.5
# the f-block rows sit below the main table, after a gap of half a row
_F_ROW_OFFSET = 2.5
_F_FIRST_COLUMN = 4
_BOTTOM = 9.5 + 0.62
_TOP = 0.38


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
