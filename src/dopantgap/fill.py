"""Fill every cell of the table, and of elements never tabulated, with an interval."""

import difflib

import pandas as pd
from threadpoolctl import threadpool_limits

from dopantgap import elements
from dopantgap.errors import DopantgapError
from dopantgap.symbols import SYMBOLS, normalise_symbol
from dopantgap.table import KEY_COLUMNS, WIDE_SEPARATOR, to_wide

__all__ = [
    "FILLED_COLUMNS",
    "FILL_FORMATS",
    "WIDE_CAUTION",
    "WIDE_COMPANIONS",
    "check_fill_format",
    "fill_table",
    "host_outside_note",
    "outside_levels",
    "parse_element_list",
    "unfamiliar_elements",
    "wide_filled",
]

_BLOCK_NAMES = {0: "s", 1: "p", 2: "d", 3: "f"}

#: The leading columns of a filled table, in order; the table's own extra columns follow.
FILLED_COLUMNS = (
    "element", "host", "site", "method", "quantity",
    "value", "std", "lo", "hi", "status", "scenario", "domain_distance", "outside_domain", "caution",
)


#: Layouts of a filled table: one row per cell, or one row per element.
FILL_FORMATS = ("long", "wide")
#: Per-cell columns written beside each value column of the wide layout.
WIDE_COMPANIONS = ("std", "lo", "hi", "status")
#: Name of the wide layout's per-element caution column ("caution" alone is a name the
#: reader keeps for dopantgap's own outputs).
WIDE_CAUTION = "element caution"
# In a companion's name the parts are joined by "|", not by WIDE_SEPARATOR: the reader
# takes every "host/site/method/quantity" column for energies, and anything else for a
# note, so the file reads back into exactly the cells it was written from.
_COMPANION_JOIN = "|"


def check_fill_format(text, option="--format"):
    """A filled table's layout, ``"long"`` or ``"wide"``; anything else refused in one line."""
    layout = str(text).strip().lower()
    if layout not in FILL_FORMATS:
        raise DopantgapError(
            f"{option} {text!r} is not a layout of the filled table; choose {' or '.join(FILL_FORMATS)} "
            f"(long: one row per cell; wide: one row per element)."
        )
    return layout


def parse_element_list(text, option="--elements"):
    """Symbols from a comma-separated list such as ``"Ti, v,Cr"``.

    Raises
    ------
    DopantgapError
        For a blank entry or a word that is not an element symbol.
    """
    symbols = []
    for word in str(text).split(","):
        symbol = normalise_symbol(word)
        if symbol is None:
            near = difflib.get_close_matches(word.strip().capitalize(), SYMBOLS, n=1)
            hint = f" Did you mean {near[0]}?" if near else ""
            shown = word.strip() or "(blank)"
            raise DopantgapError(
                f"{option}: {shown!r} is not an element symbol; give symbols separated by "
                f"commas, e.g. {option} Ti,V,Cr.{hint}"
            )
        if symbol not in symbols:
            symbols.append(symbol)
    return symbols


def _caution(symbols):
    flags = elements.element_flags(list(symbols))
    return {symbol: flags.at[symbol, "note"] for symbol in flags.index}


