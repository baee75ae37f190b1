"""Periodic-table maps of a filled column, its spread and the site preference.

The maps share one tile design of our own. A tile with a value is filled with the
value's colour and carries, from top to bottom: the element symbol (left) and its
caution letters (right, on a white badge), the value, the uncertainty as text
("± std") and as a bar along the tile's foot (full tile = the scale printed in the
legend). Computed cells have a thick solid frame and no bar (their value is the
user's own); cells outside the domain of their level a thick dashed frame; elements
without a value are outlines only. The colour scale is a strip of its own below the
table, beside a legend that draws one small tile of each kind.

Every map is drawn on one axes in tile units (one tile pitch = 1) so that its figure
has a known width: :data:`MAP_WIDTH_INCHES`. Tile text is at least
:data:`TILE_TEXT_POINTS` points, so a map shown ``w`` CSS pixels wide prints tile
text ``TILE_TEXT_POINTS / 72 * w / MAP_WIDTH_INCHES`` pixels tall (its font size),
whatever the PNG's resolution: 11.8 px at 1300 px.
"""

import numpy as np
import pandas as pd
from matplotlib import colormaps
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.colors import Normalize
from matplotlib.figure import Figure
from matplotlib.patches import FancyBboxPatch, Rectangle
from matplotlib.ticker import MaxNLocator

from dopantgap import elements
from dopantgap.errors import DopantgapError
from dopantgap.symbols import SYMBOLS
from dopantgap.plots.style import (
    CATEGORY_COLOURS, CATEGORY_HATCHES, SPREAD_CMAP, VALUE_CMAP,
    _as_series, _blend_with_white, _ink_for, _plain_text, _require,
)

#: Width of every map figure (inches); the page sizes it from this.
MAP_WIDTH_INCHES = 13.0
#: Smallest font (points) of any text printed on a tile.
TILE_TEXT_POINTS = 8.5

_SYMBOL_POINTS = 11.5
_VALUE_POINTS = 10.0
_SPREAD_POINTS = TILE_TEXT_POINTS
_BADGE_POINTS = TILE_TEXT_POINTS
_LABEL_POINTS = 9.0
_TITLE_POINTS = 13.0

_TILE = 0.92
_HALF = _TILE / 2
_ROUNDING = 0.07
_EMPTY_EDGE = "#b9b9b9"
_EMPTY_INK = "#8c8c8c"
_FRAME_INK = "#1b1b1b"
_COMPUTED_FRAME = 3.0
_PREDICTED_FRAME = 0.6
_OUTSIDE_FRAME = 2.4
_OUTSIDE_DASHES = (0, (2.2, 1.4))
_BAR_TRACK = "none"

# x extent of the drawing (tile units): period numbers left of group 1
_LEFT, _RIGHT = -0.25, 18.55
# f-block rows: a third of a row below period 7, Ce and Th under group 4 (La and Ac
# keep group 3, so each f row continues from its group-3 element)
_F_GAP = 0.35
_F_FIRST_COLUMN = 4


def _positions():
    table = elements.descriptor_table(list(SYMBOLS))
    positions = {}
    for symbol, row in table.iterrows():
        number = int(row["atomic_number"])
        if int(row["block_index"]) == 3:
            first = 58 if number < 90 else 90
            positions[symbol] = (float(row["period"]) + 2.0 + _F_GAP, float(_F_FIRST_COLUMN + number - first))
        else:
            positions[symbol] = (float(row["period"]), float(row["group"]))
    return positions


_POSITION_CACHE = {}


def table_position(symbol):
    """Row and column of an element's tile in the periodic-table maps.

    Main-table elements sit at (period, group) of the 18-column table (La and Ac in
    group 3); the f-block elements (Ce-Lu, Th-Lr) in two rows a third of a row below
    period 7, starting under group 4, so each row continues from La and Ac.

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
        std, status, ...; ``outside_domain`` is used when present).
    host, site, method, quantity : str
        The column.

    Returns
    -------
    DataFrame
        Index element; columns value (eV), std (eV), computed (bool) and outside
        (bool: a predicted cell outside the domain of its level; all False without
        an ``outside_domain`` column).
    """
    _require(filled, ["element", "host", "site", "method", "quantity", "value", "std", "status"], "The filled table")
    rows = filled[
        (filled["host"] == host) & (filled["site"] == site)
        & (filled["method"] == method) & (filled["quantity"] == quantity)
    ]
    computed = (rows["status"] == "computed").to_numpy()
    if "outside_domain" in rows.columns:
        outside = rows["outside_domain"].fillna(False).astype(bool).to_numpy() & ~computed
    else:
        outside = np.zeros(len(rows), dtype=bool)
    return pd.DataFrame(
        {
            "value": rows["value"].astype(float).to_numpy(),
            "std": rows["std"].astype(float).to_numpy(),
            "computed": computed,
            "outside": outside,
        },
        index=pd.Index(rows["element"].to_numpy(), name="element"),
    )


