"""The report's filled-table section: every cell in the page, or, for a large table, the
cells that need a look in the page and the whole table in a CSV beside it."""

from pathlib import Path

from dopantgap.reporting.page import escaped, table_html
from dopantgap.table import write_table

__all__ = ["MAX_EMBEDDED_ROWS", "filled_csv_path", "filled_html"]

#: Most rows of the filled table written into the page (common practice, no source: a
#: sortable HTML table of more rows is slow to open, sort and filter, and 5,000 rows of
#: the demo's columns take about 2 MB of the page). A larger table is written whole to
#: ``filled_csv_path`` and the page shows the rows that most need a look.
MAX_EMBEDDED_ROWS = 5000


def filled_csv_path(out_path):
    """Where a report at ``out_path`` writes its filled table when it is too large to embed.

    Parameters
    ----------
    out_path : str or Path
        The report's HTML file.

    Returns
    -------
    Path
        ``<report stem>_filled.csv`` in the report's folder.
    """
    out_path = Path(out_path)
    return out_path.with_name(f"{out_path.stem}_filled.csv")


def _cautions(filled, extrapolated):
    caution = filled["caution"].astype(str)
    # a cell outside its own level's domain (an element unlike those computed there)
    level_note = "outside the domain of its level"
    outside_cell = filled["outside_domain"].astype(bool) & ~filled["element"].isin(list(extrapolated))
    caution[outside_cell] = [f"{text}; {level_note}" if text else level_note for text in caution[outside_cell]]
    for symbol, reason in extrapolated.items():
        rows = filled["element"] == symbol
        note = f"outside the training data: {reason}"
        caution[rows] = [f"{text}; {note}" if text else note for text in caution[rows]]
    return caution


def filled_html(filled, extrapolated, out_path, max_rows=None):
    """The filled-table section of a report.

    Parameters
    ----------
    filled : DataFrame
        ``fill.fill_table`` output.
    extrapolated : dict
        Element -> why it lies outside the training data (``fill.unfamiliar_elements``).
    out_path : str or Path
        The report's HTML file (the CSV of a large table goes beside it).
    max_rows : int or None, default=None
        Most rows written into the page (None: ``MAX_EMBEDDED_ROWS``). With more, the whole table is written to
        ``filled_csv_path(out_path)`` and the page shows the rows with a caution, then
        the predicted cells with the widest intervals, up to ``max_rows``.

    Returns
    -------
    str
        HTML.
    """
    max_rows = MAX_EMBEDDED_ROWS if max_rows is None else int(max_rows)
    shown = filled.copy()
    shown["caution"] = _cautions(filled, extrapolated)
    intro = ("<p>Every cell, computed (bold element) or predicted. Click a column heading to sort; type to "
             "filter. Rows with a caution are tinted.</p>")
    if len(shown) > max_rows:
        csv_path = filled_csv_path(out_path)
        write_table(filled, csv_path)
        # the cells that most need a look: those with a caution, then the least certain
        predicted = (shown["status"] != "computed").to_numpy()
        order = shown.assign(
            _flagged=(shown["caution"] != "").astype(int), _predicted=predicted.astype(int),
            _width=shown["std"].where(predicted, 0.0),
        ).sort_values(["_flagged", "_predicted", "_width"], ascending=False, kind="stable").index
        shown = shown.loc[order[:max_rows]]
        intro = (
            f"<p>The table has {len(filled):,} cells, too many to show here: all of them are in "
            f'<a href="{escaped(csv_path.name)}">{escaped(csv_path.name)}</a>, beside this page. Shown: the '
            f"{len(shown):,} cells that most need a look (those with a caution, then the predicted cells "
            "with the widest intervals). Click a column heading to sort; type to filter.</p>"
        )
    classes = [
        " ".join(filter(None, ["flagged" if caution else "", "computed" if status == "computed" else ""]))
        for caution, status in zip(shown["caution"], shown["status"])
    ]
    return (
        intro
        + '<input id="filter" type="search" placeholder="filter rows, e.g. Ti or ZnS">'
        + f'<div class="scroll">{table_html(shown, table_id="filled", sortable=True, row_classes=classes, digits=4)}</div>'
    )