def fill_table(surrogate, element_symbols=None, level=0.9, new_hosts=None):
    """Every cell of every element, computed or predicted with a central interval.

    Parameters
    ----------
    surrogate : Surrogate
        A fitted surrogate.
    element_symbols : sequence of str or None, default=None
        Elements to add to those of the table (never computed ones get the
        ``new-element`` scenario and its wider interval).
    level : float, default=0.9
        Probability content of ``lo``..``hi``.
    new_hosts : NewHostPlan or None, default=None
        Hosts with no computed cell to fill too (``new_hosts.plan_new_hosts``): their
        cells get the ``new-host`` scenario, its own wider interval, and a caution
        when the host lies outside the table's hosts.

    Returns
    -------
    DataFrame
        One row per element and host/site/method/quantity column of the table, with
        ``FILLED_COLUMNS`` then the table's extra columns (filled on computed rows,
        empty on predicted ones). Computed values are the table's own, unchanged.
    """
    if not 0.0 < float(level) < 1.0:
        raise DopantgapError(f"--level must lie strictly between 0 and 1 (e.g. 0.9), got {level}.")
    table = surrogate.table_
    symbols = list(dict.fromkeys(table["element"]))
    for symbol in element_symbols or ():
        canonical = normalise_symbol(symbol)
        if canonical is None:
            raise DopantgapError(f"{symbol!r} is not an element symbol.")
        if canonical not in symbols:
            symbols.append(canonical)
    columns = table[["host", "site", "method", "quantity"]].drop_duplicates()
    if new_hosts is not None:
        surrogate = new_hosts.surrogate
        columns = pd.concat([columns, new_hosts.columns], ignore_index=True)
    grid = pd.DataFrame(
        [
            {"element": symbol, "host": host, "site": site, "method": method, "quantity": quantity}
            for symbol in symbols
            for host, site, method, quantity in columns.itertuples(index=False, name=None)
        ]
    )
    # one BLAS thread: the chunks' matrices are a few hundred cells wide, where a second
    # thread gains nothing idle and spins beside any busy process (the 3,000-cell model of
    # benchmarks/README.md filled in 6.6 s on one thread, 6.9 s on two idle, 8.8 s against
    # 17.1 s beside a busy process)
    with threadpool_limits(limits=1):
        filled = surrogate.predict(grid, level=float(level))
    notes = _caution(symbols)
    filled["caution"] = filled["element"].map(notes).fillna("")
    if new_hosts is not None and new_hosts.outside:
        for host, reason in new_hosts.outside.items():
            rows = (filled["host"] == host).to_numpy()
            filled.loc[rows, "outside_domain"] = True
            note = host_outside_note(host, reason)
            filled.loc[rows, "caution"] = [
                f"{text}; {note}" if text else note for text in filled.loc[rows, "caution"]
            ]
    extras = [c for c in table.columns if c not in KEY_COLUMNS and c != "value" and not c.startswith("_")]
    if extras:
        filled = filled.merge(table[list(KEY_COLUMNS) + extras], on=list(KEY_COLUMNS), how="left")
        for column in extras:
            filled[column] = filled[column].astype(object).where(filled[column].notna(), "")
    return filled[list(FILLED_COLUMNS) + extras]


def host_outside_note(host, reason):
    """The caution a new host outside the table's hosts puts on each of its filled cells
    (``fill_table``'s ``caution`` column), so that the command line can recognise it."""
    return f"host {host} lies outside the table's hosts ({reason})"


def _companion_name(column, kind):
    return f"{column.replace(WIDE_SEPARATOR, _COMPANION_JOIN)} {kind}"


def wide_filled(filled):
    """A filled table in the wide layout: one row per element, one column per cell kind.

    Parameters
    ----------
    filled : DataFrame
        As returned by :func:`fill_table`.

    Returns
    -------
    DataFrame
        Columns ``element``; the table's extra columns that hold one value per element
        (as the reader's wide layout keeps them) and ``element caution``; then, per
        ``host/site/method/quantity`` column, its value and the companions
        ``host|site|method|quantity std``, ``... lo``, ``... hi``, ``... status``
        (:data:`WIDE_COMPANIONS`), and ``... <extra>`` for an extra column whose text
        differs between an element's cells. Values come from :func:`table.to_wide`, so
        computed cells are the table's own numbers, unchanged; the scenario and domain
        columns stay in the long layout. Read back with ``read_table``, the file gives
        every cell its value (the status columns say which were computed).
    """
    extras = [column for column in filled.columns if column not in FILLED_COLUMNS]
    values = to_wide(filled)
    computed = filled[filled["status"] == "computed"]
    per_element, per_cell = [], []
    for column in extras:
        distinct = computed.groupby("element", sort=False)[column].nunique()
        (per_element if (distinct <= 1).all() else per_cell).append(column)
    wide = pd.DataFrame({"element": values.index.to_numpy(dtype=object)})
    for column in per_element:
        first = computed.groupby("element", sort=False)[column].first()
        wide[column] = wide["element"].map(first).fillna("").to_numpy(dtype=object)
    caution = filled.groupby("element", sort=False)["caution"].first()
    wide[WIDE_CAUTION] = wide["element"].map(caution).fillna("").to_numpy(dtype=object)
    spread = {kind: to_wide(filled, values=kind) for kind in WIDE_COMPANIONS}
    # a note that differs between cells: blank where the cell was not computed
    spread.update({kind: to_wide(filled, values=kind).fillna("") for kind in per_cell})
    parts = [wide]
    for column in values.columns:
        block = {column: values[column].to_numpy()}
        block.update({_companion_name(column, kind): frame[column].to_numpy() for kind, frame in spread.items()})
        parts.append(pd.DataFrame(block))
    return pd.concat(parts, axis=1)