# ----------------------------------------------------------------------------- canvas
def _uses_f_rows(symbols):
    return any(table_position(symbol)[0] > 7.5 for symbol in symbols)


def _canvas(title, show_f_rows, footer_rows):
    """A figure whose single axes spans it, in tile units; returns (figure, ax, footer top)."""
    last_row = 9.0 + _F_GAP if show_f_rows else 7.0
    top = -0.62
    footer = last_row + _HALF + 0.3
    bottom = footer + footer_rows
    unit = MAP_WIDTH_INCHES / (_RIGHT - _LEFT)
    figure = Figure(figsize=(MAP_WIDTH_INCHES, (bottom - top) * unit))
    FigureCanvasAgg(figure)
    ax = figure.add_axes((0.0, 0.0, 1.0, 1.0))
    ax.set_xlim(_LEFT, _RIGHT)
    ax.set_ylim(bottom, top)
    ax.set_aspect("equal")
    ax.set_axis_off()
    ax.text(0.55, top + 0.12, title, ha="left", va="top", fontsize=_TITLE_POINTS, fontweight="bold",
            gid="map-title")
    for group in range(1, 19):
        ax.text(group, 1 - _HALF - 0.08, str(group), ha="center", va="bottom", fontsize=_LABEL_POINTS - 1,
                color=_EMPTY_INK)
    for period in range(1, 8):
        ax.text(0.45, period, str(period), ha="right", va="center", fontsize=_LABEL_POINTS - 1, color=_EMPTY_INK)
    if show_f_rows:
        for label, row in (("4f, after La", 8.0 + _F_GAP), ("5f, after Ac", 9.0 + _F_GAP)):
            ax.text(_F_FIRST_COLUMN - 0.58, row, label, ha="right", va="center", fontsize=_LABEL_POINTS,
                    color=_EMPTY_INK)
    figure.tile_text_points_ = TILE_TEXT_POINTS
    return figure, ax, footer


def _tile(ax, symbol, face, edge, linewidth, linestyle="-", hatch=None, hatch_colour="#6b6b6b"):
    row, column = table_position(symbol)
    shape = {"boxstyle": f"round,pad=0,rounding_size={_ROUNDING}"}
    corner = (column - _HALF, row - _HALF)
    if hatch:
        # hatch lines take a patch's edge colour: a light hatch on the tile, the frame
        # drawn apart keeps its own colour
        patch = FancyBboxPatch(corner, _TILE, _TILE, **shape, facecolor=face, edgecolor=hatch_colour,
                               linewidth=0.0, hatch=hatch, gid=f"box-{symbol}")
        ax.add_patch(patch)
        ax.add_patch(FancyBboxPatch(corner, _TILE, _TILE, **shape, fill=False, edgecolor=edge,
                                    linewidth=linewidth, linestyle=linestyle, gid=f"frame-{symbol}"))
        return patch
    patch = FancyBboxPatch(corner, _TILE, _TILE, **shape, facecolor=face, edgecolor=edge, linewidth=linewidth,
                           linestyle=linestyle, gid=f"box-{symbol}")
    ax.add_patch(patch)
    return patch


def _outline(ax, symbol):
    row, column = table_position(symbol)
    _tile(ax, symbol, "none", _EMPTY_EDGE, 0.7)
    ax.text(column, row, symbol, ha="center", va="center", fontsize=_LABEL_POINTS, color=_EMPTY_INK,
            gid=f"symbol-{symbol}")


def _badge(ax, x, y, text, ink="black"):
    return ax.text(x, y, text, ha="right", va="center", fontsize=_BADGE_POINTS, fontweight="bold", color=ink,
                   bbox={"boxstyle": "round,pad=0.12", "facecolor": "white", "edgecolor": "#444444",
                         "linewidth": 0.6})


