"""How much of a table is computed: per host/site/method/quantity column and in all."""

import numpy as np
import pandas as pd

from dopantgap.table.columns import WIDE_PARTS, WIDE_SEPARATOR, shown

__all__ = ["coverage", "coverage_text"]


def coverage(frame):
    """How many elements are computed in each ``host/site/method/quantity`` column.

    Parameters
    ----------
    frame : pandas.DataFrame
        Long table as returned by :func:`read_table`.

    Returns
    -------
    pandas.DataFrame
        One row per column in order of first appearance, with ``host, site, method,
        quantity, column`` (the joined name), ``n_elements_computed``, ``n_elements`` (all
        elements of the table) and ``fraction_computed``. ``attrs["totals"]`` holds
        ``n_rows, n_elements, n_columns, n_cells`` (elements x columns), ``n_computed`` and
        ``fraction_computed`` (NaN for an empty table).
    """
    n_elements = int(frame["element"].nunique())
    grouped = frame.groupby(list(WIDE_PARTS), sort=False)["element"].nunique()
    rows = []
    for parts, n_computed in grouped.items():
        rows.append({
            **dict(zip(WIDE_PARTS, parts)),
            "column": WIDE_SEPARATOR.join(parts),
            "n_elements_computed": int(n_computed),
        })
    result = pd.DataFrame(rows, columns=list(WIDE_PARTS) + ["column", "n_elements_computed"])
    for name in list(WIDE_PARTS) + ["column"]:
        result[name] = result[name].astype(str)
    result["n_elements_computed"] = result["n_elements_computed"].astype(np.int64)
    result["n_elements"] = np.int64(n_elements)
    result["fraction_computed"] = (
        result["n_elements_computed"].to_numpy(dtype=np.float64) / n_elements
        if n_elements else np.full(len(result), np.nan)
    )
    n_columns = len(result)
    n_cells = n_elements * n_columns
    n_computed = int(result["n_elements_computed"].sum())
    result.attrs["totals"] = {
        "n_rows": int(len(frame)),
        "n_elements": n_elements,
        "n_columns": n_columns,
        "n_cells": n_cells,
        "n_computed": n_computed,
        "fraction_computed": n_computed / n_cells if n_cells else float("nan"),
    }
    return result


def _percent(part, whole):
    return f"{100.0 * part / whole:.1f} %" if whole else "n/a"


def coverage_text(frame):
    """Plain-text summary of a table's coverage, for the ``check`` command.

    Parameters
    ----------
    frame : pandas.DataFrame
        Long table as returned by :func:`read_table`.

    Returns
    -------
    str
        A few counts (rows, elements, columns, computed cells out of elements x columns)
        followed by an aligned table of computed cells per host / site / method / quantity.
        Lines end with ``\\n``; control characters in labels are shown escaped.
    """
    table = coverage(frame)
    totals = table.attrs["totals"]
    counts = [
        ("rows read", f"{totals['n_rows']}"),
        ("elements", f"{totals['n_elements']}"),
        ("columns (host/site/method/quantity)", f"{totals['n_columns']}"),
        ("computed cells",
         f"{totals['n_computed']} of {totals['n_cells']} "
         f"({_percent(totals['n_computed'], totals['n_cells'])})"),
    ]
    label_width = max(len(label) for label, _ in counts)
    lines = [f"{label.ljust(label_width)}  {value}" for label, value in counts]
    if len(table):
        headings = ["host", "site", "method", "quantity", "elements computed", "share"]
        body = [
            [shown(row.host), shown(row.site), shown(row.method), shown(row.quantity),
             f"{row.n_elements_computed} of {row.n_elements}",
             _percent(row.n_elements_computed, row.n_elements)]
            for row in table.itertuples(index=False)
        ]
        widths = [max(len(heading), *(len(cells[i]) for cells in body))
                  for i, heading in enumerate(headings)]
        numeric = {4, 5}  # counts read best right-aligned

        def render(cells):
            padded = [cell.rjust(widths[i]) if i in numeric else cell.ljust(widths[i])
                      for i, cell in enumerate(cells)]
            return ("  " + "   ".join(padded)).rstrip()

        lines += ["", "computed cells per host / site / method / quantity:",
                  render(headings)]
        lines += [render(cells) for cells in body]
    return "\n".join(lines) + "\n"