def unfamiliar_elements(surrogate, element_symbols):
    """Elements outside the model's domain of applicability, with the reason.

    The rule is ``domain.ElementDomain``'s (fitted on the table's elements): a block of
    the periodic table that no table element belongs to (for example a lanthanide when
    the table holds none), or a distance from every table element in standardised
    descriptors larger than 95 % of the table's elements are from their nearest
    neighbour. Their estimates are extrapolations and deserve a warning, whatever
    their interval says.

    Returns
    -------
    dict
        Symbol -> reason (a short phrase), for the elements outside.
    """
    symbols = list(dict.fromkeys(element_symbols))
    if not symbols:
        return {}
    domain = surrogate.element_domain()
    outside = domain.outside(symbols)
    new_block = domain.new_block(symbols)
    distance = domain.distance(symbols)
    nearest = domain.nearest(symbols)
    blocks = elements.descriptor_table(symbols, values=surrogate.descriptor_values_)["block_index"]
    reasons = {}
    for position, symbol in enumerate(symbols):
        if not outside[position]:
            continue
        if new_block[position]:
            reasons[symbol] = (
                f"in the {_BLOCK_NAMES[int(blocks.iat[position])]} block, and the table has no element there"
            )
        else:
            reasons[symbol] = (
                f"{distance[position]:.2f} from the nearest table element ({nearest[position]}) in "
                f"standardised descriptors, beyond the domain limit {domain.threshold_:.2f}"
            )
    return reasons


def outside_levels(surrogate, cells, skip=()):
    """Predicted cells whose element lies outside the domain of the cell's own level.

    An element close to the table's elements can still be unlike every element computed
    at the expensive level (a halogen when only metals were computed with the hybrid
    functional): its estimates at that level extrapolate the correction between levels.
    The rule is ``domain.LevelDomain``'s (distance to the elements computed at the cell's
    level, in its host where that host has ten or more, against the table's domain
    threshold; or a periodic-table block none of them belongs to).

    Parameters
    ----------
    surrogate : Surrogate
        Fitted.
    cells : DataFrame
        Predicted cells (columns element, host, site, method, quantity); computed ones
        are ignored when a ``status`` column says so.
    skip : collection of str, default=()
        Elements already cautioned as a whole (``unfamiliar_elements``).

    Returns
    -------
    DataFrame
        One row per element, method and quantity with cells outside: ``element``,
        ``method``, ``quantity``, ``n_cells``, ``nearest`` (nearest element computed at
        that level) and ``reason`` (a short phrase).
    """
    columns = ["element", "method", "quantity", "n_cells", "nearest", "reason"]
    if len(cells) == 0:
        return pd.DataFrame(columns=columns)
    cells = cells.reset_index(drop=True)
    if "status" in cells.columns:
        cells = cells[cells["status"] != "computed"].reset_index(drop=True)
    cells = cells[~cells["element"].isin(set(skip))].reset_index(drop=True)
    if len(cells) == 0:
        return pd.DataFrame(columns=columns)
    domain = surrogate.level_domain()
    flagged = cells.assign(
        outside=domain.outside(cells), distance=domain.distance(cells), nearest=domain.nearest(cells)
    )
    flagged = flagged[flagged["outside"]]
    threshold = domain.elements_.threshold_
    rows = []
    for (element, method, quantity), part in flagged.groupby(["element", "method", "quantity"], sort=False):
        distance = float(part["distance"].min())
        nearest = str(part["nearest"].iat[0])
        if not nearest:
            reason = f"no element has {quantity} computed at {method}"
        elif distance <= threshold:
            reason = f"its block has no element computed at {method}"
        else:
            reason = (
                f"{distance:.2f} from the nearest element computed at {method} ({nearest}), "
                f"beyond the domain limit {threshold:.2f}"
            )
        rows.append({"element": element, "method": method, "quantity": quantity, "n_cells": len(part),
                     "nearest": nearest, "reason": reason})
    return pd.DataFrame(rows, columns=columns)