def _bar(ax, column, row, share, ink, gid, track=_BAR_TRACK):
    """The uncertainty bar along a tile's foot: an open track outlined in ink, the std filled in ink."""
    left, y, width, height = column - 0.38, row + _HALF - 0.13, 0.76, 0.075
    ax.add_patch(Rectangle((left, y), width, height, facecolor=track, edgecolor=ink, linewidth=0.6))
    ax.add_patch(Rectangle((left, y), width * float(np.clip(share, 0.0, 1.0)), height, facecolor=ink,
                           edgecolor="none", gid=gid))


def _nice_ceiling(value):
    """Smallest of 1, 2, 2.5, 5 x 10^k at or above ``value`` (bar scales read easily)."""
    if not np.isfinite(value) or value <= 0:
        return 1.0
    power = 10.0 ** np.floor(np.log10(value))
    for step in (1.0, 2.0, 2.5, 5.0, 10.0):
        if step * power >= value * (1 - 1e-9):
            return step * power
    return 10.0 * power


def _colour_strip(ax, footer, norm_, colour_map, label):
    """The colour scale as a strip of its own under the table, ticks below it."""
    left, right, y0, y1 = 1.0, 8.6, footer + 0.5, footer + 0.82
    gradient = np.linspace(0.0, 1.0, 256)[np.newaxis, :]
    ax.imshow(gradient, cmap=colour_map, extent=(left, right, y1, y0), aspect="auto", interpolation="bilinear",
              gid="scale-strip")
    ax.add_patch(Rectangle((left, y0), right - left, y1 - y0, fill=False, edgecolor="#444444", linewidth=0.6))
    ax.text(left, y0 - 0.1, label, ha="left", va="bottom", fontsize=_LABEL_POINTS + 0.5, gid="scale-label")
    for tick in MaxNLocator(nbins=6).tick_values(norm_.vmin, norm_.vmax):
        if norm_.vmin - 1e-12 <= tick <= norm_.vmax + 1e-12:
            x = left + (right - left) * (tick - norm_.vmin) / (norm_.vmax - norm_.vmin)
            ax.plot([x, x], [y1, y1 + 0.1], color="#444444", linewidth=0.7)
            ax.text(x, y1 + 0.14, f"{tick:g}", ha="center", va="top", fontsize=_LABEL_POINTS)


def _legend_tile(ax, x, y, caption, draw):
    """One entry of the marks' legend: a small tile at (x, y) drawn by ``draw``, caption right of it."""
    size = 0.5
    draw(x, y, size)
    ax.text(x + size + 0.15, y + size / 2, caption, ha="left", va="center", fontsize=_LABEL_POINTS,
            gid="legend-entry")


def _legend(ax, footer, entries):
    """Entries laid out in two rows of three at the footer's right."""
    for index, (caption, draw) in enumerate(entries):
        column, row = index % 3, index // 3
        _legend_tile(ax, 9.4 + 3.05 * column, footer + 0.3 + 0.72 * row, caption, draw)


def _legend_box(ax, face, edge, linewidth, linestyle="-", hatch=None):
    def draw(x, y, size):
        ax.add_patch(FancyBboxPatch((x, y), size, size, boxstyle=f"round,pad=0,rounding_size={_ROUNDING / 2}",
                                    facecolor=face, edgecolor=edge, linewidth=linewidth, linestyle=linestyle,
                                    hatch=hatch))
    return draw


# ----------------------------------------------------------------------------- value map
@_plain_text
def periodic_map(values, title, unit="eV", computed=None, cmap=VALUE_CMAP, tags=None,
                 annotate=True, value_format="{:.2f}", spread=None, outside=None, spread_scale=None,
                 value_range=None, scale_label=None, computed_caption="computed"):
    """A periodic table of one value per element, with its uncertainty on each tile.

    Parameters
    ----------
    values : Series or dict
        Element symbol -> value; elements absent or NaN are drawn as outlines only.
    title : str
        Figure title; also the colour scale's label (with ``unit``).
    unit : str, default="eV"
    computed : Series, dict, set or None, default=None
        Which elements' values are the user's own (thick solid frame) rather than
        predicted. A set or list names the computed ones; None marks none.
    cmap : str, default=VALUE_CMAP
    tags : dict or None, default=None
        Symbol -> short caution text printed on a white badge in the tile's top-right
        corner (e.g. "R" for radioactive); explained by the caller.
    annotate : bool, default=True
        Print the value (and ``± std`` where ``spread`` is given) on the tile.
    value_format : str, default="{:.2f}"
    spread : Series, dict or None, default=None
        Symbol -> standard deviation of a predicted value: printed as ``± std`` and
        drawn as a bar along the tile's foot (computed elements get neither).
    outside : Series, dict, set or None, default=None
        Elements whose predicted value lies outside the domain (thick dashed frame).
    spread_scale : float or None, default=None
        The std a full-width bar stands for; None: the largest std shown, rounded up
        to 1, 2, 2.5 or 5 times a power of ten.
    value_range : (float, float) or None, default=None
        Ends of the colour scale (e.g. (0, 1) for probabilities); None: the values' range.
    scale_label : str or None, default=None
        Label of the colour scale; None: the title with the unit.
    computed_caption : str, default="computed"
        Legend caption of the thick solid frame.

    Returns
    -------
    Figure
        ``MAP_WIDTH_INCHES`` wide; ``tile_text_points_`` holds the smallest tile font.
    """
    values = _as_series(values).astype(float)
    computed = _as_flags(computed)
    outside = _as_flags(outside)
    spread = _as_series(spread).astype(float) if spread is not None else None
    tags = dict(tags or {})
    finite = values[np.isfinite(values.to_numpy())]
    low, high = (float(finite.min()), float(finite.max())) if len(finite) else (0.0, 1.0)
    if value_range is not None:
        low, high = (float(end) for end in value_range)
    if high - low < 1e-12:
        low, high = low - 0.5, high + 0.5
    norm_ = Normalize(low, high)
    colour_map = colormaps[cmap]
    shown_spread = pd.Series(dtype=float)
    if spread is not None:
        predicted = [s for s in finite.index if not computed.get(s, False)]
        shown_spread = spread.reindex(predicted).dropna()
        shown_spread = shown_spread[shown_spread > 0]
    scale = float(spread_scale) if spread_scale else _nice_ceiling(float(shown_spread.max()) if len(shown_spread) else 0.0)

    show_f_rows = _uses_f_rows(finite.index)
    figure, ax, footer = _canvas(title, show_f_rows, footer_rows=1.85)
    for symbol in SYMBOLS:
        value = values.get(symbol, np.nan)
        if value is None or not np.isfinite(value):
            if show_f_rows or table_position(symbol)[0] < 7.5:
                _outline(ax, symbol)
            continue
        row, column = table_position(symbol)
        face = colour_map(norm_(value))
        ink = _ink_for(face)
        is_computed = bool(computed.get(symbol, False))
        is_outside = bool(outside.get(symbol, False)) and not is_computed
        if is_computed:
            _tile(ax, symbol, face, _FRAME_INK, _COMPUTED_FRAME)
        elif is_outside:
            _tile(ax, symbol, face, _FRAME_INK, _OUTSIDE_FRAME, _OUTSIDE_DASHES)
        else:
            _tile(ax, symbol, face, _FRAME_INK, _PREDICTED_FRAME)
        ax.text(column - 0.37, row - 0.25, symbol, ha="left", va="center", fontsize=_SYMBOL_POINTS,
                fontweight="bold", color=ink, gid=f"symbol-{symbol}")
        if symbol in tags:
            _badge(ax, column + 0.38, row - 0.26, tags[symbol]).set_gid(f"tag-{symbol}")
        if annotate:
            ax.text(column, row + 0.02, value_format.format(value), ha="center", va="center",
                    fontsize=_VALUE_POINTS, color=ink, gid=f"value-{symbol}")
        std = shown_spread.get(symbol, np.nan) if spread is not None else np.nan
        if np.isfinite(std):
            if annotate:
                ax.text(column, row + 0.2, f"±{value_format.format(std)}", ha="center", va="center",
                        fontsize=_SPREAD_POINTS, color=ink, gid=f"spread-{symbol}")
            _bar(ax, column, row, std / scale, ink, gid=f"bar-{symbol}")

    if scale_label is None:
        scale_label = f"{title} ({unit})" if unit else title
    _colour_strip(ax, footer, norm_, colour_map, scale_label)
    middle = colour_map(0.5)
    entries = [
        (computed_caption, _legend_box(ax, middle, _FRAME_INK, _COMPUTED_FRAME)),
        ("predicted", _legend_box(ax, middle, _FRAME_INK, _PREDICTED_FRAME)),
        ("outside the domain", _legend_box(ax, middle, _FRAME_INK, _OUTSIDE_FRAME, _OUTSIDE_DASHES)),
        ("caution (letters)", lambda x, y, size: _badge(ax, x + size, y + size / 2, "R")),
        ("not in the table", _legend_box(ax, "none", _EMPTY_EDGE, 0.7)),
    ]
    if spread is not None:
        def draw_bar(x, y, size):
            ax.add_patch(Rectangle((x, y + size * 0.35), size, size * 0.3, facecolor=_BAR_TRACK,
                                   edgecolor="black", linewidth=0.5))
            ax.add_patch(Rectangle((x, y + size * 0.35), size * 0.6, size * 0.3, facecolor="black"))
        entries.insert(2, (f"bar: std, full = {scale:g} {unit}".rstrip(), draw_bar))
    _legend(ax, footer, entries)
    figure.spread_scale_ = scale if spread is not None else None
    return figure


def _as_flags(flags):
    if isinstance(flags, (set, frozenset, list, tuple)):
        flags = {symbol: True for symbol in flags}
    return _as_series(flags)


@_plain_text
def spread_map(column, title, unit="eV", tags=None):
    """The uncertainty (calibrated std) of one filled column as a periodic map.

    Parameters
    ----------
    column : DataFrame
        Output of :func:`column_values` (value, std, computed; outside if present).
    title : str
    unit : str, default="eV"
    tags : dict or None

    Returns
    -------
    Figure
        Computed cells show std 0 with a thick frame.
    """
    outside = column["outside"] if "outside" in column.columns else None
    return periodic_map(
        column["std"], title, unit=unit, computed=column["computed"], cmap=SPREAD_CMAP,
        tags=tags, value_format="{:.2f}", outside=outside,
    )


# ----------------------------------------------------------------------------- site map
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
        Colour, hatch and letter name the site (the texts sit on plain patches of the
        tile's colour); the colour's strength and the bar along the tile's foot are
        the probability that it is the lowest (pale, short: uncertain), also printed
        after the letter.
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

    title = f"Most probable lowest site: {quantity} in {host} at {method}"
    show_f_rows = _uses_f_rows(best.index)
    n_legend_rows = -(-(len(sites) + 1) // 3)
    figure, ax, footer = _canvas(title, show_f_rows, footer_rows=0.3 + 0.72 * max(n_legend_rows, 2) + 0.2)
    for symbol in SYMBOLS:
        row, column = table_position(symbol)
        if symbol not in best.index:
            if show_f_rows or row < 7.5:
                _outline(ax, symbol)
            continue
        site = best.at[symbol, "site"]
        probability = float(best.at[symbol, "p_lowest"])
        index = sites.index(site)
        face = _blend_with_white(CATEGORY_COLOURS[index], 0.25 + 0.75 * probability)
        _tile(ax, symbol, face, _FRAME_INK, 0.6, hatch=CATEGORY_HATCHES[index])
        background = {"boxstyle": "round,pad=0.08", "facecolor": face, "edgecolor": "none"}
        ax.text(column - 0.37, row - 0.25, symbol, ha="left", va="center", fontsize=_SYMBOL_POINTS,
                fontweight="bold", color="black", gid=f"symbol-{symbol}", bbox=background)
        if symbol in tags:
            _badge(ax, column + 0.38, row - 0.26, tags[symbol]).set_gid(f"tag-{symbol}")
        ax.text(column, row + 0.1, f"{letters[site]} {probability:.2f}", ha="center", va="center",
                fontsize=_VALUE_POINTS, color="black", bbox=background, gid=f"value-{symbol}")
        _bar(ax, column, row, probability, "black", gid=f"bar-{symbol}", track="white")
    entries = [
        (f"{letters[site]} = {site}", _legend_box(ax, CATEGORY_COLOURS[i], _FRAME_INK, 0.6,
                                                   hatch=CATEGORY_HATCHES[i] or None))
        for i, site in enumerate(sites)
    ]
    entries.append(("not in the table", _legend_box(ax, "none", _EMPTY_EDGE, 0.7)))
    ax.text(1.0, footer + 0.3, "Tile: site letter and the probability that it\nis the lowest (also the "
            "bar; pale tile: less sure).\nCorner letters: caution.", ha="left", va="top",
            fontsize=_LABEL_POINTS + 0.5, gid="legend-entry")
    _legend(ax, footer, entries)
    return figure
